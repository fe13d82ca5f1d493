"""Emergent U(1) symmetry of the valence-bond order parameter: <cos 4 theta> versus L and its histograms.

Writing the columnar order parameter as (D_x, D_y) = |D| (cos theta, sin theta), the Z4 anisotropy of the
square lattice shows up in <cos 4 theta>: +1 when the histogram of (D_x, D_y) has four sharp peaks on the
axes (columnar order), 0 when it is a ring (the angle is free: U(1)).  Near the Neel-VBS transition the
histogram stays round up to a length scale that grows faster than the correlation length, so at fixed
coupling |<cos 4 theta>| grows with L in the VBS phase once L passes that scale and falls with L where
the U(1) symmetry emerges (Lou, Sandvik and Balents, Phys. Rev. Lett. 99, 207203 (2007), from memory).

For every size and coupling the estimate is the per-bin series ``vbs_cos4`` (binning analysis) at the
largest beta available, with the histogram estimate ``cos4_hist`` beside it
(:mod:`qmc.analysis.vbs`); at fixed coupling |<cos 4 theta>|(L) is fitted with A L^(-a)
(:mod:`qmc.analysis.powerlaw`; a > 0: falls with L, a < 0: grows).  Tasks with pinned edges
(``[domain_wall]``) are left out: their edges fix the angle.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import asdict
from pathlib import Path
from typing import Any

import numpy as np

from .powerlaw import fit_power_law
from .walls import WALL_PARAM

__all__ = ["u1_analysis", "plot_cos4_vs_L"]


def u1_analysis(points: Sequence[dict], coupling: str | None, extra: Sequence[str] = ()) -> dict[str, Any]:
    """``{"points": [...], "fits": [...], "note": text}``: <cos 4 theta> per (L, coupling) and the fits.

    ``extra`` are further varying parameters that must agree within one series (beyond the coupling).
    Each point: ``L, g, beta, task, cos4, cos4_err, cos4_hist``; each fit: ``g, params, L, fit``.
    """
    free = [p for p in points if WALL_PARAM not in p["params"] and "vbs_cos4" in p["observables"]]
    note = ""
    if len(free) < len(points):
        note = "tasks with pinned edges left out (their edges fix the angle of the order parameter)"
    best: dict[tuple, dict] = {}
    for p in free:
        key = (p["L"], p["g"], *(repr(p["params"].get(k)) for k in extra))
        if key not in best or p["beta"] > best[key]["beta"]:
            best[key] = p
    rows = []
    for p in sorted(best.values(), key=lambda q: (q["g"] if q["g"] is not None else 0.0, q["L"])):
        o = p["observables"]["vbs_cos4"]
        rows.append({"L": p["L"], "g": p["g"], "beta": p["beta"], "task": p["task"],
                     "params": {k: p["params"].get(k) for k in extra}, "cos4": o["mean"],
                     "cos4_err": o["error"], "cos4_hist": (p.get("vbs") or {}).get("cos4_hist")})
    fits = []
    for members in _series(rows).values():
        fit = fit_power_law([m["L"] for m in members], [abs(m["cos4"]) for m in members],
                            [m["cos4_err"] for m in members])
        fits.append({"g": members[0]["g"], "params": members[0]["params"], "L": [m["L"] for m in members],
                     "fit": asdict(fit)})
    return {"coupling": coupling, "points": rows, "fits": fits, "note": note}


def _series(rows: Sequence[dict]) -> dict[tuple, list[dict]]:
    out: dict[tuple, list[dict]] = {}
    for r in rows:
        out.setdefault((r["g"], repr(sorted(r["params"].items()))), []).append(r)
    return out


def _label(coupling: str | None, g: Any, params: dict) -> str:
    parts = [f"{coupling}={g:g}"] if coupling is not None and g is not None else []
    parts += [f"{k}={v}" for k, v in params.items()]
    return ", ".join(parts) or "all tasks"


def plot_cos4_vs_L(result: dict, base: str | Path) -> list[Path]:
    """|<cos 4 theta>| versus L on log-log axes, one series per coupling, with the power-law fits."""
    from .plots import new_figure, save_figure
    from .wall_plots import log_axes

    fig, ax = new_figure(size=(5.6, 4.0))
    ax = ax[0, 0]
    fits = {(f["g"], repr(sorted(f["params"].items()))): f["fit"] for f in result["fits"]}
    for key, members in _series(result["points"]).items():
        L = np.array([m["L"] for m in members], dtype=float)
        y = np.abs([m["cos4"] for m in members])
        e = np.array([m["cos4_err"] for m in members], dtype=float)
        label = _label(result["coupling"], key[0], members[0]["params"])
        fit = fits.get(key)
        if fit and fit["ok"]:
            label += f": a = {fit['exponent']:.3g} +- {fit['exponent_err']:.2g}"
        bar = ax.errorbar(L, y, yerr=np.where(np.isfinite(e), e, 0.0), marker="o", ms=4, ls="none",
                          capsize=2, label=label)
        if fit and fit["ok"]:
            grid = np.geomspace(L.min() * 0.9, L.max() * 1.1, 50)
            ax.plot(grid, fit["amplitude"] * grid ** (-fit["exponent"]), lw=1, color=bar[0].get_color())
    log_axes(ax, [r["L"] for r in result["points"]])
    ax.set_xlabel("linear size L")
    ax.set_ylabel("|<cos 4 theta>| of the VBS order parameter")
    ax.set_title("Z4 anisotropy versus size (fit A L^-a)", fontsize="small")
    ax.legend(fontsize="x-small")
    return save_figure(fig, base)

