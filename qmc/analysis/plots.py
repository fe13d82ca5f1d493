"""Matplotlib helpers for the analysis (Agg canvas only: figures are written to files, never shown).

Figures are ``matplotlib.figure.Figure`` objects attached to an Agg canvas, so pyplot's global
state and interactive backends are never touched.  matplotlib is imported lazily inside the
functions.  Every ``plot_*`` function writes ``<base>.png`` and ``<base>.pdf`` and returns the paths.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

__all__ = [
    "draw_vbs_histogram",
    "new_figure",
    "plot_collapse",
    "plot_crossing_drift",
    "plot_vbs_histograms",
    "plot_vs_coupling",
    "save_figure",
]


def new_figure(nrows: int = 1, ncols: int = 1, size: tuple[float, float] | None = None) -> tuple[Any, Any]:
    """A Figure on an Agg canvas and its axes (``squeeze=False`` array).

    Fixed margins instead of a layout engine: the engine would double the drawing time per file.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    w, h = size or (4.8 * ncols, 3.6 * nrows)
    fig = Figure(figsize=(w, h))
    FigureCanvasAgg(fig)
    axes = fig.subplots(nrows, ncols, squeeze=False)
    fig.subplots_adjust(
        left=0.75 / w, right=1 - 0.15 / w, bottom=0.55 / h, top=1 - 0.35 / h, wspace=0.4, hspace=0.5
    )
    return fig, axes


def save_figure(fig: Any, base: str | Path) -> list[Path]:
    """Write ``base.png`` (150 dpi) and ``base.pdf``; returns both paths."""
    base = Path(base)
    base.parent.mkdir(parents=True, exist_ok=True)
    out = []
    for ext in ("png", "pdf"):
        p = base.with_name(base.name + "." + ext)
        fig.savefig(p, dpi=150)
        out.append(p)
    return out


def plot_vs_coupling(
    curves: Mapping[float, tuple[np.ndarray, np.ndarray, np.ndarray]],
    ylabel: str,
    xlabel: str,
    base: str | Path,
) -> list[Path]:
    """Observable versus coupling, one error-bar curve per size L."""
    fig, ax = new_figure()
    ax = ax[0, 0]
    for L in sorted(curves):
        g, y, e = curves[L]
        ax.errorbar(
            g, y, yerr=np.where(np.isfinite(e), e, 0.0), marker="o", ms=3, capsize=2, lw=1, label=f"L={L:g}"
        )
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    ax.legend(fontsize="small")
    return save_figure(fig, base)


def plot_crossing_drift(
    crossings: Sequence[Any], extrap: Any, inv_nu_extrap: Any, quantity: str, base: str | Path
) -> list[Path]:
    """Left: crossing g*(L1) versus 1/L1 with the fit g_c + a L^-omega; right: 1/nu(L1) versus 1/L1."""
    fig, ax = new_figure(1, 2)
    L = np.array([c.L1 for c in crossings], dtype=float)
    for axis, attr, ex, label in (
        (ax[0, 0], "g", extrap, f"crossing of {quantity}"),
        (ax[0, 1], "inv_nu", inv_nu_extrap, "1/nu from slopes"),
    ):
        y = np.array([getattr(c, attr) for c in crossings], dtype=float)
        e = np.array([getattr(c, attr + "_err") for c in crossings], dtype=float)
        axis.errorbar(1.0 / L, y, yerr=np.where(np.isfinite(e), e, 0.0), marker="o", ls="none", capsize=2)
        if ex is not None and np.isfinite(ex.limit):
            xs = np.linspace(0.0, 1.0 / L.min() * 1.05, 100)
            with np.errstate(divide="ignore", invalid="ignore"):
                ys = ex.limit + ex.amplitude * np.where(xs > 0, xs, np.nan) ** ex.omega
            axis.plot(xs, ys, lw=1)
            axis.errorbar(
                [0.0],
                [ex.limit],
                yerr=[ex.limit_err if np.isfinite(ex.limit_err) else 0.0],
                marker="s",
                color="k",
                capsize=2,
            )
        axis.set_xlabel("1/L (smaller size of the pair)")
        axis.set_ylabel(label)
        axis.set_xlim(left=0.0)
    return save_figure(fig, base)


def plot_collapse(
    curves: Mapping[float, tuple[np.ndarray, np.ndarray, np.ndarray]],
    collapse: Any,
    quantity: str,
    base: str | Path,
) -> list[Path]:
    """Quantity versus (g - g_c) L^(1/nu) with the fitted master curve over the fitted x range.

    Points outside the fitted range are drawn faint.
    """
    fig, ax = new_figure()
    ax = ax[0, 0]
    lo, hi = collapse.x_range
    for L in sorted(curves):
        g, y, e = (np.asarray(a, dtype=float) for a in curves[L])
        x = (g - collapse.g_c) * float(L) ** (1.0 / collapse.nu)
        inside = (
            (x >= lo - 1e-12 * abs(lo)) & (x <= hi + 1e-12 * abs(hi))
            if np.isfinite(lo)
            else np.ones(x.size, bool)
        )
        err = np.where(np.isfinite(e), e, 0.0)
        bar = ax.errorbar(
            x[inside], y[inside], yerr=err[inside], marker="o", ms=3, ls="none", capsize=2, label=f"L={L:g}"
        )
        if (~inside).any():
            ax.errorbar(
                x[~inside],
                y[~inside],
                yerr=err[~inside],
                marker="o",
                ms=3,
                ls="none",
                capsize=2,
                alpha=0.25,
                color=bar[0].get_color(),
            )
    if np.isfinite(lo) and hi > lo:
        grid = np.linspace(lo, hi, 200)
        ax.plot(grid, collapse.master_curve(grid), color="k", lw=1)
    ax.set_xlabel(f"(g - {collapse.g_c:.5g}) L^(1/{collapse.nu:.3g})")
    ax.set_ylabel(quantity)
    ax.legend(fontsize="small")
    return save_figure(fig, base)


def draw_vbs_histogram(ax: Any, hist: np.ndarray, r: float, title: str | None = None) -> Any:
    """imshow of counts H[D_x, D_y] with extent [-r, r]^2, D_x horizontal, equal aspect."""
    h = np.asarray(hist, dtype=float)
    im = ax.imshow(
        h.T, origin="lower", extent=(-r, r, -r, r), aspect="equal", interpolation="nearest", cmap="viridis"
    )
    ax.set_xlabel("D_x")
    ax.set_ylabel("D_y")
    if title:
        ax.set_title(title, fontsize="small")
    return im


def plot_vbs_histograms(
    items: Sequence[tuple[str, np.ndarray, float]], base: str | Path, max_panels: int = 12
) -> list[Path]:
    """Grid of VBS histograms ``(title, hist, r)``; at most ``max_panels`` evenly chosen ones."""
    if len(items) > max_panels:
        idx = np.unique(np.linspace(0, len(items) - 1, max_panels).round().astype(int))
        items = [items[i] for i in idx]
    ncols = min(4, len(items))
    nrows = -(-len(items) // ncols)
    fig, axes = new_figure(nrows, ncols, size=(3.0 * ncols, 3.0 * nrows))
    for k, ax in enumerate(axes.ravel()):
        if k < len(items):
            title, hist, r = items[k]
            draw_vbs_histogram(ax, hist, r, title)
        else:
            ax.set_axis_off()
    return save_figure(fig, base)
