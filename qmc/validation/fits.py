"""Finite-size extrapolations with fixed correction exponents: weighted linear least squares.

Model:  y(L) = c_0 + sum_k c_k L^(-p_k)   (fixed powers p_k, e.g. (2,) for the chain energy, (3, 4) for the
square-lattice energy, (1, 2) for m_s^2), fitted with weights 1/dy^2.  The limit L -> infinity is c_0.
Parameter errors come from the covariance (A^T W A)^-1 and are scaled by sqrt(chi^2/dof) when that
exceeds 1 (common practice, no source).  With as many parameters as points the fit is exact (dof = 0) and
the covariance is used unscaled.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

__all__ = ["PowerFit", "fit_powers"]


@dataclass(frozen=True)
class PowerFit:
    """Result of :func:`fit_powers`: ``coef[0]`` is the L -> infinity limit, ``coef[k]`` multiplies
    L^(-powers[k-1])."""

    coef: np.ndarray
    errors: np.ndarray
    powers: tuple[float, ...]
    chi2: float
    dof: int

    @property
    def limit(self) -> float:
        return float(self.coef[0])

    @property
    def limit_err(self) -> float:
        return float(self.errors[0])

    def __call__(self, L: float | np.ndarray) -> float | np.ndarray:
        L = np.asarray(L, dtype=float)
        out = self.coef[0] + sum(c * L ** (-p) for c, p in zip(self.coef[1:], self.powers, strict=True))
        return float(out) if out.ndim == 0 else out


def fit_powers(L: Sequence[float], y: Sequence[float], dy: Sequence[float],
               powers: Sequence[float]) -> PowerFit:
    """Weighted fit of y(L) = c_0 + sum_k c_k L^(-powers[k]) (see the module docstring).

    Raises ValueError when there are fewer points than parameters or an error bar is not positive.
    """
    L_, y_, e_ = (np.asarray(a, dtype=float).ravel() for a in (L, y, dy))
    powers = tuple(float(p) for p in powers)
    n_par = 1 + len(powers)
    if not (L_.size == y_.size == e_.size):
        raise ValueError(f"fit_powers: L, y and dy differ in length ({L_.size}, {y_.size}, {e_.size})")
    if L_.size < n_par:
        raise ValueError(f"fit_powers: {L_.size} points for {n_par} parameters")
    if not (np.all(np.isfinite(y_)) and np.all(np.isfinite(e_)) and np.all(e_ > 0)):
        raise ValueError("fit_powers: values must be finite and error bars positive")
    A = np.column_stack([np.ones_like(L_)] + [L_ ** (-p) for p in powers]) / e_[:, None]
    b = y_ / e_
    coef, *_ = np.linalg.lstsq(A, b, rcond=None)
    cov = np.linalg.inv(A.T @ A)
    chi2 = float(np.sum((A @ coef - b) ** 2))
    dof = int(L_.size - n_par)
    scale = max(1.0, chi2 / dof) if dof > 0 else 1.0
    return PowerFit(coef, np.sqrt(np.diag(cov) * scale), powers, chi2, dof)
