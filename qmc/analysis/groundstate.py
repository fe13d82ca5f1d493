"""Ground-state (T -> 0) convergence: the check of a scan by beta doubling, and the report of a task's own
search by beta doubling (``[ground_state]``).

:func:`beta_doubling_check`: for every (L, g) where the run holds both beta and 2 beta, each checked
observable is compared: the point is flagged when

    |O(2 beta) - O(beta)| > n_sigma * sqrt(sigma(beta)^2 + sigma(2 beta)^2)      (n_sigma = 2)

i.e. the lower temperature still changes the result beyond the statistical errors (common
practice, no source; the separation is :func:`qmc.chain.convergence.separation`, the same rule that ends a
task's own search).  Observables that depend on beta explicitly (susceptibilities, n_ops,
specific heat) are not checked.  With many observables some 2-sigma flags occur by chance
(about 5 % per comparison).

:func:`search_summary`: a task's search as stored in its file (:mod:`qmc.storage.search_record`): the
beta ladder, each stage's estimates of the watched observables and their separation from the stage before,
and the outcome (``converged``, ``not reached`` or ``running``).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from qmc.chain.convergence import separation, stage_estimates
from qmc.storage.search_record import read_search

__all__ = ["GROUND_STATE_OBSERVABLES", "beta_doubling_check", "search_summary"]

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
                sig = separation(o1["mean"], o1["error"], o2["mean"], o2["error"])
                if not math.isfinite(sig):
                    continue
                if sig > n_sigma:
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
                            "sigmas": sig,
                        }
                    )
    return {"pairs_checked": checked, "n_sigma": n_sigma, "flags": flags}


def search_summary(group: dict[str, Any], where: str = "") -> dict[str, Any]:
    """``{"outcome", "start_beta", "max_beta", "observables", "n_sigma", "betas", "stages": [{"beta",
    "bins", "target_met", "agree", "sigmas", "estimates": {name: {"mean", "error"}}}]}`` of the
    ``/ground_state`` group of a task file."""
    rec = read_search(group, where)
    stages = []
    for st in rec.stages:
        est = stage_estimates(st.bins, st.names, rec.observables) if st.bins.shape[0] else {}
        stages.append({"beta": st.beta, "bins": int(st.bins.shape[0]), "target_met": st.target_met,
                       "agree": st.agree, "sigmas": dict(st.sigmas),
                       "estimates": {k: {"mean": m, "error": e} for k, (m, e) in est.items()}})
    return {"outcome": rec.outcome, "start_beta": rec.start_beta, "max_beta": rec.max_beta,
            "observables": list(rec.observables), "n_sigma": rec.n_sigma,
            "betas": [s["beta"] for s in stages], "stages": stages}
