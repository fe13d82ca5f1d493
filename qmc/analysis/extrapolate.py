"""Extrapolation of finite-size estimates to L -> infinity with a power-law correction.

Model:  y(L) = y_inf + a L^(-omega)    (e.g. crossing points g*(L) -> g_c, or 1/nu(L) -> 1/nu)

fitted by weighted least squares (``scipy.optimize.curve_fit``, ``absolute_sigma=True``).  With at
least four points ``omega`` is fitted too (bounded to ``omega_bounds``); with two or three points,
or when the three-parameter fit fails or leaves ``omega`` undetermined, ``omega`` is fixed to
``omega_fixed`` and only ``(y_inf, a)`` are fitted (linear: :func:`qmc.analysis.powerfit.fit_powers`).
When chi^2/dof > 1 the parameter errors are scaled by sqrt(chi^2/dof) (common practice, no source).
A single point cannot be extrapolated: its limit is NaN (``n_points = 1``).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.optimize import curve_fit

from .powerfit import fit_powers

__all__ = ["Extrapolation", "extrapolate"]


@dataclass(frozen=True)
class Extrapolation:
    """Result of :func:`extrapolate`; ``omega_fitted`` is False when omega was held fixed."""

    limit: float
    limit_err: float
    amplitude: float
    amplitude_err: float
    omega: float
    omega_err: float
    omega_fitted: bool
    chi2: float
    dof: int
    n_points: int


def _model(L: np.ndarray, y_inf: float, a: float, omega: float) -> np.ndarray:
    return y_inf + a * L ** (-omega)


def _chi2(L: np.ndarray, y: np.ndarray, e: np.ndarray, p: np.ndarray) -> float:
    return float(np.sum(((y - _model(L, *p)) / e) ** 2))


def _fixed(L: np.ndarray, y: np.ndarray, e: np.ndarray, omega: float) -> Extrapolation:
    """Only (y_inf, a) fitted at fixed omega: the weighted linear fit of :mod:`qmc.analysis.powerfit`."""
    fit = fit_powers(L, y, e, (omega,))
    return Extrapolation(
        fit.limit,
        fit.limit_err,
        float(fit.coef[1]),
        float(fit.errors[1]),
        float(omega),
        float("nan"),
        False,
        fit.chi2,
        fit.dof,
        int(L.size),
    )


def extrapolate(
    L: Sequence[float],
    y: Sequence[float],
    y_err: Sequence[float],
    *,
    omega_fixed: float = 1.0,
    omega_bounds: tuple[float, float] = (0.05, 8.0),
) -> Extrapolation:
    """Fit ``y(L) = y_inf + a L^(-omega)`` (see module docstring); non-finite points are dropped."""
    L_, y_, e_ = (np.asarray(a, dtype=float).ravel() for a in (L, y, y_err))
    good = np.isfinite(L_) & np.isfinite(y_) & np.isfinite(e_) & (e_ > 0) & (L_ > 0)
    L_, y_, e_ = L_[good], y_[good], e_[good]
    n = int(L_.size)
    if n == 0:
        nan = float("nan")
        return Extrapolation(nan, nan, nan, nan, nan, nan, False, nan, 0, 0)
    if n == 1:
        nan = float("nan")
        return Extrapolation(nan, nan, nan, nan, float(omega_fixed), nan, False, nan, 0, 1)
    fixed = _fixed(L_, y_, e_, omega_fixed)
    if n < 4:
        return fixed
    best = None
    for w0 in (omega_fixed, 0.5, 2.0, 4.0):
        w0 = float(np.clip(w0, omega_bounds[0] * 1.01, omega_bounds[1] * 0.99))
        start = _fixed(L_, y_, e_, w0)
        try:
            p, cov = curve_fit(
                _model,
                L_,
                y_,
                p0=[start.limit, start.amplitude, w0],
                sigma=e_,
                absolute_sigma=True,
                bounds=([-np.inf, -np.inf, omega_bounds[0]], [np.inf, np.inf, omega_bounds[1]]),
                maxfev=20000,
            )
        except (RuntimeError, ValueError):
            continue
        chi2 = _chi2(L_, y_, e_, p)
        if best is None or chi2 < best[2]:
            best = (p, cov, chi2)
    if best is None:
        return fixed
    p, cov, chi2 = best
    err = np.sqrt(np.abs(np.diag(cov)))
    if not np.all(np.isfinite(err)) or err[2] > 10 * max(p[2], 1e-3):
        return fixed
    dof = n - 3
    err = err * (np.sqrt(max(1.0, chi2 / dof)) if dof > 0 else 1.0)
    return Extrapolation(
        float(p[0]), float(err[0]), float(p[1]), float(err[1]), float(p[2]), float(err[2]), True, chi2, dof, n
    )
