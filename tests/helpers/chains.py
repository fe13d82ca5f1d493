"""One Markov chain run in this process for comparisons with exact diagonalization, and the comparison's
mean and error bar."""

from __future__ import annotations

import numpy as np

from qmc.analysis.jackknife import jackknife
from qmc.chain.simulation import Simulation
from qmc.engine.rng import stream_seed

__all__ = ["SIGMAS", "estimates_of", "mean_err", "off_by_more_than_sigmas", "run_qmc"]

SIGMAS = 4.0  # allowed distance from the exact value, in error bars


def run_qmc(model, beta, steps, seed_key, bins=100, estimators="plain"):
    """Bins of one chain (5000 warm-up steps, master seed 20261202, stream from ``seed_key``) by name; the
    plain estimators unless asked otherwise (the loop estimators are checked in
    tests/engine/test_loop_estimators.py)."""
    sim = Simulation(model, beta, warmup_steps=5000, measure_steps=steps, bins=bins,
                     seed_words=stream_seed(20261202, seed_key), estimators=estimators)
    rows = sim.advance(10**12)
    return {name: rows[:, k] for k, name in enumerate(sim.bin_names)}


def mean_err(x):
    """Mean of the bins and its standard error (bins taken as independent)."""
    return float(np.mean(x)), float(np.std(x, ddof=1) / np.sqrt(len(x)))


def estimates_of(bins, keys, n_sites: int) -> dict[str, tuple[float, float]]:
    """(mean, error) of each of ``keys`` from the bins; ``specific_heat`` by jackknife from the operator
    counts, C = (<n^2> - <n>^2 - <n>) / N (common practice, no source)."""
    out = {}
    for key in keys:
        if key == "specific_heat":
            c, err, _ = jackknife(lambda a, b: (b - a * a - a) / n_sites, bins["n_ops"], bins["n_ops_sq"])
            out[key] = (c, err)
        else:
            out[key] = mean_err(bins[key])
    return out


def off_by_more_than_sigmas(results, exact, floor: float) -> dict:
    """The entries of ``results`` farther from ``exact`` than SIGMAS error bars plus an absolute ``floor``
    (a quantity with no fluctuation in a finite run has a zero error bar), as
    {key: ((mean, error), exact)}."""
    return {k: (results[k], exact[k]) for k in exact
            if abs(results[k][0] - exact[k]) > SIGMAS * results[k][1] + floor}
