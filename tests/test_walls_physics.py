"""Slow physics checks of the domain-wall energy kappa = (E_wall - E_ref) / L_y on L x L strips (pin = 2).

* Valence-bond solid: the J-Q3 model at J = 0 (Q = 1) has columnar valence-bond order (Lou, Sandvik and
  Balents, Phys. Rev. Lett. 99, 207203 (2007), from memory).  A wall between two ordered domains then
  costs a finite energy per unit length: kappa is clearly positive at L = 8, 12, 16, and kappa L grows
  with L.  (With pin = 2 the walls stay close to the y-dimer edges, whose pinning at J = 0 is weaker than
  the preference of an open edge for x-dimers, and kappa hardly changes between these sizes.)
* Neel phase: the square-lattice Heisenberg model (J = 1, no Q term) has no valence-bond order, so the
  pinned dimer patterns heal within a few lattice spacings and no wall energy survives: kappa is
  consistent with zero at every size, far below the valence-bond solid's at the same L.

Fixed seeds; beta = L; tolerances of 4 combined standard errors (binning analysis of the bins).
"""

from __future__ import annotations

import numpy as np
import pytest
from qmc.models import DomainWall, HeisenbergTerm, ProjectorProductTerm, build_lattice, compile_model

from qmc.analysis.binning import error_estimate
from qmc.chain.simulation import Simulation
from qmc.engine.rng import stream_seed

pytestmark = pytest.mark.slow

SIZES = (8, 12, 16)
WALLS = ("none", "pi/2", "pi", "none-x")
STEPS = dict(warmup_steps=5000, measure_steps=64000, bins=128)


def _kappas(terms, name: str) -> dict[str, dict[int, tuple[float, float]]]:
    """{wall: {L: (kappa, error)}} for the pi and pi/2 walls."""
    out: dict[str, dict[int, tuple[float, float]]] = {"pi": {}, "pi/2": {}}
    for L in SIZES:
        lattice = build_lattice("square", (L, L), ("open", "periodic"))
        energy = {}
        for w in WALLS:
            sim = Simulation(compile_model(lattice, terms, DomainWall(w, 2.0)), float(L),
                             seed_words=stream_seed(77, f"{name}:L{L}:{w}"), **STEPS)
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
        assert kappa > 5 * err, (L, kappa, err)


def test_kappa_L_grows_with_L_in_the_valence_bond_solid(vbs):
    (k8, e8), (k16, e16) = vbs["pi"][8], vbs["pi"][16]
    assert 16 * k16 - 8 * k8 > 4 * np.hypot(16 * e16, 8 * e8)
    for wall in ("pi", "pi/2"):
        (k8, e8), (k16, e16) = vbs[wall][8], vbs[wall][16]
        assert 16 * k16 > 8 * k8, wall


@pytest.mark.parametrize("wall", ["pi", "pi/2"])
def test_no_wall_energy_survives_in_the_neel_phase(vbs, neel, wall):
    for L in SIZES:
        kappa, err = neel[wall][L]
        assert abs(kappa) < 4 * err, (L, kappa, err)
        k_vbs, e_vbs = vbs[wall][L]
        assert k_vbs - kappa > 4 * np.hypot(e_vbs, err) and abs(kappa) + 4 * err < k_vbs, L
