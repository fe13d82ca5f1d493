"""Organisation of task summaries as a scan: linear size L, inverse temperature beta, coupling g.

The coupling is the scan parameter that varies between tasks other than the size, beta and the
copy index.  Candidates are numeric scalar parameters, present in every task, taking at least
two values, and varying at fixed L (a parameter that only follows L is not a coupling).  With
several candidates that are one-to-one functions of each other (e.g. J = 1 - Q) the
alphabetically first is taken; with independent ones, the one with the most values (then the
alphabetically first), and the analysis is done separately for every value of the others
(:func:`group_points`); the caller may name the coupling instead.

A scan point is a dict ``{"task", "L", "beta", "g", "params", "observables", "vbs", "info"}`` built
from a task summary (see :mod:`qmc.analysis.summary`); ``g`` is None when no coupling varies.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from .errors import AnalysisError
from .tasks import COPY_PARAMS

__all__ = ["NOT_COUPLINGS", "curves_for", "detect_coupling", "group_points", "grouping_params",
           "other_varying", "scan_points"]

NOT_COUPLINGS = ("beta", *COPY_PARAMS, "lattice", "size", "boundary", "L", "linear_size", "n_sites", "seed")
"""Parameter names never taken as the scanned coupling."""


def _numeric(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _size(summary: dict) -> float:
    return summary["info"]["linear_size"]


def _one_to_one(summaries: Sequence[dict], a: str, b: str) -> bool:
    fwd: dict = {}
    back: dict = {}
    for s in summaries:
        va, vb = s["params"][a], s["params"][b]
        if fwd.setdefault(va, vb) != vb or back.setdefault(vb, va) != va:
            return False
    return True


def detect_coupling(summaries: Sequence[dict], coupling: str | None = None) -> str | None:
    """Name of the scanned coupling (see module docstring), or None when no parameter varies."""
    if not summaries:
        raise AnalysisError("no tasks to analyse", where="analysis")
    keys = set(summaries[0]["params"])
    for s in summaries[1:]:
        keys &= set(s["params"])
    if coupling is not None:
        if coupling not in keys:
            known = ", ".join(sorted(keys)) or "none"
            raise AnalysisError(
                f"parameter {coupling!r} is not set in every task (known: {known})", "coupling"
            )
        if not all(_numeric(s["params"][coupling]) for s in summaries):
            raise AnalysisError(f"parameter {coupling!r} is not a number in every task", "coupling")
        return coupling
    cands = []
    for k in sorted(keys - set(NOT_COUPLINGS)):
        vals = [s["params"][k] for s in summaries]
        if not all(_numeric(v) for v in vals) or len(set(vals)) < 2:
            continue
        by_size: dict[float, set] = {}
        for s, v in zip(summaries, vals, strict=True):
            by_size.setdefault(_size(s), set()).add(v)
        if any(len(v) > 1 for v in by_size.values()):
            cands.append(k)
    if not cands:
        return None
    if all(_one_to_one(summaries, cands[0], k) for k in cands[1:]):
        return cands[0]
    counts = {k: len({s["params"][k] for s in summaries}) for k in cands}
    return min(cands, key=lambda k: (-counts[k], k))


def other_varying(summaries: Sequence[dict], coupling: str | None) -> list[str]:
    """Parameters (other than the coupling, beta, copy index, size) that take several values."""
    keys = set().union(*(s["params"] for s in summaries)) if summaries else set()
    out = []
    for k in sorted(keys - set(NOT_COUPLINGS) - {coupling}):
        vals = {repr(s["params"].get(k)) for s in summaries}
        if len(vals) > 1:
            out.append(k)
    return out


def grouping_params(points: Sequence[dict], extra: Sequence[str]) -> list[str]:
    """The parameters of ``extra`` that take several values at one (L, coupling, beta): those the analysis
    must be split by (a parameter that follows L or the coupling, e.g. N = L^2 or J = 1 - g, is not)."""
    out = []
    for k in extra:
        seen: dict[tuple, str] = {}
        for p in points:
            v = repr(p["params"].get(k))
            if seen.setdefault((p["L"], p["g"], p["beta"]), v) != v:
                out.append(k)
                break
    return out


def group_points(points: Sequence[dict], extra: Sequence[str]) -> list[tuple[dict[str, Any], list[dict]]]:
    """The points split by the values of the parameters ``extra`` (each value combination once, in order of
    first appearance), as ``(values, points)``; one group ``({}, points)`` without ``extra``."""
    groups: dict[tuple, tuple[dict[str, Any], list[dict]]] = {}
    for p in points:
        values = {k: p["params"].get(k) for k in extra}
        key = tuple(repr(v) for v in values.values())
        groups.setdefault(key, (values, []))[1].append(p)
    return list(groups.values())


def scan_points(summaries: Sequence[dict], coupling: str | None) -> list[dict]:
    """Scan points sorted by (L, g, beta)."""
    pts = []
    for s in summaries:
        g = s["params"][coupling] if coupling is not None else None
        pts.append(
            {
                "task": s["task"],
                "L": _size(s),
                "beta": s["info"]["beta"],
                "g": g,
                "params": s["params"],
                "observables": s["observables"],
                "vbs": s.get("vbs"),
                "info": s["info"],
            }
        )
    pts.sort(key=lambda p: (p["L"], p["g"] if p["g"] is not None else 0.0, p["beta"]))
    return pts


def curves_for(points: Sequence[dict], quantity: str, extra: Sequence[str] = ()) -> dict[float, tuple]:
    """``{L: (g, value, error)}`` of ``quantity``, taking the largest beta at every (L, g).

    Raises AnalysisError when points are not unique in (L, g, beta) because the parameters
    ``extra`` also vary.
    """
    best: dict[tuple, dict] = {}
    for p in points:
        if p["g"] is None or quantity not in p["observables"]:
            continue
        key = (p["L"], p["g"])
        old = best.get(key)
        if old is not None and old["beta"] == p["beta"]:
            what = ", ".join(extra) or "an unknown parameter"
            raise AnalysisError(
                f"two tasks at L={p['L']}, coupling={p['g']}, beta={p['beta']} ({old['task']}, {p['task']}); "
                f"{what} also varies: analyse those sets separately",
                "analysis.scan",
            )
        if old is None or p["beta"] > old["beta"]:
            best[key] = p
    curves: dict[float, list] = {}
    for (L, g), p in sorted(best.items()):
        o = p["observables"][quantity]
        curves.setdefault(L, []).append((g, o["mean"], o["error"]))
    return {L: tuple(np.array(c, dtype=float).T) for L, c in curves.items()}
