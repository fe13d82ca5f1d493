"""Valence-bond domain walls: the wall energy per unit length kappa(L), its power-law fit, and the profiles.

A run with ``[domain_wall]`` holds, for every scan point, tasks that differ only in their ``wall`` parameter
(the pinned edges are described in :mod:`qmc.models.walls`): the references ``none`` and ``none-x`` and the
walls ``pi/2`` and ``pi``.  With E the total energy of a task (``energy`` times the number of sites N):

    kappa = (E_wall - E_ref) / L_y,   E_ref = E_none (pi wall),   E_ref = (E_none + E_none-x) / 2 (pi/2 wall)

(L_y the periodic length, the length of the wall; energy in units of the couplings per lattice spacing).
The tasks are independent Markov chains, so the error of kappa combines their errors in quadrature:
sigma_kappa^2 = (N^2 / L_y^2) (sigma_wall^2 + sum_r sigma_r^2 / n_ref^2), each sigma from the binning
analysis of the task's energy bins (a difference of means: no ratio, so no jackknife is needed).

Series: the entries of one wall whose parameters differ only in the size (the parameters that follow the
size, such as L itself or beta = "L", are recognised from the data) form a series kappa(L), fitted with
kappa = A L^(-a) (:mod:`qmc.analysis.powerlaw`; no fit with fewer than three sizes).  ``L`` is the length
along x, the distance between the pinned edges.

Profiles: the per-column bins ``vbs_profile_x/<c>``, ``vbs_profile_y/<c>`` and ``energy_profile/<c>``
(:mod:`qmc.chain.profiles`) as arrays D_x(x), D_y(x), e(x) with errors, for the plots and profiles.csv.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import asdict
from typing import Any

import numpy as np

from .powerlaw import fit_power_law
from .tasks import canonical_value

__all__ = ["WALL_PARAM", "PROFILES", "is_profile", "has_walls", "wall_energies", "size_like", "kappa_fits",
           "profiles_of", "profile_rows", "series_label"]

WALL_PARAM = "wall"
REFERENCES = {"pi": ("none",), "pi/2": ("none", "none-x")}
"""The reference tasks of each wall (their mean energy is E_ref)."""
PROFILES = {"D_x": "vbs_profile_x/", "D_y": "vbs_profile_y/", "e": "energy_profile/"}
"""Profile name -> bin-name prefix (the column index follows)."""
_NOT_PARAMS = (WALL_PARAM, "copy", "replica", "lattice", "size", "boundary")


def is_profile(name: str) -> bool:
    """Is ``name`` a per-column profile bin?"""
    return name.startswith(tuple(PROFILES.values()))


def has_walls(points: Sequence[dict]) -> bool:
    """Does any scan point belong to a domain-wall task?"""
    return any(WALL_PARAM in p["params"] for p in points)


def _params(p: dict, drop: Sequence[str] = ()) -> dict[str, Any]:
    return {k: v for k, v in p["params"].items() if k not in _NOT_PARAMS and k not in drop}


def _key(params: dict[str, Any]) -> tuple:
    return tuple(sorted((k, repr(canonical_value(v))) for k, v in params.items()))


def _length_y(p: dict) -> float:
    size = p["params"].get("size")
    if isinstance(size, list | tuple) and len(size) >= 2:
        return float(size[1])
    return float(p["info"]["n_sites"]) / float(p["L"])


def _total_energy(p: dict) -> tuple[float, float]:
    o = p["observables"].get("energy")
    n = float(p["info"]["n_sites"])
    return (o["mean"] * n, o["error"] * n) if o else (float("nan"), float("nan"))


def wall_energies(points: Sequence[dict]) -> tuple[list[dict], list[str]]:
    """One entry per (scan point, wall), sorted by wall, parameters and L; and warnings for walls whose
    reference tasks are missing.  Entry keys: ``L, L_y, beta, params, wall, kappa, kappa_err, kappa_L,
    kappa_L_err, E_wall, E_wall_err, E_ref, E_ref_err, tasks``."""
    groups: dict[tuple, dict[str, dict]] = {}
    for p in points:
        if WALL_PARAM in p["params"]:
            groups.setdefault(_key(_params(p)), {})[str(p["params"][WALL_PARAM])] = p
    entries, warnings = [], []
    for by_wall in groups.values():
        for wall, refs in REFERENCES.items():
            if wall not in by_wall:
                continue
            p = by_wall[wall]
            missing = [r for r in refs if r not in by_wall]
            if missing:
                warnings.append(f"{p['task']}: no reference task ({', '.join(missing)}) for the {wall} wall")
                continue
            e_w, s_w = _total_energy(p)
            ref = [_total_energy(by_wall[r]) for r in refs]
            e_r = float(np.mean([e for e, _ in ref]))
            s_r = float(np.sqrt(sum(s**2 for _, s in ref))) / len(ref)
            ly = _length_y(p)
            kappa, err = (e_w - e_r) / ly, float(np.hypot(s_w, s_r)) / ly
            entries.append({"L": p["L"], "L_y": ly, "beta": p["beta"], "params": _params(p), "wall": wall,
                            "kappa": kappa, "kappa_err": err, "kappa_L": kappa * p["L"],
                            "kappa_L_err": err * p["L"], "E_wall": e_w, "E_wall_err": s_w, "E_ref": e_r,
                            "E_ref_err": s_r, "tasks": [p["task"], *(by_wall[r]["task"] for r in refs)]})
    entries.sort(key=lambda e: (e["wall"], _key({k: v for k, v in e["params"].items()
                                                 if k != "beta" and v != e["L"]}), e["L"], e["beta"]))
    return entries, warnings


def size_like(points: Sequence[dict]) -> list[str]:
    """Parameters that follow the size: equal to L in every task (the size itself), or taking at least two
    values, one per L (e.g. beta = "L")."""
    out = []
    names = set().union(*(p["params"] for p in points)) if points else set()
    for k in sorted(names - set(_NOT_PARAMS)):
        values = [p["params"].get(k) for p in points]
        if all(isinstance(v, int | float) and v == p["L"] for v, p in zip(values, points, strict=True)):
            out.append(k)
            continue
        by_size: dict[float, set] = {}
        for p, v in zip(points, values, strict=True):
            by_size.setdefault(p["L"], set()).add(repr(canonical_value(v)))
        if len(by_size) > 1 and all(len(v) == 1 for v in by_size.values()) \
                and len(set().union(*by_size.values())) > 1:
            out.append(k)
    return out


def series_label(wall: str, params: dict[str, Any]) -> str:
    """``"pi wall, J=0.1"``: a legend text for one series."""
    rest = ", ".join(f"{k}={v:g}" if isinstance(v, int | float) else f"{k}={v}" for k, v in params.items())
    return f"{wall} wall" + (f", {rest}" if rest else "")


def kappa_fits(entries: Sequence[dict], sizes: Sequence[str]) -> list[dict]:
    """Power-law fit of kappa(L) for every series (wall and the parameters other than ``sizes``).

    Each result: ``{"wall", "params", "L", "fit"}`` with ``fit`` the fields of
    :class:`~qmc.analysis.powerlaw.PowerLaw` (``ok`` False and a ``note`` when no fit was possible)."""
    series: dict[tuple, list[dict]] = {}
    for e in entries:
        params = {k: v for k, v in e["params"].items() if k not in sizes}
        series.setdefault((e["wall"], _key(params)), []).append(e)
    out = []
    for (wall, _), members in sorted(series.items()):
        params = {k: v for k, v in members[0]["params"].items() if k not in sizes}
        fit = fit_power_law([m["L"] for m in members], [m["kappa"] for m in members],
                            [m["kappa_err"] for m in members])
        out.append({"wall": wall, "params": params, "L": [m["L"] for m in members], "fit": asdict(fit)})
    return out


def _columns(observables: dict, prefix: str) -> list[int]:
    return sorted(int(n[len(prefix):]) for n in observables if n.startswith(prefix))


def profiles_of(p: dict) -> dict[str, tuple[np.ndarray, np.ndarray]] | None:
    """``{"x": (columns, zeros), "D_x": (mean, err), "D_y": ..., "e": ...}`` of a scan point, or None."""
    obs = p["observables"]
    cols = _columns(obs, PROFILES["e"])
    if not cols:
        return None
    x = np.array(cols, dtype=float)
    out = {"x": (x, np.zeros_like(x))}
    for name, prefix in PROFILES.items():
        vals = [obs.get(f"{prefix}{c}") for c in cols]
        out[name] = (np.array([v["mean"] if v else np.nan for v in vals], dtype=float),
                     np.array([v["error"] if v else np.nan for v in vals], dtype=float))
    return out


def profile_rows(points: Sequence[dict]) -> tuple[list[str], list[dict]]:
    """Columns and rows of profiles.csv: one row per (scan point, column x) of every point with profiles."""
    names = sorted(set().union(*(_params(p) for p in points))) if points else []
    cols = ["L", "beta", *names, WALL_PARAM, "x"]
    cols += [c for name in PROFILES for c in (name, f"{name}_err")]
    rows = []
    for p in points:
        prof = profiles_of(p)
        if prof is None:
            continue
        for i, x in enumerate(prof["x"][0]):
            row = {"L": p["L"], "beta": p["beta"], WALL_PARAM: p["params"].get(WALL_PARAM), "x": int(x),
                   **_params(p)}
            for name in PROFILES:
                row[name], row[f"{name}_err"] = prof[name][0][i], prof[name][1][i]
            rows.append(row)
    return cols, rows
