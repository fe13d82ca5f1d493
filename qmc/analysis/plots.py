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
    "plot_size_extrapolation",
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


def plot_size_extrapolation(records: Sequence[dict], ylabel: str, base: str | Path) -> list[Path]:
    """y(L) of one observable against 1/L, one colour per scan point: the data with error bars, the fitted
    c_0 + sum_k c_k L^-p_k from 1/L = 0 to the smallest size, and the limit c_0 +- error at 1/L = 0.

    ``records``: fits as dicts (:class:`qmc.analysis.size_extrapolation.SizeExtrapolation` fields).  For
    ``m_stag2`` with a full-vector entry the legend also gives m_s = sqrt(3 c_0).
    """
    import textwrap

    fig, ax = new_figure(size=(6.4, 4.6))
    fig.subplots_adjust(left=0.16)  # room for a two-line axis label
    ax = ax[0, 0]
    x_max = 0.0
    for r in records:
        L = np.asarray(r["sizes"], dtype=float)
        x_max = max(x_max, 1.0 / L.min())
        params = ", ".join(f"{k}={v}" for k, v in r["params"].items())
        bar = ax.errorbar(1.0 / L, r["values"], yerr=r["errors"], marker="o", ms=3, ls="none", capsize=2,
                          label=params or "per-size mean +- error")
        colour = bar[0].get_color()
        xs = np.linspace(0.0, 1.0 / L.min(), 200)[1:]
        ys = r["coef"][0] + sum(c * xs**p for c, p in zip(r["coef"][1:], r["powers"], strict=True))
        ax.plot(np.concatenate([[0.0], xs]), np.concatenate([[r["coef"][0]], ys]), color=colour, lw=1)
        text = f"c_0 (L = inf) = {r['limit']:.6g} +- {r['limit_err']:.2g}"
        fv = r.get("full_vector")
        if fv and fv.get("m_s") is not None and np.isfinite(fv["m_s"]):
            text += f", m_s = sqrt(3 c_0) = {fv['m_s']:.5g} +- {fv['m_s_err']:.2g}"
        ax.errorbar([0.0], [r["limit"]], yerr=[r["limit_err"]], marker="s", ms=5, color=colour, capsize=3,
                    mfc="white", label=text)
    powers = ", ".join("1/L" if p == 1 else f"1/L^{p:g}" for p in records[0]["powers"]) if records else ""
    ax.set_title(f"fit c_0 + corrections in {powers}; squares: c_0 at L = infinity", fontsize="small")
    ax.set_xlabel("1/L  (L = linear system size in lattice spacings)")
    ax.set_ylabel("\n".join(textwrap.wrap(ylabel, 48)), fontsize="small")
    ax.set_xlim(-0.02 * x_max, 1.05 * x_max)
    ax.legend(fontsize="x-small")
    return save_figure(fig, base)
