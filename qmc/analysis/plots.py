"""Matplotlib helpers for the analysis (Agg canvas only: figures are written to files, never shown).

Figures are ``matplotlib.figure.Figure`` objects attached to an Agg canvas, so pyplot's global
state and interactive backends are never touched.  matplotlib is imported lazily inside the
functions.  Every ``plot_*`` function writes ``<base>.png`` and ``<base>.pdf`` and returns the paths.

Every figure can carry a ``title`` (the model, lattice and beta rule:
:meth:`qmc.analysis.run_text.RunText.title`) and a ``note`` under the axes (what the observable is, the
caveats of a fit); axis labels give the symbol, its definition and units (:mod:`qmc.analysis.labels`).
A fit's legend entry gives chi^2/dof and says "UNRELIABLE" when its p-value is small
(:mod:`qmc.analysis.fit_quality`).
"""

from __future__ import annotations

import textwrap
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from .fit_quality import fit_quality
from .vbs import display_histogram

__all__ = [
    "draw_vbs_histogram",
    "new_figure",
    "plot_collapse",
    "plot_crossing_drift",
    "plot_size_extrapolation",
    "plot_vbs_histogram",
    "plot_vbs_histograms",
    "plot_vs_coupling",
    "save_figure",
    "set_labels",
]

_TITLE_PT, _NOTE_PT = 7.5, 6.5


def new_figure(nrows: int = 1, ncols: int = 1, size: tuple[float, float] | None = None, *, title: str = "",
               note: str = "") -> tuple[Any, Any]:
    """A Figure on an Agg canvas and its axes (``squeeze=False`` array), with ``title`` above and ``note``
    below the axes (wrapped; the figure grows to hold them).

    Fixed margins instead of a layout engine: the engine would double the drawing time per file.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    w, h = size or (4.8 * ncols, 3.6 * nrows)
    title_lines = textwrap.wrap(title, int(w * 15)) if title else []
    note_lines = [x for part in note.split("\n") for x in textwrap.wrap(part, int(w * 17))] if note else []
    top, bottom = 0.35 + 0.14 * len(title_lines), 0.6 + 0.12 * len(note_lines)
    h += 0.14 * len(title_lines) + 0.12 * len(note_lines)
    fig = Figure(figsize=(w, h))
    FigureCanvasAgg(fig)
    axes = fig.subplots(nrows, ncols, squeeze=False)
    fig.subplots_adjust(left=0.85 / w, right=1 - 0.15 / w, bottom=bottom / h, top=1 - top / h, wspace=0.45,
                        hspace=0.6)
    if title_lines:
        fig.text(0.5, 1 - 0.06 / h, "\n".join(title_lines), ha="center", va="top", fontsize=_TITLE_PT)
    if note_lines:
        fig.text(0.1 / w, 0.05 / h, "\n".join(note_lines), ha="left", va="bottom", fontsize=_NOTE_PT,
                 color="0.25")
    return fig, axes


def set_labels(ax: Any, xlabel: str, ylabel: str, width: int = 44) -> None:
    """Axis labels in a small font, wrapped to ``width`` characters (the y label to two lines at most)."""
    ax.set_xlabel("\n".join(textwrap.wrap(xlabel, 2 * width)), fontsize="small")
    ax.set_ylabel("\n".join(textwrap.wrap(ylabel, width)[:2]), fontsize="small")


def _fit_text(chi2: float | None, dof: int | None) -> str:
    """Short legend text of a fit's quality."""
    q = fit_quality(chi2, dof)
    if q["reliable"] is None:
        return "dof = 0: not testable" if dof == 0 else ""
    text = f"chi^2/dof = {q['chi2_dof']:.2g}, p = {q['p_value']:.2g}"
    return text + ("  UNRELIABLE" if not q["reliable"] else "")


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
    *,
    title: str = "",
    note: str = "",
) -> list[Path]:
    """Observable versus coupling, one error-bar curve per size L."""
    fig, ax = new_figure(size=(6.0, 4.2), title=title, note=note)
    ax = ax[0, 0]
    for L in sorted(curves):
        g, y, e = curves[L]
        ax.errorbar(
            g, y, yerr=np.where(np.isfinite(e), e, 0.0), marker="o", ms=3, capsize=2, lw=1, label=f"L={L:g}"
        )
    set_labels(ax, xlabel, ylabel)
    ax.legend(fontsize="small")
    return save_figure(fig, base)


