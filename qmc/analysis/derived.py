"""Derived observables (nonlinear functions of bin means), estimated by the jackknife.

Inputs are the per-bin observables of the shared interface (bin averages); ``N`` is the number of
sites and ``L`` the linear size.  Definitions (N, L dimensionless; energies in the units of the
Hamiltonian, temperature T = 1/beta):

    specific_heat = (<n^2> - <n>^2 - <n>) / N        from n_ops, n_ops_sq (SSE expansion order n)
    binder_stag   = <m_s^4> / <m_s^2>^2               from m_stag4, m_stag2
    corr_length   = (L / 2 pi) sqrt(S(Q) / S(Q + 2 pi/L) - 1)   from s_q, s_q_shifted (second moment)
    xi_over_L     = corr_length / L
    binder_vbs    = <|D|^4> / (<D_x^2> + <D_y^2>)^2   from vbs4, vbs_x2, vbs_y2
    stiffness_L   = rho_s L                           from stiffness
    chi_uniform   = beta N (<m^2> - <m>^2)            from m_uniform2, magnetization (models with directed
                                                      loops; needs beta)

(standard definitions, common practice, no source).  ``corr_length`` is NaN where
``S(Q) < S(Q + 2 pi/L)``.

Errors: the pseudo-values of the leave-one-out jackknife over single bins
(:func:`qmc.analysis.jackknife.jackknife_pseudovalues`) are analysed with the binning analysis of
:mod:`qmc.analysis.binning`, which yields the error and ``tau_int`` of the derived quantity with
autocorrelations between bins taken into account.  At level 0 this error is exactly the plain
jackknife error.  The reported value is ``f(means)``; the bias-corrected value (mean of the
pseudo-values) is reported alongside.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import NamedTuple

import numpy as np

from .binning import error_estimate
from .jackknife import jackknife_pseudovalues

__all__ = [
    "DERIVED_INPUTS",
    "DerivedEstimate",
    "binder_stag",
    "binder_vbs",
    "chi_uniform_connected",
    "corr_length",
    "derived_estimates",
    "derived_observables",
    "specific_heat",
    "stiffness_L",
    "xi_over_L",
]

Num = float | np.ndarray


def specific_heat(n_ops: Num, n_ops_sq: Num, N: float) -> Num:
    """C = (<n^2> - <n>^2 - <n>) / N (per site, k_B = 1)."""
    return (n_ops_sq - n_ops**2 - n_ops) / N


def binder_stag(m_stag4: Num, m_stag2: Num) -> Num:
    """Binder ratio of the staggered magnetisation, <m_s^4> / <m_s^2>^2."""
    return m_stag4 / m_stag2**2


def corr_length(s_q: Num, s_q_shifted: Num, L: float) -> Num:
    """Second-moment correlation length (L / 2 pi) sqrt(S(Q)/S(Q + 2 pi/L) - 1); NaN if the root < 0."""
    with np.errstate(divide="ignore", invalid="ignore"):
        arg = np.asarray(s_q, dtype=float) / np.asarray(s_q_shifted, dtype=float) - 1.0
        out = L / (2.0 * np.pi) * np.sqrt(np.where(arg >= 0.0, arg, np.nan))
    return float(out) if np.ndim(out) == 0 else out


def xi_over_L(s_q: Num, s_q_shifted: Num, L: float) -> Num:
    """corr_length / L."""
    return corr_length(s_q, s_q_shifted, L) / L


def binder_vbs(vbs4: Num, vbs_x2: Num, vbs_y2: Num) -> Num:
    """Binder ratio of the VBS order parameter, <|D|^4> / (<D_x^2> + <D_y^2>)^2."""
    return vbs4 / (vbs_x2 + vbs_y2) ** 2


def stiffness_L(stiffness: Num, L: float) -> Num:
    """rho_s * L (scale invariant at a quantum critical point with dynamic exponent z = 1)."""
    return stiffness * L


def chi_uniform_connected(m_uniform2: Num, magnetization: Num, N: float, beta: float) -> Num:
    """beta (<M^2> - <M>^2) / N from <(M/N)^2> and <M/N> (M = sum_i S^z_i)."""
    return beta * N * (m_uniform2 - magnetization**2)


DERIVED_INPUTS: dict[str, tuple[str, ...]] = {
    "specific_heat": ("n_ops", "n_ops_sq"),
    "binder_stag": ("m_stag4", "m_stag2"),
    "corr_length": ("s_q", "s_q_shifted"),
    "xi_over_L": ("s_q", "s_q_shifted"),
    "binder_vbs": ("vbs4", "vbs_x2", "vbs_y2"),
    "stiffness_L": ("stiffness",),
    "chi_uniform": ("m_uniform2", "magnetization"),
}
"""Stored bin observables needed by each derived quantity."""


_NEEDS_BETA = ("chi_uniform",)


def _function(name: str, n_sites: int, L: float, beta: float | None) -> Callable[..., np.ndarray]:
    table: dict[str, Callable[..., np.ndarray]] = {
        "specific_heat": lambda a, b: specific_heat(a, b, n_sites),
        "binder_stag": binder_stag,
        "corr_length": lambda a, b: corr_length(a, b, L),
        "xi_over_L": lambda a, b: xi_over_L(a, b, L),
        "binder_vbs": binder_vbs,
        "stiffness_L": lambda a: stiffness_L(a, L),
        "chi_uniform": lambda a, b: chi_uniform_connected(a, b, n_sites, beta),
    }
    return table[name]


class DerivedEstimate(NamedTuple):
    """value = f(means); error and tau_int from the binning analysis of the jackknife pseudo-values."""

    value: float
    error: float
    bias_corrected: float
    tau_int: float
    plateau_ok: bool
    halves_ok: bool


def derived_estimates(
    bins: Mapping[str, np.ndarray], n_sites: int, linear_size: float, names: tuple[str, ...] | None = None,
    beta: float | None = None,
) -> dict[str, DerivedEstimate]:
    """All derived quantities whose inputs are present in ``bins`` (or only ``names``); those that need the
    inverse temperature only when ``beta`` is given.

    Input series of unequal length (e.g. a partially written bin) are cut to the shortest one.
    """
    out: dict[str, DerivedEstimate] = {}
    for name, inputs in DERIVED_INPUTS.items():
        if (names is not None and name not in names) or not all(k in bins for k in inputs):
            continue
        if name in _NEEDS_BETA and beta is None:
            continue
        arrays = [np.asarray(bins[k], dtype=float).ravel() for k in inputs]
        n = min(a.size for a in arrays)
        arrays = [a[:n] for a in arrays]
        func = _function(name, n_sites, float(linear_size), beta)
        if n < 2:
            value = float(func(*(a.mean() for a in arrays))) if n else float("nan")
            out[name] = DerivedEstimate(value, float("nan"), float("nan"), float("nan"), False, True)
            continue
        with np.errstate(divide="ignore", invalid="ignore"):
            value, pseudo = jackknife_pseudovalues(func, *arrays, vectorized=True)
        if not np.all(np.isfinite(pseudo)):
            out[name] = DerivedEstimate(float(value), float("nan"), float("nan"), float("nan"), False, True)
            continue
        est = error_estimate(pseudo)
        out[name] = DerivedEstimate(
            float(value), est.error, est.mean, est.tau_int, est.plateau_ok, est.halves_ok
        )
    return out


def derived_observables(
    bins: Mapping[str, np.ndarray], n_sites: int, linear_size: float, beta: float | None = None
) -> dict[str, tuple[float, float]]:
    """``{name: (value, error)}`` for every derived quantity the available bins (and ``beta``) allow."""
    return {k: (v.value, v.error) for k, v in derived_estimates(bins, n_sites, linear_size,
                                                                  beta=beta).items()}
