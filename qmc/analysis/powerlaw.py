"""Power-law fits y(L) = A L^(-a) of finite-size data (the wall energy kappa(L), |<cos 4 theta>|(L)).

Weighted least squares on the data themselves (``scipy.optimize.curve_fit``, ``absolute_sigma=True``),
started from the straight-line fit of ln|y| against ln L.  The exponent ``a`` carries the sign
convention of a decay: a > 0 when |y| falls with L, a < 0 when it grows.  When chi^2/dof > 1 the
parameter errors are scaled by sqrt(chi^2/dof) (common practice, no source).  Fewer than
:data:`MIN_SIZES` distinct sizes give no fit: two points fix a straight line on a log-log plot exactly
and leave nothing to test it, so the result then only says why.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.optimize import OptimizeWarning, curve_fit

__all__ = ["MIN_SIZES", "PowerLaw", "fit_power_law"]

MIN_SIZES = 3
"""Distinct sizes needed for a power-law fit."""


@dataclass(frozen=True)
class PowerLaw:
    """y = amplitude * L^(-exponent); ``ok`` False (NaN numbers) with ``note`` saying why no fit was made."""

    exponent: float
    exponent_err: float
    amplitude: float
    amplitude_err: float
    chi2: float
    dof: int
    n_points: int
    ok: bool
    note: str = ""

    def __call__(self, L: np.ndarray) -> np.ndarray:
        return self.amplitude * np.asarray(L, dtype=float) ** (-self.exponent)


def _none(n: int, note: str) -> PowerLaw:
    nan = float("nan")
    return PowerLaw(nan, nan, nan, nan, nan, 0, n, False, note)


def _model(L: np.ndarray, amplitude: float, exponent: float) -> np.ndarray:
    return amplitude * L ** (-exponent)


def fit_power_law(L: Sequence[float], y: Sequence[float], y_err: Sequence[float]) -> PowerLaw:
    """Fit ``y = A L^(-a)`` (module docstring); points with a non-finite value or error <= 0 are dropped."""
    L_, y_, e_ = (np.asarray(v, dtype=float).ravel() for v in (L, y, y_err))
    good = np.isfinite(L_) & np.isfinite(y_) & np.isfinite(e_) & (e_ > 0) & (L_ > 0)
    L_, y_, e_ = L_[good], y_[good], e_[good]
    sizes = np.unique(L_).size
    if sizes < MIN_SIZES:
        plural = "" if sizes == 1 else "s"
        note = f"{sizes} size{plural} with data: a power-law fit needs at least {MIN_SIZES}"
        return _none(int(L_.size), note)
    if np.all(y_ > 0) or np.all(y_ < 0):
        sign = float(np.sign(y_[0]))
    else:
        return _none(int(L_.size), "the values change sign between sizes: no power law")
    x, ly = np.log(L_), np.log(np.abs(y_))
    w = np.abs(y_) / e_  # 1 / error of ln|y|
    A = np.column_stack([np.ones_like(x), -x]) * w[:, None]
    (lnA, a0), *_ = np.linalg.lstsq(A, ly * w, rcond=None)
    try:
        with warnings.catch_warnings():  # an undetermined covariance is reported below, not warned about
            warnings.simplefilter("ignore", OptimizeWarning)
            p, cov = curve_fit(_model, L_, y_, p0=[sign * np.exp(lnA), a0], sigma=e_, absolute_sigma=True,
                               maxfev=20000)
    except (RuntimeError, ValueError):
        return _none(int(L_.size), "the power-law fit did not converge")
    chi2 = float(np.sum(((y_ - _model(L_, *p)) / e_) ** 2))
    dof = int(L_.size) - 2
    err = np.sqrt(np.abs(np.diag(cov))) * np.sqrt(max(1.0, chi2 / dof))
    if not np.all(np.isfinite(err)):
        return _none(int(L_.size), "the power-law fit left its parameters undetermined")
    return PowerLaw(float(p[1]), float(err[1]), float(p[0]), float(err[0]), chi2, dof, int(L_.size), True)