def plot_crossing_drift(
    crossings: Sequence[Any],
    extrap: Any,
    inv_nu_extrap: Any,
    quantity: str,
    base: str | Path,
    *,
    coupling: str = "g",
    title: str = "",
    note: str = "",
) -> list[Path]:
    """Left: crossing g*(L1) versus 1/L1 with the fit g_c + a L^-omega; right: 1/nu(L1) versus 1/L1.

    A fit is drawn only from two or more points (one pair of sizes is not extrapolated: the panel says so);
    its legend gives the limit, omega (fitted or fixed) and the fit's chi^2/dof.
    """
    fig, ax = new_figure(1, 2, size=(9.6, 4.0), title=title, note=note)
    L = np.array([c.L1 for c in crossings], dtype=float)
    for axis, attr, ex, label, name in (
        (ax[0, 0], "g", extrap, f"crossing {coupling}* of {quantity} for a size pair (L1, L2)",
         f"{coupling}_c"),
        (ax[0, 1], "inv_nu", inv_nu_extrap, "1/nu = ln(s2/s1)/ln(L2/L1), s = slopes at the crossing", "1/nu"),
    ):
        y = np.array([getattr(c, attr) for c in crossings], dtype=float)
        e = np.array([getattr(c, attr + "_err") for c in crossings], dtype=float)
        ok = np.isfinite(y)
        x_max = 1.05 / L.min() if L.size else 1.0
        if ok.any():
            axis.errorbar(1.0 / L[ok], y[ok], yerr=np.where(np.isfinite(e[ok]), e[ok], 0.0), marker="o",
                          ls="none", capsize=2, label="crossing of a size pair")
        if not ok.any():
            axis.text(0.5, 0.5, f"{name} not determined\n(the slopes differ in sign or vanish)",
                      transform=axis.transAxes, ha="center", va="center", fontsize="small")
        elif ok.sum() == 1:
            axis.text(0.03, 0.03, "one pair of sizes: no extrapolation to 1/L = 0", transform=axis.transAxes,
                      fontsize="x-small", va="bottom")
        elif ex is not None and np.isfinite(ex.limit):
            xs = np.linspace(0.0, x_max, 100)[1:]
            omega = f"omega = {ex.omega:.3g} +- {ex.omega_err:.2g}" if ex.omega_fitted else \
                f"omega fixed to {ex.omega:g} (assumed)"
            axis.plot(xs, ex.limit + ex.amplitude * xs**ex.omega, lw=1, label=f"fit, {omega}")
            fit = _fit_text(ex.chi2, ex.dof)
            limit = f"{name} = {ex.limit:.5g} +- {ex.limit_err:.2g}" + (f"; {fit}" if fit else "")
            axis.errorbar([0.0], [ex.limit], yerr=[ex.limit_err if np.isfinite(ex.limit_err) else 0.0],
                          marker="s", color="k", capsize=2, label=limit)
        set_labels(axis, "1/L1  (L1 = smaller size of the pair)", label, width=40)
        axis.set_xlim(-0.02 * x_max, x_max)
        if ok.any():
            axis.legend(fontsize="x-small")
    return save_figure(fig, base)


def plot_collapse(
    curves: Mapping[float, tuple[np.ndarray, np.ndarray, np.ndarray]],
    collapse: Any,
    quantity: str,
    base: str | Path,
    *,
    coupling: str = "g",
    title: str = "",
    note: str = "",
) -> list[Path]:
    """Quantity versus (g - g_c) L^(1/nu) (``g`` named ``coupling``) with the fitted master curve over the
    fitted x range; the legend gives g_c, nu and the fit's chi^2/dof.  Points outside the range are faint.
    """
    fig, ax = new_figure(size=(6.0, 4.2), title=title, note=note)
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
        fit = _fit_text(collapse.chi2, collapse.dof)
        ax.plot(grid, collapse.master_curve(grid), color="k", lw=1,
                label=f"{coupling}_c = {collapse.g_c:.5g} +- {collapse.g_c_err:.2g}, "
                      f"nu = {collapse.nu:.3g} +- {collapse.nu_err:.2g}" + (f"\n{fit}" if fit else ""))
    set_labels(ax, f"({coupling} - {collapse.g_c:.5g}) L^(1/{collapse.nu:.3g})", quantity)
    ax.legend(fontsize="x-small")
    return save_figure(fig, base)


def _draw_mesh(ax: Any, xe: np.ndarray, ye: np.ndarray, P: np.ndarray, title: str | None) -> Any:
    mesh = ax.pcolormesh(xe, ye, P.T, cmap="viridis", vmin=0.0, vmax=float(P.max()) or 1.0)
    ax.set_aspect("equal")
    ax.set_xlabel("D_x", fontsize="small")
    ax.set_ylabel("D_y", fontsize="small")
    ax.tick_params(labelsize="x-small")
    if title:
        ax.set_title(title, fontsize="x-small")
    return mesh


