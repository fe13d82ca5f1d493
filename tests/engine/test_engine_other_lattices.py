"""The engine on honeycomb, simple cubic and open-boundary lattices against exact diagonalization.

The lattice geometry itself is checked in test_models.py (brute-force neighbour search); here the exact
Hamiltonian is built from the lattice's bond list, so these tests check the engine's estimators on
three- and six-coordinated lattices, and the stiffness convention for non-Cartesian directions: a twist
phi along direction a multiplies each hop by exp(i phi d_a), d_a the bond's displacement in units of
that direction's lattice vector, and rho_a = (1/N) d^2F/dphi^2 = <w_a^2>/(beta N).
"""

from __future__ import annotations

import numpy as np
import pytest
from qmc.models import HeisenbergTerm, build_lattice, compile_model

from qmc.chain.simulation import Simulation
from qmc.engine.rng import stream_seed
from qmc.validation.exact import ExactSpectrum, build_hamiltonian, stiffness_by_twist


def _exact(model, beta, direction=None):
    bonds = model.bond_sites[model.term_bonds[model.term_start[:-1]]]
    heis = [(float(c), int(i), int(j)) for c, (i, j) in zip(model.term_coupling, bonds, strict=True)]
    n = model.n_sites
    spec = ExactSpectrum(build_hamiltonian(n, heis), n)
    out = {"energy": spec.energy_per_site(beta), "chi_uniform": spec.chi_uniform(beta)}
    s = np.arange(1 << n)
    sz = np.array([((s >> i) & 1) - 0.5 for i in range(n)])
    ms = (model.phase[:, None] * sz).sum(0)
    out["m_stag2"] = spec.expect_diag(beta, (ms / n) ** 2)
    if direction is not None:
        disp = model.bond_disp[:, direction]

        def build(phi):
            tw = {}
            for t in range(model.n_terms):
                b = model.term_bonds[model.term_start[t]]
                i, j = map(int, model.bond_sites[b])
                tw[(i, j)] = -phi * disp[b]  # S+_i S-_j moves an up spin from j to i: displacement -d
            return build_hamiltonian(n, heis, twist=tw)

        # fractional displacements (honeycomb): finite differences rather than the Fourier-exact method
        out[f"stiffness/{model.dir_names[direction]}"] = stiffness_by_twist(build, n, beta)
    return out


CASES = {
    "honeycomb2x2": (lambda: compile_model(build_lattice("honeycomb", (2, 2)), [HeisenbergTerm("nn", 1.0)]),
                     1.5, (0, 1)),
    "cubic2x2x2": (lambda: compile_model(build_lattice("cubic", (2, 2, 2)), [HeisenbergTerm("nn", 1.0)]),
                   2.0, ()),
    "open_square4x3": (lambda: compile_model(build_lattice("square", (4, 3), boundary="open"),
                                             [HeisenbergTerm("nn", 1.0)]), 2.0, ()),
}


@pytest.mark.parametrize("name", list(CASES))
def test_other_lattices_match_exact(name):
    make, beta, directions = CASES[name]
    model = make()
    exact = {}
    for d in directions:
        exact.update(_exact(model, beta, d))
    if not directions:
        exact = _exact(model, beta)
    sim = Simulation(model, beta, warmup_steps=5000, measure_steps=400_000, bins=100,
                     seed_words=stream_seed(99, name))
    rows = sim.advance(10**9)
    bins = {k: rows[:, i] for i, k in enumerate(sim.bin_names)}
    bad = {}
    for key, ref in exact.items():
        mean = bins[key].mean()
        err = bins[key].std(ddof=1) / np.sqrt(len(bins[key]))
        if abs(mean - ref) > 4 * err + 1e-6:
            bad[key] = (mean, err, ref)
    e = bins["energy"]
    assert e.std(ddof=1) / np.sqrt(len(e)) / abs(e.mean()) < 2e-3
    assert not bad, f"{name}: (QMC mean, error, exact) {bad}"
