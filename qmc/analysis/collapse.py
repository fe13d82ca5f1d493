"""Data collapse of a dimensionless quantity: fit (g_c, nu) so that R_L(g) = F((g - g_c) L^(1/nu)).

With the scaling variable ``x = (g - g_c) L^(1/nu)`` the master curve ``F`` is a polynomial of
degree ``degree`` in ``x / x_s`` (``x_s`` = largest |x|, for conditioning).  For given ``(g_c, nu)``
its coefficients follow from weighted linear least squares, so the residual vector

    r_i(g_c, nu) = (R_i - F(x_i)) / dR_i

depends on ``(g_c, nu)`` only (variable projection); ``scipy.optimize.least_squares`` minimises
``chi^2 = sum r_i^2`` over ``(g_c, nu)`` (started from ``(g_c0, nu0)``, ``(g_c0, 0.7 nu0)`` and
``(g_c0, 1.4 nu0)``; the lowest chi^2 is kept).  Errors: ``cov = (J^T J)^(-1)`` from the Jacobian of the
residuals at the minimum, scaled by chi^2/dof when that exceeds 1 (``dof = n - degree - 3``)
(common practice, no source).  Use only points close to the transition, where corrections to
scaling and the polynomial form are adequate: ``g_range`` keeps points with g in a range, and
``x_max`` keeps, per size, the points with ``|x| <= x_max`` evaluated at the starting values
``(g_c0, nu0)`` (the selection is fixed before the fit, so chi^2 stays a smooth function).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

__all__ = ["Collapse", "data_collapse", "scaling_variable"]


@dataclass(frozen=True)
class Collapse:
    """Fitted ``g_c``, ``nu`` with errors; ``coeffs`` of F in powers of ``x / x_scale``."""

    g_c: float
    g_c_err: float
    nu: float
    nu_err: float
    chi2: float
    dof: int
    degree: int
    coeffs: tuple[float, ...]
    x_scale: float
    success: bool
    x_range: tuple[float, float] = (float("nan"), float("nan"))  # scaling variable span of the fitted points

    def master_curve(self, x: np.ndarray) -> np.ndarray:
        """F(x) evaluated with the fitted coefficients."""
        return np.polynomial.polynomial.polyval(np.asarray(x, dtype=float) / self.x_scale, self.coeffs)


def scaling_variable(g: np.ndarray, L: float | np.ndarray, g_c: float, nu: float) -> np.ndarray:
    """x = (g - g_c) L^(1/nu)."""
    return (np.asarray(g, dtype=float) - g_c) * np.asarray(L, dtype=float) ** (1.0 / nu)


def _stack(
    curves: Mapping[float, tuple],
    g_range: tuple[float, float] | None,
    x_cut: tuple[float, float, float] | None,
) -> tuple[np.ndarray, ...]:
    Ls, gs, ys, es = [], [], [], []
    for L, (g, y, e) in curves.items():
        g, y, e = (np.asarray(a, dtype=float).ravel() for a in (g, y, e))
        keep = np.isfinite(g) & np.isfinite(y) & np.isfinite(e) & (e > 0)
        if g_range is not None:
            keep &= (g >= g_range[0]) & (g <= g_range[1])
        if x_cut is not None:
            keep &= np.abs(scaling_variable(g, float(L), x_cut[0], x_cut[1])) <= x_cut[2]
        Ls.append(np.full(int(keep.sum()), float(L)))
        gs.append(g[keep])
        ys.append(y[keep])
        es.append(e[keep])
    return np.concatenate(Ls), np.concatenate(gs), np.concatenate(ys), np.concatenate(es)


def _master(x: np.ndarray, y: np.ndarray, e: np.ndarray, degree: int) -> tuple[np.ndarray, float]:
    scale = float(np.max(np.abs(x))) or 1.0
    V = np.vander(x / scale, degree + 1, increasing=True)
    coef, *_ = np.linalg.lstsq(V / e[:, None], y / e, rcond=None)
    return coef, scale


def data_collapse(
    curves: Mapping[float, tuple[np.ndarray, np.ndarray, np.ndarray]],
    g_c0: float,
    nu0: float,
    *,
    degree: int = 3,
    g_range: tuple[float, float] | None = None,
    x_max: float | None = None,
    nu_bounds: tuple[float, float] = (0.1, 10.0),
) -> Collapse:
    """Fit ``(g_c, nu)`` of the collapse of ``{L: (g, R, dR)}`` starting from ``(g_c0, nu0)``.

    Raises ``ValueError`` when too few points (or fewer than two sizes) remain.
    """
    L, g, y, e = _stack(curves, g_range, None if x_max is None else (g_c0, nu0, x_max))
    n = int(y.size)
    dof = n - degree - 3
    if dof < 1 or np.unique(L).size < 2:
        raise ValueError(
            f"data_collapse: {n} points on {np.unique(L).size} sizes are too few for degree {degree}"
        )

    def residuals(p: np.ndarray) -> np.ndarray:
        x = scaling_variable(g, L, p[0], p[1])
        coef, scale = _master(x, y, e, degree)
        return (y - np.polynomial.polynomial.polyval(x / scale, coef)) / e

    res = None
    for factor in (1.0, 0.7, 1.4):
        nu_start = float(np.clip(nu0 * factor, nu_bounds[0] * 1.01, nu_bounds[1] * 0.99))
        trial = least_squares(
            residuals,
            x0=[g_c0, nu_start],
            bounds=([-np.inf, nu_bounds[0]], [np.inf, nu_bounds[1]]),
            x_scale="jac",
        )
        if res is None or trial.cost < res.cost:
            res = trial
    chi2 = float(np.sum(res.fun**2))
    try:
        cov = np.linalg.inv(res.jac.T @ res.jac) * max(1.0, chi2 / dof)
        err = np.sqrt(np.abs(np.diag(cov)))
    except np.linalg.LinAlgError:
        err = np.array([np.nan, np.nan])
    x_fit = scaling_variable(g, L, *res.x)
    coef, scale = _master(x_fit, y, e, degree)
    return Collapse(
        g_c=float(res.x[0]),
        g_c_err=float(err[0]),
        nu=float(res.x[1]),
        nu_err=float(err[1]),
        chi2=chi2,
        dof=dof,
        degree=degree,
        coeffs=tuple(float(c) for c in coef),
        x_scale=scale,
        success=bool(res.success),
        x_range=(float(x_fit.min()), float(x_fit.max())),
    )
