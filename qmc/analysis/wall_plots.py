"""Figures of the domain-wall analysis (:mod:`qmc.analysis.walls`): kappa(L), the profiles across the strip.

``plot_kappa`` draws, for every series (wall and coupling), kappa versus L on log-log axes with its
power-law fit, and kappa L versus L beside it (kappa L grows with L when the wall energy falls more slowly
than 1/L, the signature of a VBS).  ``plot_profiles`` draws the dimer order D_x(x), D_y(x) and the energy
per site of each wall relative to its reference across the strip, for one scan point.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import numpy as np

from . import plots  # looked up at call time (tests replace plots.save_figure)
from .walls import REFERENCES, profiles_of, series_label

__all__ = ["plot_kappa", "plot_profiles", "log_axes"]

_WALL_NAMES = {"none": "reference (y-dimer edges)", "none-x": "reference (x-dimer edges)",
               "pi": "pi wall", "pi/2": "pi/2 wall"}


def log_axes(ax, sizes: Sequence[float]) -> None:
    """Log-log axes with the sizes as plain x tick labels and plain y tick labels."""
    from matplotlib.ticker import FormatStrFormatter, LogLocator, NullFormatter

    ax.set_xscale("log")
    ax.set_yscale("log")
    ticks = sorted(set(float(L) for L in sizes))
    ax.set_xticks(ticks)
    ax.xaxis.set_major_formatter(FormatStrFormatter("%g"))
    ax.xaxis.set_minor_formatter(NullFormatter())
    ax.yaxis.set_major_locator(LogLocator(base=10.0, subs=(1.0, 2.0, 5.0)))
    ax.yaxis.set_major_formatter(FormatStrFormatter("%g"))
    ax.yaxis.set_minor_formatter(NullFormatter())


def plot_kappa(entries: Sequence[dict], fits: Sequence[dict], sizes: Sequence[str], base: str | Path
               ) -> list[Path]:
    """Left: kappa versus L (log-log) with the fits; right: kappa L versus L.  Non-positive kappa values are
    drawn on the right panel only."""
    fig, axes = plots.new_figure(1, 2, size=(11.0, 4.2))
    left, right = axes[0]
    groups: list[dict] = []
    for f in fits:  # one colour per coupling, one marker and line style per wall
        if f["params"] not in groups:
            groups.append(f["params"])
    for f in fits:
        members = [e for e in entries if e["wall"] == f["wall"]
                   and {k: v for k, v in e["params"].items() if k not in sizes} == f["params"]]
        L = np.array([m["L"] for m in members], dtype=float)
        k = np.array([m["kappa"] for m in members], dtype=float)
        s = np.array([m["kappa_err"] for m in members], dtype=float)
        label = series_label(f["wall"], f["params"])
        fit = f["fit"]
        text = (f": a = {fit['exponent']:.3g} +- {fit['exponent_err']:.2g}" if fit["ok"] else
                " (no fit)")
        positive = k > 0
        colour = f"C{groups.index(f['params']) % 10}"
        marker, line = ("s", "--") if f["wall"] == "pi/2" else ("o", "-")
        left.errorbar(L[positive], k[positive], yerr=s[positive], marker=marker, ms=4, ls="none", capsize=2,
                      color=colour, label=label + text)
        if fit["ok"] and fit["amplitude"] > 0:
            grid = np.geomspace(L.min() * 0.9, L.max() * 1.1, 50)
            left.plot(grid, fit["amplitude"] * grid ** (-fit["exponent"]), lw=1, ls=line, color=colour)
        right.errorbar(L, k * L, yerr=s * L, marker=marker, ms=4, lw=1, ls=line, capsize=2, color=colour,
                       label=label)
    log_axes(left, [e["L"] for e in entries])
    fig.subplots_adjust(left=0.08, wspace=0.3)
    left.set_xlabel("distance between the pinned edges L")
    left.set_ylabel("wall energy per unit length kappa")
    left.set_title("kappa = (E_wall - E_ref) / L_y, fit A L^-a", fontsize="small")
    left.legend(fontsize="x-small")
    right.axhline(0.0, color="0.6", lw=0.8)
    right.set_xlabel("distance between the pinned edges L")
    right.set_ylabel("kappa L")
    right.set_xticks(sorted({float(e["L"]) for e in entries}))
    right.set_title("kappa L: grows with L in a valence-bond solid", fontsize="small")
    return plots.save_figure(fig, base)


def plot_profiles(points: Sequence[dict], title: str, base: str | Path) -> list[Path]:
    """D_x(x) and D_y(x) of the tasks of one scan point (one curve per wall) and, for each wall, the energy
    per site relative to the reference with the same edge, e(x) - e_ref(x) (for the pi/2 wall: "none" on
    the left half, "none-x" on the right half), whose sum over x is kappa up to statistical errors (n_c =
    L_y sites per column; exactly so on average, by the mirror symmetry of the references)."""
    fig, axes = plots.new_figure(1, 3, size=(13.0, 3.8))
    panels = (("D_x", "x-dimer order D_x(x)"), ("D_y", "y-dimer order D_y(x)"))
    order = {"none": 0, "none-x": 1, "pi/2": 2, "pi": 3}
    by_wall = {str(p["params"].get("wall")): p for p in points}
    profiles = {w: profiles_of(p) for w, p in by_wall.items()}
    for wall in sorted(profiles, key=lambda w: order.get(w, 9)):
        prof = profiles[wall]
        if prof is None:
            continue
        x = prof["x"][0]
        label = _WALL_NAMES.get(wall, wall)
        for ax, (name, _) in zip(axes[0], panels, strict=False):
            mean, err = prof[name]
            ax.errorbar(x, mean, yerr=np.where(np.isfinite(err), err, 0.0), marker="o", ms=3, lw=1, capsize=2,
                        label=label)
        refs = [profiles.get(r) for r in REFERENCES.get(wall, ())]
        if refs and all(r is not None for r in refs):
            # column by column, the reference with the same edge: for the pi/2 wall the left half of "none"
            # and the right half of "none-x" (mirror symmetry: together they hold (E_none + E_none-x) / 2)
            side = np.minimum((2 * x >= x.size).astype(int), len(refs) - 1)
            ref = np.choose(side, [r["e"][0] for r in refs])
            ref_err = np.choose(side, [r["e"][1] for r in refs])
            delta, err = prof["e"][0] - ref, np.hypot(prof["e"][1], ref_err)
            axes[0][2].errorbar(x, delta, yerr=np.where(np.isfinite(err), err, 0.0), marker="o", ms=3, lw=1,
                                capsize=2, color=f"C{order[wall]}",
                                label=f"{label}: sum = {np.sum(delta):.3g}")
    for ax, (_, ylabel) in zip(axes[0], panels, strict=False):
        ax.set_ylabel(ylabel)
    axes[0][0].set_title("edge columns hold one x-bond each", fontsize="x-small")
    axes[0][2].set_ylabel("e(x) - e_ref(x), energy per site")
    axes[0][2].set_title("wall energy density (reference with the same edge); sum over x ~ kappa",
                         fontsize="x-small")
    for ax in axes[0]:
        ax.set_xlabel("column x (open edges at both ends)")
        ax.axhline(0.0, color="0.6", lw=0.8)
    axes[0][0].legend(fontsize="x-small")
    if axes[0][2].has_data():
        axes[0][2].legend(fontsize="x-small")
    fig.suptitle(title, fontsize="small")
    return plots.save_figure(fig, base)
