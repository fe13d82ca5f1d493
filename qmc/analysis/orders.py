"""Reports on the valence-bond order beyond crossings: domain-wall energies and the emergent U(1).

Called by :func:`qmc.analysis.report.analyze_run`: :func:`wall_report` (kappa per scan point and wall with
its fits, domain_wall.csv and profiles.csv; :mod:`qmc.analysis.walls`), :func:`order_plots` (kappa(L), the
profiles, |<cos 4 theta>|(L) and the histogram panels; :mod:`qmc.analysis.wall_plots`,
:mod:`qmc.analysis.u1`) and :func:`order_lines` (their text for ``qmc analyze``).
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import numpy as np

from .tables import write_csv
from .walls import WALL_PARAM, kappa_fits, profile_rows, series_label, size_like, wall_energies

__all__ = ["wall_report", "order_plots", "order_lines"]


def _safe(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", name)


def _pm(d: dict, key: str, err: str) -> str:
    if d.get(key) is None:
        return "n/a"
    e = d.get(err)
    return f"{d[key]:.6g} +- {e:.2g}" if e is not None else f"{d[key]:.6g}"


def wall_report(points: list[dict], out: Path, warnings: list[str]) -> tuple[list, list, list[Path]]:
    """kappa entries, their fits and the files written (domain_wall.csv, profiles.csv)."""
    entries, missing = wall_energies(points)
    warnings += missing
    sizes = size_like(points)
    fits = kappa_fits(entries, sizes)
    for f in fits:
        if not f["fit"]["ok"]:
            warnings.append(f"kappa of the {series_label(f['wall'], f['params'])}: no power-law fit "
                            f"({f['fit']['note']})")
    names = sorted({k for e in entries for k in e["params"]})
    cols = ["L", "L_y", "beta", *[n for n in names if n not in ("L", "beta")], WALL_PARAM, "kappa",
            "kappa_err", "kappa_L", "kappa_L_err", "E_wall", "E_wall_err", "E_ref", "E_ref_err"]
    rows = [{**e["params"], **{k: v for k, v in e.items() if k != "params"}} for e in entries]
    files = [write_csv(out / "domain_wall.csv", cols, rows),
             write_csv(out / "profiles.csv", *profile_rows(points))]
    return entries, fits, files


def order_plots(points: list[dict], coupling: str | None, walls: dict, u1: dict, hist_of: dict, out: Path
                 ) -> list[Path]:
    """kappa(L), the profiles of every point, |<cos 4 theta>|(L) and the histogram panels per coupling."""
    from .plots import plot_vbs_histograms
    from .u1 import plot_cos4_vs_L
    from .wall_plots import plot_kappa, plot_profiles

    pdir = out / "plots"
    files: list[Path] = []
    if walls["entries"]:
        files += plot_kappa(walls["entries"], walls["fits"], walls["sizes"], pdir / "kappa")
    groups: dict[str, list[dict]] = {}
    for p in points:
        if any(n.startswith("energy_profile/") for n in p["observables"]):
            rest = {k: v for k, v in p["params"].items() if k not in (WALL_PARAM, "copy", "lattice", "size",
                                                                         "boundary")}
            groups.setdefault(", ".join(f"{k}={v}" for k, v in rest.items()), []).append(p)
    for label, members in groups.items():
        files += plot_profiles(members, f"profiles across the strip: {label}",
                               pdir / f"profiles_{_safe(label)}")
    if u1["points"]:
        files += plot_cos4_vs_L(u1, pdir / "cos4_vs_L")
    by_g: dict[Any, list] = {}
    for r in u1["points"]:
        hist, rng, grid = hist_of.get(r["task"], (None, None, None))
        if hist is not None and rng is not None and np.asarray(hist).size and np.asarray(hist).sum() > 0:
            cos4 = f"{r['cos4']:.3f}" if np.isfinite(r["cos4"]) else "n/a"
            by_g.setdefault((r["g"], repr(r["params"])), []).append(
                (f"L={r['L']:g}: <cos 4 theta> = {cos4}", hist, rng, grid))
    for (g, _), items in by_g.items():
        name = f"{coupling}{g:g}" if coupling is not None and g is not None else "all"
        title = (f"(D_x, D_y) histograms at {coupling} = {g:g}, one per size" if coupling is not None
                 and g is not None else "(D_x, D_y) histograms, one per size")
        files += plot_vbs_histograms(items, pdir / f"vbs_{_safe(name)}", title=title)
    return files


def _fit_text(fit: dict, what: str) -> str:
    if not fit["ok"]:
        return f"no fit ({fit['note']})"
    return (f"{what} ~ L^-a with a = {fit['exponent']:.4g} +- {fit['exponent_err']:.2g} "
            f"(chi2/dof = {fit['chi2']:.3g}/{fit['dof']})")


def order_lines(result: dict[str, Any]) -> list[str]:
    """Text lines of the kappa table and fits and of the <cos 4 theta> fits."""
    return _wall_lines(result) + _u1_lines(result)


def _wall_lines(result: dict[str, Any]) -> list[str]:
    """The kappa table and its fits (runs with [domain_wall] only)."""
    entries = result.get("domain_wall") or []
    if not entries:
        return []
    lines = ["domain walls: kappa = (E_wall - E_ref) / L_y  (energy per unit length of wall)"]
    names = sorted({k for e in entries for k in e["params"] if k not in ("L", "beta")})
    head = "  ".join(f"{h:>8}" for h in ("wall", "L", *names))
    lines.append(f"  {head}  {'kappa':>22}  {'kappa*L':>20}")
    for e in entries:
        cells = [e["wall"], f"{e['L']:g}", *(f"{e['params'].get(n)}" for n in names)]
        lines.append("  " + "  ".join(f"{c:>8}" for c in cells)
                     + f"  {_pm(e, 'kappa', 'kappa_err'):>22}  {_pm(e, 'kappa_L', 'kappa_L_err'):>20}")
    for f in result.get("domain_wall_fits") or []:
        lines.append(f"  {series_label(f['wall'], f['params'])}: {_fit_text(f['fit'], 'kappa')}")
    return lines


def _u1_lines(result: dict[str, Any]) -> list[str]:
    """<cos 4 theta> fits per coupling (when any task measured it)."""
    u1 = result.get("emergent_u1") or {}
    if not u1.get("points"):
        return []
    lines = ["emergent U(1): |<cos 4 theta>| versus L at fixed coupling"]
    for f in u1["fits"]:
        label = f"{u1['coupling']}={f['g']:g}" if u1["coupling"] and f["g"] is not None else "all tasks"
        lines.append(f"  {label} (L = {', '.join(f'{L:g}' for L in f['L'])}): "
                     f"{_fit_text(f['fit'], '|<cos 4 theta>|')}")
    if u1.get("note"):
        lines.append(f"  ({u1['note']})")
    return lines
