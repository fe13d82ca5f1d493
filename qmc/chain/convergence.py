"""When a search for the ground state by beta doubling stops (the doubling step itself:
:mod:`qmc.chain.doubling`).

Stage k runs at beta_k = start_beta 2^k.  When stage k (k >= 1) is done, each watched observable is
compared with stage k-1: they agree when

    |O_k - O_{k-1}| <= 2 sqrt(sigma_k^2 + sigma_{k-1}^2)      (binning errors, :data:`AGREE_SIGMAS` = 2)

The search has converged when stage k agrees with stage k-1 and stage k-1 with stage k-2 ("two doublings
in a row", so beta_{k-2}, beta_{k-1} and beta_k all agree); otherwise it doubles again, unless 2 beta_k
would exceed max_beta: then the ground state was not reached (:func:`search_outcome`).  Everything is
decided from the bins alone.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from qmc.chain.binning import error_estimate

__all__ = ["AGREE_SIGMAS", "CONVERGED", "NOT_REACHED", "DOUBLE", "separation", "stage_estimates",
           "stages_agree", "search_outcome"]

AGREE_SIGMAS = 2.0
"""Two results agree when they differ by at most this many combined error bars."""
CONVERGED, NOT_REACHED, DOUBLE = "converged", "not reached", "double"
"""Outcomes of :func:`search_outcome`."""


def separation(mean1: float, error1: float, mean2: float, error2: float) -> float:
    """|mean2 - mean1| in combined error bars sqrt(error1^2 + error2^2); 0 for equal means without errors,
    inf for different ones, nan when an error is undefined."""
    comb = math.hypot(error1, error2)
    diff = abs(mean2 - mean1)
    if not (math.isfinite(comb) and math.isfinite(diff)):
        return math.nan
    if comb <= 0.0:
        return 0.0 if diff == 0.0 else math.inf
    return diff / comb


def stage_estimates(table: np.ndarray, bin_names: Sequence[str], observables: Sequence[str]
                    ) -> dict[str, tuple[float, float]]:
    """``{observable: (mean, binning error)}`` of one stage's bins ``table`` (float64[n, len(bin_names)])."""
    out = {}
    for name in observables:
        est = error_estimate(np.asarray(table)[:, list(bin_names).index(name)])
        out[name] = (est.mean, est.error)
    return out


def stages_agree(lower: dict[str, tuple[float, float]], upper: dict[str, tuple[float, float]]
                 ) -> tuple[bool, dict[str, float]]:
    """Whether every observable of two successive stages agrees within :data:`AGREE_SIGMAS`, and each one's
    :func:`separation` (an undefined separation does not agree)."""
    sig = {name: separation(*lower[name], *upper[name]) for name in lower}
    return all(math.isfinite(s) and s <= AGREE_SIGMAS for s in sig.values()), sig


def search_outcome(agreements: Sequence[bool], beta: float, max_beta: float) -> str:
    """What follows the stage just finished at ``beta``: :data:`CONVERGED` when the last two comparisons
    (``agreements[k-1]``: stage k agrees with stage k-1) both agree, else :data:`DOUBLE` if 2 beta <=
    max_beta, else :data:`NOT_REACHED`."""
    if len(agreements) >= 2 and agreements[-1] and agreements[-2]:
        return CONVERGED
    if 2.0 * beta <= max_beta * (1.0 + 1e-12):
        return DOUBLE
    return NOT_REACHED
