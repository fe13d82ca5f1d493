"""Ground-state (T -> 0) convergence check by beta doubling.

For every (L, g) where the run holds both beta and 2 beta, each checked observable is compared:
the point is flagged when

    |O(2 beta) - O(beta)| > n_sigma * sqrt(sigma(beta)^2 + sigma(2 beta)^2)      (n_sigma = 2)

i.e. the lower temperature still changes the result beyond the statistical errors (common
practice, no source).  Observables that depend on beta explicitly (susceptibilities, n_ops,
specific heat) are not checked.  With many observables some 2-sigma flags occur by chance
(about 5 % per comparison).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

__all__ = ["GROUND_STATE_OBSERVABLES", "beta_doubling_check"]

GROUND_STATE_OBSERVABLES = (
    "energy",
    "m_stag2",
    "s_q",
    "stiffness",
    "vbs_x2",
    "vbs_y2",
    "binder_stag",
    "binder_vbs",
    "xi_over_L",
    "stiffness_L",
)
"""Observables compared between beta and 2 beta by default."""


def beta_doubling_check(
    points: Sequence[dict],
    observables: Sequence[str] = GROUND_STATE_OBSERVABLES,
    n_sigma: float = 2.0,
    extra: Sequence[str] = (),
) -> dict:
    """``{"pairs_checked": int, "flags": [...]}``; points are scan points (:mod:`qmc.analysis.scan`).

    ``extra``: further varying parameter names that must agree for two points to be compared.
    Each flag: ``{"L", "g", "beta", "beta2", "observable", "value", "error", "value2", "error2",
    "sigmas"}``.
    """
    groups: dict[tuple, dict[float, dict]] = {}
    for p in points:
        key = (p["L"], p["g"]) + tuple(repr(p["params"].get(k)) for k in extra)
        groups.setdefault(key, {})[float(p["beta"])] = p
    flags, checked = [], 0
    for by_beta in groups.values():
        for b, p in sorted(by_beta.items()):
            q = next((by_beta[b2] for b2 in by_beta if np.isclose(b2, 2.0 * b, rtol=1e-9)), None)
            if q is None:
                continue
            checked += 1
            for name in observables:
                if name not in p["observables"] or name not in q["observables"]:
                    continue
                o1, o2 = p["observables"][name], q["observables"][name]
                comb = float(np.hypot(o1["error"], o2["error"]))
                diff = abs(o2["mean"] - o1["mean"])
                if not (np.isfinite(comb) and np.isfinite(diff)) or comb <= 0:
                    continue
                if diff > n_sigma * comb:
                    flags.append(
                        {
                            "L": p["L"],
                            "g": p["g"],
                            "beta": b,
                            "beta2": float(q["beta"]),
                            "observable": name,
                            "value": o1["mean"],
                            "error": o1["error"],
                            "value2": o2["mean"],
                            "error2": o2["error"],
                            "sigmas": diff / comb,
                        }
                    )
    return {"pairs_checked": checked, "n_sigma": n_sigma, "flags": flags}
