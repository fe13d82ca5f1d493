"""Jackknife (leave-one-out) estimates of functions of mean values.

Given ``m`` series of bin averages ``x^(a)_i`` (``i = 1..n``; each series of shape ``(n,)`` or
``(n, k)``), optionally first averaged over blocks of ``block`` consecutive bins (trailing
remainder dropped), with means ``xbar^(a)`` and leave-one-out means
``xbar^(a)_(i) = (n xbar^(a) - x^(a)_i) / (n - 1)``:

    theta         = f(xbar^(1), ..., xbar^(m))
    theta_(i)     = f(xbar^(1)_(i), ..., xbar^(m)_(i))
    sigma^2       = (n - 1)/n * sum_i (theta_(i) - mean_i theta_(i))^2
    theta_bc      = n theta - (n - 1) mean_i theta_(i)            (bias-corrected value)

Pseudo-values ``p_i = n theta - (n - 1) theta_(i)`` have mean ``theta_bc`` and naive standard error
``sigma`` exactly; to first order in the fluctuations ``p_i`` is the linearised per-bin value of
``f``, so a binning analysis of the pseudo-values accounts for autocorrelations between bins (used
by :mod:`qmc.analysis.derived`).  For a linear ``f`` the jackknife error equals the plain standard
error of the mean (common practice, no source).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import NamedTuple

import numpy as np

from .binning import rebin

__all__ = ["JackknifeResult", "jackknife", "jackknife_pseudovalues"]


class JackknifeResult(NamedTuple):
    """Jackknife estimate: ``value = f(means)``, ``error``, ``bias_corrected``."""

    value: float | np.ndarray
    error: float | np.ndarray
    bias_corrected: float | np.ndarray


def _prepare(series: tuple[np.ndarray, ...], block: int | None) -> list[np.ndarray]:
    if not series:
        raise ValueError("jackknife: at least one series is required")
    arrays = [np.asarray(s, dtype=float) for s in series]
    lengths = {a.shape[0] if a.ndim else 0 for a in arrays}
    if len(lengths) != 1 or any(a.ndim not in (1, 2) for a in arrays):
        shapes = ", ".join(str(a.shape) for a in arrays)
        raise ValueError(
            f"jackknife: series must have shape (n_bins,) or (n_bins, k) with equal n_bins; got {shapes}"
        )
    if block is not None and block > 1:
        arrays = [rebin(a, int(block)) for a in arrays]
    if arrays[0].shape[0] < 2:
        raise ValueError(f"jackknife: need at least 2 (blocked) bins, got {arrays[0].shape[0]}")
    return arrays


def _as_output(x: np.ndarray) -> float | np.ndarray:
    x = np.asarray(x, dtype=float)
    return float(x) if x.ndim == 0 else x


def _leave_one_out(
    func: Callable[..., float | np.ndarray], arrays: list[np.ndarray], vectorized: bool
) -> tuple[np.ndarray, np.ndarray]:
    """Return ``theta`` (f of the full means) and the array of ``theta_(i)`` (leading axis i)."""
    n = arrays[0].shape[0]
    means = [a.mean(axis=0) for a in arrays]
    theta = np.asarray(func(*means), dtype=float)
    loo = [(n * m - a) / (n - 1) for m, a in zip(means, arrays, strict=True)]
    if vectorized:
        thetas = np.asarray(func(*loo), dtype=float)
        if thetas.shape != (n,) + theta.shape:
            raise ValueError(
                f"jackknife: vectorized func returned shape {thetas.shape}, expected {(n,) + theta.shape}"
            )
    else:
        thetas = np.array([np.asarray(func(*(x[i] for x in loo)), dtype=float) for i in range(n)])
    return theta, thetas


def jackknife(
    func: Callable[..., float | np.ndarray],
    *series_arrays: np.ndarray,
    block: int | None = None,
    vectorized: bool = False,
) -> JackknifeResult:
    """Jackknife value, error and bias-corrected value of ``func(mean(series_1), ..., mean(series_m))``.

    ``func`` receives one mean per series (a float, or a length-``k`` array for 2-D series).
    ``block``: average this many consecutive bins first (``None`` or 1: leave out single bins).
    ``vectorized=True`` promises that ``func`` maps arrays with a leading leave-one-out axis
    element-wise, which is much faster for many bins.
    """
    arrays = _prepare(series_arrays, block)
    n = arrays[0].shape[0]
    theta, thetas = _leave_one_out(func, arrays, vectorized)
    tbar = thetas.mean(axis=0)
    err = np.sqrt((n - 1) / n * np.sum((thetas - tbar) ** 2, axis=0))
    return JackknifeResult(_as_output(theta), _as_output(err), _as_output(n * theta - (n - 1) * tbar))


def jackknife_pseudovalues(
    func: Callable[..., float | np.ndarray],
    *series_arrays: np.ndarray,
    block: int | None = None,
    vectorized: bool = False,
) -> tuple[float | np.ndarray, np.ndarray]:
    """Return ``(theta, p)`` with pseudo-values ``p_i = n theta - (n - 1) theta_(i)`` (leading axis i)."""
    arrays = _prepare(series_arrays, block)
    n = arrays[0].shape[0]
    theta, thetas = _leave_one_out(func, arrays, vectorized)
    return _as_output(theta), n * theta - (n - 1) * thetas
