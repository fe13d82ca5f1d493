"""Finite-size fits with fixed correction exponents: weighted linear least squares.

Model:  y(L) = c_0 + sum_k c_k L^(-p_k)   (fixed powers p_k, e.g. (2,) for the chain energy, (3, 4) for the
square-lattice energy, (1, 2) for m_s^2), fitted with weights 1/dy^2:

    minimise  chi^2 = sum_i ((y_i - y(L_i)) / dy_i)^2 .

The limit L -> infinity is c_0.  Parameter covariance (A^T W A)^-1 (A the design matrix, W = diag(dy^-2)),
computed from the singular values of the column-scaled weighted design matrix so that columns as different
as 1 and L^-4 stay well conditioned.  The errors are scaled by sqrt(chi^2/dof) when that exceeds 1 (common
practice, no source).  With as many parameters as points the fit is exact (dof = 0) and the covariance is
used unscaled.

:func:`drop_smallest_shift` is the stability measure read before trusting such a fit: the change of c_0 when
the smallest size is left out (the neglected higher-order corrections are largest there; common practice,
no source).  Its statistical error: the full fit is the efficient estimator and the reduced one is nested in
it, so var(c_0,reduced - c_0,full) = var(c_0,reduced) - var(c_0,full) (the Hausman relation of nested
least-squares estimators, from memory; the test checks it against the spread over noisy data sets).  Both
variances are the unscaled ones implied by the error bars of the data: the error answers "is the change
beyond the statistical noise?", and a poor chi^2 (caused, e.g., by the smallest size itself) does not
dilute it.

This is the one linear least-squares fit of the package: ``qmc analyze --extrapolate``
(:mod:`qmc.analysis.size_extrapolation`), the fixed-exponent branch of :mod:`qmc.analysis.extrapolate` and
``qmc validate`` use it.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

__all__ = ["PowerFit", "Shift", "drop_smallest_shift", "fit_powers"]


def _inflation(chi2: float, dof: int) -> float:
    return max(1.0, chi2 / dof) if dof > 0 else 1.0


@dataclass(frozen=True)
class PowerFit:
    """Result of :func:`fit_powers`: ``coef[0]`` is the L -> infinity limit, ``coef[k]`` multiplies
    L^(-powers[k-1]); ``errors`` are one standard deviation (scaled as in the module docstring)."""

    coef: np.ndarray
    errors: np.ndarray
    powers: tuple[float, ...]
    chi2: float
    dof: int

    @property
    def limit(self) -> float:
        """c_0, the value at L -> infinity."""
        return float(self.coef[0])

    @property
    def limit_err(self) -> float:
        """One standard deviation of c_0."""
        return float(self.errors[0])

    @property
    def inflation(self) -> float:
        """The factor max(1, chi^2/dof) applied to the variances (1 for an exact fit)."""
        return _inflation(self.chi2, self.dof)

    @property
    def chi2_dof(self) -> float:
        """chi^2 per degree of freedom; NaN for an exact fit (dof = 0)."""
        return self.chi2 / self.dof if self.dof > 0 else float("nan")

    def __call__(self, L: float | np.ndarray) -> float | np.ndarray:
        L = np.asarray(L, dtype=float)
        out = self.coef[0] + sum(c * L ** (-p) for c, p in zip(self.coef[1:], self.powers, strict=True))
        return float(out) if np.ndim(out) == 0 else out


def fit_powers(L: Sequence[float], y: Sequence[float], dy: Sequence[float],
               powers: Sequence[float]) -> PowerFit:
    """Weighted fit of y(L) = c_0 + sum_k c_k L^(-powers[k]) (see the module docstring).

    Raises ValueError when the lengths differ, there are fewer points than parameters, a value or size is
    not finite, a size or error bar is not positive, or the sizes do not determine the parameters (e.g. a
    size given twice with as many points as parameters).
    """
    L_, y_, e_ = (np.asarray(a, dtype=float).ravel() for a in (L, y, dy))
    powers = tuple(float(p) for p in powers)
    n_par = 1 + len(powers)
    if not (L_.size == y_.size == e_.size):
        raise ValueError(f"fit_powers: L, y and dy differ in length ({L_.size}, {y_.size}, {e_.size})")
    if L_.size < n_par:
        raise ValueError(f"fit_powers: {L_.size} points for {n_par} parameters")
    if not (np.all(np.isfinite(y_)) and np.all(np.isfinite(e_)) and np.all(e_ > 0)
            and np.all(np.isfinite(L_)) and np.all(L_ > 0)):
        raise ValueError("fit_powers: values and sizes must be finite, sizes and error bars positive")
    A = np.column_stack([np.ones_like(L_)] + [L_ ** (-p) for p in powers]) / e_[:, None]
    b = y_ / e_
    scale = np.linalg.norm(A, axis=0)
    U, s, Vt = np.linalg.svd(A / scale, full_matrices=False)
    if s[-1] <= 1e-12 * s[0]:
        raise ValueError(f"fit_powers: the sizes {sorted(set(L_.tolist()))} do not determine "
                         f"{n_par} parameters")
    coef = (Vt.T @ ((U.T @ b) / s)) / scale
    cov = (Vt.T / s**2) @ Vt / np.outer(scale, scale)
    chi2 = float(np.sum((A @ coef - b) ** 2))
    dof = int(L_.size - n_par)
    return PowerFit(coef, np.sqrt(np.diag(cov) * _inflation(chi2, dof)), powers, chi2, dof)


class Shift(NamedTuple):
    """Change of c_0 when the smallest size is dropped, and its statistical error (NaN when undefined)."""

    value: float
    error: float


def drop_smallest_shift(L: Sequence[float], y: Sequence[float], dy: Sequence[float],
                        powers: Sequence[float], full: PowerFit | None = None) -> Shift:
    """c_0(fit without the smallest L) - c_0(fit of all points), signed, with its error (module docstring).

    NaN when fewer than ``len(powers) + 2`` points remain after dropping (the reduced fit must keep at
    least one degree of freedom to mean anything).  ``full``: the fit of all points, if already done.
    """
    L_, y_, e_ = (np.asarray(a, dtype=float).ravel() for a in (L, y, dy))
    if L_.size - 1 < len(powers) + 2:
        return Shift(float("nan"), float("nan"))
    keep = np.argsort(L_, kind="stable")[1:]
    full = full if full is not None else fit_powers(L_, y_, e_, powers)
    reduced = fit_powers(L_[keep], y_[keep], e_[keep], powers)
    var = reduced.limit_err**2 / reduced.inflation - full.limit_err**2 / full.inflation
    return Shift(reduced.limit - full.limit, float(np.sqrt(max(var, 0.0))))
