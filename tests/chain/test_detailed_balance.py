"""Detailed balance: the sampled distribution of basis states equals the exact Boltzmann weights.

In SSE the state |alpha> at slice 0 is distributed as <alpha| e^{-beta H} |alpha> / Z (common practice,
no source).  For 2- and 4-site systems we histogram the sampled states after every Monte Carlo step,
estimate each frequency's error from bins of steps, and run a chi-square test against the exact diagonal
of e^{-beta H} / Z (scipy.linalg.expm on an independently built Hamiltonian).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg
from qmc.models import HeisenbergTerm, Lattice, ProjectorProductTerm, build_lattice, compile_model
from scipy import stats

from qmc.chain.simulation import Simulation
from qmc.engine.rng import stream_seed
from qmc.validation.exact import build_hamiltonian, chain_bonds, q2_plaquette_pairs, square_bonds


def _exact_distribution(H, beta):
    rho = scipy.linalg.expm(-beta * H.toarray().real)
    d = np.diag(rho)
    return d / d.sum()


def _sampled(model, beta, n_bins, steps_per_bin, seed_key):
    sim = Simulation(model, beta, warmup_steps=2000, measure_steps=steps_per_bin, bins=1,
                     seed_words=stream_seed(77, seed_key))
    sim.advance(2000)
    n = model.n_sites
    weights = 1 << np.arange(n)
    counts = np.zeros((n_bins, 1 << n))
    for b in range(n_bins):
        for _ in range(steps_per_bin):
            sim.advance(1)
            sim.steps[0] -= 1  # keep measuring: only the state after each step matters here
            state = int(np.dot((sim.spins > 0).astype(np.int64), weights))  # bit i = 1: site i up
            counts[b, state] += 1
    return counts / steps_per_bin


def _categories(freq, exact, min_prob=2e-3):
    """Per-bin frequencies of the likely states, with all rare states lumped into one category."""
    common = exact >= min_prob
    f = np.concatenate([freq[:, common], freq[:, ~common].sum(1, keepdims=True)], axis=1)
    e = np.concatenate([exact[common], [exact[~common].sum()]])
    return f, e


def _chi2_pvalue(freq, exact):
    f, e = _categories(freq, exact)
    mean = f.mean(0)
    err = f.std(0, ddof=1) / np.sqrt(f.shape[0])
    keep = e > 0
    assert np.all(err[keep] > 0)
    chi2 = np.sum(((mean[keep] - e[keep]) / err[keep]) ** 2)
    return stats.chi2.sf(chi2, df=int(keep.sum()) - 1), chi2


CASES = {
    "dimer": (lambda: compile_model(Lattice.from_bonds(2, [(0, 1)]), [HeisenbergTerm("all", 1.0)]),
              lambda: build_hamiltonian(2, heisenberg=[(1.0, 0, 1)]), 1.3),
    "ring4": (lambda: compile_model(build_lattice("chain", (4,)), [HeisenbergTerm("nn", 1.0)]),
              lambda: build_hamiltonian(4, heisenberg=[(1.0, i, j) for i, j in chain_bonds(4)]), 0.8),
    "jq2_2x2": (lambda: compile_model(build_lattice("square", (2, 2)),
                                      [HeisenbergTerm("nn", 0.5),
                                       ProjectorProductTerm("plaquette-pair", 1.5)]),
                lambda: build_hamiltonian(
                    4, heisenberg=[(0.5, i, j) for bonds in square_bonds(2, 2) for i, j in bonds],
                    projector_products=[(1.5, b) for b in q2_plaquette_pairs(2, 2)]), 1.0),
}


@pytest.mark.parametrize("name", list(CASES))
def test_sampled_states_follow_boltzmann_weights(name):
    make_model, make_h, beta = CASES[name]
    model = make_model()
    exact = _exact_distribution(make_h(), beta)
    freq = _sampled(model, beta, n_bins=40, steps_per_bin=1000, seed_key=name)
    p, chi2 = _chi2_pvalue(freq, exact)
    assert p > 1e-3, f"{name}: chi2 = {chi2:.1f}, p = {p:.2e}; sampled {freq.mean(0).round(4)}, exact {exact}"
    # the test has power: a 5% distortion of the exact weights is rejected
    distorted = exact * (1 + 0.05 * np.cos(np.arange(exact.size)))
    distorted /= distorted.sum()
    assert _chi2_pvalue(freq, distorted)[0] < 1e-3
