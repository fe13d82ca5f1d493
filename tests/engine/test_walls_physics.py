"""Slow physics checks of the domain-wall energy kappa = (E_wall - E_ref) / L_y on L x L strips (pin = 2).

* Valence-bond solid: the J-Q3 model at J = 0 (Q = 1) has columnar valence-bond order (Lou, Sandvik and
  Balents, Phys. Rev. Lett. 99, 207203 (2007), from memory).  A wall between two ordered domains then
  costs a finite energy per unit length: kappa is clearly positive at L = 8 and 16, and kappa L grows
  with L.  The growth is slow at these sizes (kappa falls from L = 8 to 16, by about L^-0.6 for the pi
  wall, in our runs), so it is tested on the sum over both walls of kappa L (16) - kappa L (8), which
  these statistics resolve by five error bars (measured: pi 0.71(2) -> 0.91(3), pi/2 0.31(2) -> 0.36(3)).
* Neel phase: the square-lattice Heisenberg model (J = 1, no Q term) has no valence-bond order, so the
  pinned dimer patterns heal within a few lattice spacings and no wall energy survives: kappa is
  consistent with zero at every size, far below the valence-bond solid's at the same L.

Fixed seeds; beta = L; pin = 2; tolerances of 3 to 4 combined standard errors (binning analysis of the
bins, whose energies are uncorrelated at these bin lengths).
"""

from __future__ import annotations

import numpy as np
import pytest
from qmc.models import DomainWall, HeisenbergTerm, ProjectorProductTerm, build_lattice, compile_model

from qmc.analysis.binning import error_estimate
from qmc.chain.simulation import Simulation
from qmc.engine.rng import stream_seed

pytestmark = pytest.mark.slow

SIZES = (8, 16)
WALLS = ("none", "pi/2", "pi", "none-x")
STEPS = {"jq3-J0": dict(warmup_steps=10000, measure_steps=240000, bins=120),
         "heisenberg": dict(warmup_steps=5000, measure_steps=64000, bins=64)}


def _kappas(terms, name: str) -> dict[str, dict[int, tuple[float, float]]]:
    """{wall: {L: (kappa, error)}} for the pi and pi/2 walls."""
    out: dict[str, dict[int, tuple[float, float]]] = {"pi": {}, "pi/2": {}}
    for L in SIZES:
        lattice = build_lattice("square", (L, L), ("open", "periodic"))
        energy = {}
        for w in WALLS:
            sim = Simulation(compile_model(lattice, terms, wall=DomainWall(w, 2.0)), float(L),
                             seed_words=stream_seed(77, f"{name}:L{L}:{w}"), **STEPS[name])
            rows = sim.advance(10**9)
            est = error_estimate(rows[:, sim.bin_names.index("energy")])
            energy[w] = (est.mean * L * L, est.error * L * L)
        for wall, refs in (("pi", ("none",)), ("pi/2", ("none", "none-x"))):
            ref = np.mean([energy[r][0] for r in refs])
            err = np.sqrt(energy[wall][1] ** 2 + sum(energy[r][1] ** 2 for r in refs) / len(refs) ** 2)
            out[wall][L] = ((energy[wall][0] - ref) / L, err / L)
    return out


@pytest.fixture(scope="module")
def vbs():
    return _kappas([ProjectorProductTerm("column-of-three", 1.0)], "jq3-J0")


@pytest.fixture(scope="module")
def neel():
    return _kappas([HeisenbergTerm("nn", 1.0)], "heisenberg")


@pytest.mark.parametrize("wall", ["pi", "pi/2"])
def test_a_wall_in_the_valence_bond_solid_costs_a_finite_energy_per_length(vbs, wall):
    for L in SIZES:
        kappa, err = vbs[wall][L]
        assert kappa > 4 * err, (L, kappa, err)


def test_kappa_L_grows_with_L_in_the_valence_bond_solid(vbs):
    growth = [16 * vbs[w][16][0] - 8 * vbs[w][8][0] for w in ("pi", "pi/2")]
    errors = [np.hypot(16 * vbs[w][16][1], 8 * vbs[w][8][1]) for w in ("pi", "pi/2")]
    assert sum(growth) > 3 * np.hypot(*errors), (growth, errors)
    assert all(g > 0 for g in growth), growth


@pytest.mark.parametrize("wall", ["pi", "pi/2"])
def test_no_wall_energy_survives_in_the_neel_phase(vbs, neel, wall):
    for L in SIZES:
        kappa, err = neel[wall][L]
        assert abs(kappa) < 4 * err, (L, kappa, err)
        k_vbs, e_vbs = vbs[wall][L]
        assert k_vbs - kappa > 4 * np.hypot(e_vbs, err) and abs(kappa) + 4 * err < k_vbs, L
