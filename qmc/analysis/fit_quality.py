"""Is a fit acceptable?  chi^2/dof, its p-value, and the caveats of crossing-point analyses.

A weighted least-squares fit with correct error bars and a correct model has chi^2 distributed as chi^2 with
dof = (points - parameters) degrees of freedom.  The p-value ``P(chi^2_dof >= chi^2)`` is the probability of
a fit at least this bad by chance; a fit with ``p < P_MIN`` (0.01) is marked unreliable: the model (e.g. the
correction terms) does not describe the data within their errors (common practice, no source).  With
dof = 0 the fit passes through every point and cannot be tested.

:func:`crossing_caveats` states what a crossing analysis with few sizes can and cannot give:

* one pair of sizes: no extrapolation to L -> infinity, only the crossing of those two sizes;
* 1/nu(L1, L2) = ln(s2/s1)/ln(L2/L1) from the slopes of two sizes: its error is statistical only;
  corrections to scaling shift it by an unknown amount that shrinks only as the sizes grow;
* two or three pairs: the correction exponent omega is held fixed (assumed), and the limit depends on it.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

__all__ = ["P_MIN", "crossing_caveats", "fit_quality"]

P_MIN = 0.01
"""Fits with a p-value below this are marked unreliable."""


def fit_quality(chi2: float | None, dof: int | None, p_min: float = P_MIN) -> dict[str, Any]:
    """``{"chi2", "dof", "chi2_dof", "p_value", "reliable", "summary", "text"}``.

    ``reliable`` is None when the fit cannot be tested (dof < 1 or chi^2 unknown); ``summary`` gives the
    numbers (``chi^2/dof = 4.2 (dof = 3, p = 0.006)``), ``text`` adds the verdict (``...: unreliable (...)``).
    """
    if chi2 is None or dof is None or not math.isfinite(chi2) or dof < 1:
        text = ("as many parameters as points: the fit passes through them and cannot be tested" if dof == 0
                else "fit quality unknown")
        return {"chi2": chi2, "dof": dof, "chi2_dof": None, "p_value": None, "reliable": None,
                "summary": text, "text": text}
    from scipy.stats import chi2 as chi2_distribution  # imported on first use: scipy.stats is slow to load

    p = float(chi2_distribution.sf(chi2, dof))
    reliable = p >= p_min
    summary = f"chi^2/dof = {chi2 / dof:.3g} (dof = {dof}, p = {p:.2g})"
    text = summary
    if not reliable:
        text += f": unreliable (p < {p_min:g}: the fitted form does not describe the data within the errors)"
    return {"chi2": chi2, "dof": dof, "chi2_dof": chi2 / dof, "p_value": p, "reliable": reliable,
            "summary": summary, "text": text}


def crossing_caveats(pairs: Sequence[tuple[float, float]], omega_fitted: bool, omega: float) -> list[str]:
    """Caveats of a crossing analysis over the size ``pairs`` (L1, L2) that gave crossings (see the module
    docstring); ``omega_fitted``/``omega``: the correction exponent of the extrapolation."""
    if not pairs:
        return []
    out = []
    if len(pairs) == 1:
        L1, L2 = pairs[0]
        out.append(f"one pair of sizes (L = {L1:g}, {L2:g}): no extrapolation to L -> infinity; the crossing "
                   "is a finite-size estimate of the critical coupling, which may differ from it by more "
                   "than its error bar; more sizes are needed for a limit")
    elif not omega_fitted:
        out.append(f"{len(pairs)} pairs of sizes: the correction exponent omega is fixed to {omega:g} "
                   "(assumed, not fitted); the limits depend on that assumption")
    out.append("1/nu of each pair comes from the slopes of two sizes only: its error bar is statistical and "
               "does not include corrections to scaling, which shrink only as the sizes grow")
    return out