def draw_vbs_histogram(ax: Any, hist: np.ndarray, r: float, title: str | None = None,
                       grid: Any = None) -> Any:
    """The histogram H[D_x, D_y] as the fraction of measurements per allowed (D_x, D_y) value, cropped to the
    data's range, D_x horizontal, equal aspect, colour scale from 0 to the largest value
    (:func:`qmc.analysis.vbs.display_histogram`; ``grid``: the :class:`~qmc.analysis.vbs.ValueGrid`).
    Returns the QuadMesh."""
    xe, ye, P, _ = display_histogram(hist, r, grid)
    return _draw_mesh(ax, xe, ye, P, title)


def plot_vbs_histograms(
    items: Sequence[tuple], base: str | Path, max_panels: int = 12, *, title: str = "", note: str = ""
) -> list[Path]:
    """Grid of VBS histograms ``(title, hist, r[, grid])`` with a colour bar each; at most ``max_panels``
    evenly chosen ones.  The note under the panels says what the colour means and which grid was used."""
    if len(items) > max_panels:
        idx = np.unique(np.linspace(0, len(items) - 1, max_panels).round().astype(int))
        items = [items[i] for i in idx]
    shown = [(it[0], *display_histogram(it[1], it[2], it[3] if len(it) > 3 else None)) for it in items]
    hows = "; ".join(dict.fromkeys(s[4] for s in shown))
    ncols = min(4, len(items))
    nrows = -(-len(items) // ncols)
    text = (f"{note}\n" if note else "") + ("Colour: fraction of all measurements per allowed value of (D_x, "
                                             f"D_y), D_a = (1/N) sum_r (-1)^a S^z_r S^z_(r+a). Grid: {hows}.")
    fig, axes = new_figure(nrows, ncols, size=(3.4 * ncols, 3.1 * nrows), title=title, note=text)
    w, h, pars = fig.get_figwidth(), fig.get_figheight(), fig.subplotpars
    fig.subplots_adjust(right=1 - 0.55 / w, top=pars.top - 0.2 / h)  # room for colour bars, panel titles
    for k, ax in enumerate(axes.ravel()):
        if k < len(shown):
            panel_title, xe, ye, P, _ = shown[k]
            bar = fig.colorbar(_draw_mesh(ax, xe, ye, P, panel_title), ax=ax, fraction=0.046, pad=0.04)
            bar.ax.tick_params(labelsize="xx-small")
        else:
            ax.set_axis_off()
    return save_figure(fig, base)


def plot_vbs_histogram(hist: np.ndarray, r: float, base: str | Path, title: str | None = None,
                       grid: Any = None) -> list[Path]:
    """One histogram (see :func:`plot_vbs_histograms`): writes ``base.png`` and ``base.pdf``."""
    return plot_vbs_histograms([(title or "", hist, float(r), grid)], base)


def plot_size_extrapolation(records: Sequence[dict], ylabel: str, base: str | Path, *, title: str = "",
                            note: str = "") -> list[Path]:
    """y(L) of one observable against 1/L, one colour per scan point: the data with error bars, the fitted
    c_0 + sum_k c_k L^-p_k from 1/L = 0 to the smallest size, and the limit c_0 +- error at 1/L = 0.

    ``records``: fits as dicts (:class:`qmc.analysis.size_extrapolation.SizeExtrapolation` fields).  For
    ``m_stag2`` with a full-vector entry the legend also gives m_s = sqrt(3 c_0); every limit carries its
    fit's chi^2/dof (and "UNRELIABLE" for a small p-value).
    """
    fig, ax = new_figure(size=(6.4, 4.6), title=title, note=note)
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
        dof = r["n_sizes"] - 1 - len(r["powers"])
        chi = r.get("chi2_dof")
        fit = _fit_text(None if chi is None or dof < 1 else chi * dof, dof)
        text += f"\n  {fit}" if fit else ""
        ax.errorbar([0.0], [r["limit"]], yerr=[r["limit_err"]], marker="s", ms=5, color=colour, capsize=3,
                    mfc="white", label=text)
    powers = ", ".join("1/L" if p == 1 else f"1/L^{p:g}" for p in records[0]["powers"]) if records else ""
    ax.set_title(f"fit c_0 + corrections in {powers}; squares: c_0 at L = infinity", fontsize="small")
    set_labels(ax, "1/L  (L = linear system size in lattice spacings)", ylabel, width=48)
    ax.set_xlim(-0.02 * x_max, 1.05 * x_max)
    ax.legend(fontsize="x-small")
    return save_figure(fig, base)
