"""Columnar valence-bond-solid (VBS) order-parameter distribution and its angular anisotropy.

The engine accumulates a 2-D histogram of the dimer order parameter ``(D_x, D_y)`` with ``nh x nh``
integer counts; the first index is ``D_x``, the second ``D_y``, and the bin edges on both axes are
``linspace(-r, r, nh + 1)``.  Writing ``(D_x, D_y) = |D| (cos theta, sin theta)``:

    <cos 4 theta>_hist = sum_ij H_ij cos(4 theta_ij) / sum_ij H_ij,

with ``theta_ij = atan2(y_j, x_i)`` at the bin centres; bins whose centre lies within ``r_min`` of
the origin (always the bin centred exactly at the origin, where theta is undefined) are left out.
Columnar order (peaks on the axes, theta = 0, pi/2, ...) gives +1, plaquette-like order (peaks at
theta = pi/4 + k pi/2) gives -1 and an emergent U(1) symmetric ring gives 0 (common practice, no
source).  The histogram estimate carries a discretisation error of order the angular width of a
bin; the statistical error comes from the stored per-bin series ``vbs_cos4`` (binning analysis).

Allowed values (:func:`value_grid`).  With spins s_i = +-1 the engine measures D_a = S_a / (4N),
S_a = sum_(bonds b along a) phase_b s_i s_j.  Flipping spin k changes S_a by -2 sum_(b at k) phase_b s_i s_j,
a sum of m_k terms +-1 (m_k = number of a-bonds at site k): a multiple of 4 when m_k is even, of 2 when odd.
Every configuration is reached by single flips, so S_a lies in S_0 + d Z with S_0 = sum_b phase_b (all spins
up) and d = 4 when every m_k is even (e.g. periodic square lattices: D_a is a multiple of 1/N), else 2.
The stored histogram has bins of fixed width w = 2r/nh; when the spacing d/(4N) of the allowed values is
not a multiple or divisor of w, bins hold different numbers of allowed values and a plot of raw counts
shows stripes that are no physics.  :func:`display_histogram` therefore shows either one cell per allowed
value (spacing >= w: every bin holds at most one) or the stored bins with their counts divided by the
number of allowed values they hold (spacing < w), cropped to the range the data occupy.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from .binning import error_estimate

__all__ = ["ValueGrid", "bin_centres", "cos4_from_histogram", "display_histogram", "task_value_grid",
           "value_grid", "vbs_anisotropy"]


def bin_centres(nh: int, r: float) -> np.ndarray:
    """Centres of ``nh`` bins with edges ``linspace(-r, r, nh + 1)``."""
    edges = np.linspace(-r, r, nh + 1)
    return 0.5 * (edges[:-1] + edges[1:])


def cos4_from_histogram(hist: np.ndarray, r: float, r_min: float = 0.0) -> float:
    """Histogram estimate of <cos 4 theta> (see module docstring); NaN for an empty histogram."""
    h = np.asarray(hist, dtype=float)
    if h.ndim != 2 or h.shape[0] != h.shape[1]:
        raise ValueError(f"cos4_from_histogram: expected a square 2-D histogram, got shape {h.shape}")
    c = bin_centres(h.shape[0], float(r))
    x, y = np.meshgrid(c, c, indexing="ij")
    rad = np.hypot(x, y)
    keep = rad > max(float(r_min), 1e-12 * float(r))
    w = h[keep]
    total = w.sum()
    if total <= 0:
        return float("nan")
    return float(np.sum(w * np.cos(4.0 * np.arctan2(y[keep], x[keep]))) / total)


def vbs_anisotropy(
    hist: np.ndarray | None, r: float | None, cos4_bins: np.ndarray | None = None, r_min: float = 0.0
) -> dict[str, float]:
    """``{"cos4_hist", "counts", "cos4", "cos4_err", "cos4_tau_int"}`` (NaN where unavailable).

    ``cos4`` is the mean of the per-bin series ``vbs_cos4`` with its binning error.
    """
    out = {
        "cos4_hist": float("nan"),
        "counts": 0.0,
        "cos4": float("nan"),
        "cos4_err": float("nan"),
        "cos4_tau_int": float("nan"),
    }
    if hist is not None and r is not None and np.asarray(hist).size:
        out["cos4_hist"] = cos4_from_histogram(hist, float(r), r_min)
        out["counts"] = float(np.asarray(hist).sum())
    if cos4_bins is not None and np.asarray(cos4_bins).size:
        est = error_estimate(cos4_bins)
        out["cos4"], out["cos4_err"], out["cos4_tau_int"] = est.mean, est.error, est.tau_int
    return out


@dataclass(frozen=True)
class ValueGrid:
    """Allowed values ``offset[a] + spacing[a] * k`` (k integer) of D_x (a = 0) and D_y (a = 1)."""

    offset: tuple[float, float]
    spacing: tuple[float, float]


def value_grid(n_sites: int, vbs_bonds: np.ndarray, vbs_dir: np.ndarray,
               vbs_phase: np.ndarray) -> ValueGrid | None:
    """The lattice of allowed (D_x, D_y) values of a model (see the module docstring); None without two
    directions of dimer bonds."""
    bonds = np.asarray(vbs_bonds, dtype=np.int64).reshape(-1, 2)
    dirs, phase = np.asarray(vbs_dir).ravel(), np.asarray(vbs_phase, dtype=np.int64).ravel()
    offsets, spacings = [], []
    for a in (0, 1):
        sel = dirs == a
        if not sel.any():
            return None
        m = np.bincount(bonds[sel].ravel(), minlength=int(n_sites))
        d = 4 if np.all(m % 2 == 0) else 2
        spacing = d / (4.0 * n_sites)
        offsets.append(float(np.mod(phase[sel].sum() / (4.0 * n_sites), spacing)))
        spacings.append(spacing)
    return ValueGrid((offsets[0], offsets[1]), (spacings[0], spacings[1]))


def task_value_grid(task: Any) -> ValueGrid | None:
    """:func:`value_grid` of a task record whose ``model_info`` holds the dimer bonds (``vbs_bonds``,
    ``vbs_dir``, ``vbs_phase``, ``n_sites``); None when it does not."""
    info = getattr(task, "model_info", None) or {}
    if not all(k in info for k in ("vbs_bonds", "vbs_dir", "vbs_phase")):
        return None
    return value_grid(int(info.get("n_sites", task.n_sites)), info["vbs_bonds"], info["vbs_dir"],
                      info["vbs_phase"])


def _per_bin(edges: np.ndarray, offset: float, spacing: float) -> tuple[np.ndarray, np.ndarray]:
    """Number of allowed values in each half-open bin [e_j, e_j+1) and the first one's index k."""
    tol = 1e-9
    k_lo = np.ceil((edges[:-1] - offset) / spacing - tol)
    k_hi = np.ceil((edges[1:] - offset) / spacing - tol) - 1
    return (k_hi - k_lo + 1).astype(np.int64), k_lo


def _axis(edges: np.ndarray, offset: float, spacing: float) -> tuple[np.ndarray, ...] | None:
    """(cell edges, bin -> cell index or -1, weight per bin) of one axis; None if the lattice does not fit."""
    n, k_lo = _per_bin(edges, offset, spacing)
    if n.max() <= 1:  # every stored bin holds at most one allowed value: one cell per allowed value
        ks = k_lo[n == 1]
        if ks.size == 0:
            return None
        cells = offset + spacing * np.arange(ks.min(), ks.max() + 1)
        cell_edges = np.concatenate([cells - spacing / 2, [cells[-1] + spacing / 2]])
        index = np.where(n == 1, k_lo - ks.min(), -1).astype(np.int64)
        return cell_edges, index, np.ones(n.size)
    if n.min() < 1:
        return None
    return edges, np.arange(n.size), n.astype(float)


def display_histogram(hist: np.ndarray, r: float, grid: ValueGrid | None = None,
                      ) -> tuple[np.ndarray, np.ndarray, np.ndarray, str]:
    """What to draw for a stored (D_x, D_y) histogram: ``(x_edges, y_edges, P, how)``.

    ``P[i, j]`` is the fraction of all measurements per allowed (D_x, D_y) value in cell (i, j) (per stored
    bin when ``grid`` is None or does not fit the data), cropped to the square [-R, R]^2 that holds every
    measured value; ``how`` says which grid was used (see the module docstring).
    """
    h = np.asarray(hist, dtype=float)
    nh = h.shape[0]
    edges = np.linspace(-float(r), float(r), nh + 1)
    how = f"stored bins of width {2 * r / nh:.3g}"
    xe, ye, counts, weight = edges, edges, h, np.ones_like(h)
    axes = None if grid is None else [_axis(edges, grid.offset[a], grid.spacing[a]) for a in (0, 1)]
    if axes is not None and all(a is not None for a in axes):
        (xe2, ix, wx), (ye2, iy, wy) = axes
        ok_x, ok_y = ix >= 0, iy >= 0
        if h[~ok_x, :].sum() == 0 and h[:, ~ok_y].sum() == 0:  # counts only where values are allowed
            counts = np.zeros((xe2.size - 1, ye2.size - 1))
            np.add.at(counts, (ix[ok_x][:, None], iy[ok_y][None, :]), h[np.ix_(ok_x, ok_y)])
            weight = np.zeros_like(counts)
            np.add.at(weight, (ix[ok_x][:, None], iy[ok_y][None, :]), np.outer(wx[ok_x], wy[ok_y]))
            xe, ye = xe2, ye2
            sp = grid.spacing
            how = (f"one cell per allowed value (spacing {sp[0]:.3g} x {sp[1]:.3g})" if np.all(weight <= 1)
                   else f"stored bins of width {2 * r / nh:.3g}, counts divided by the number of allowed "
                        f"values in each (spacing {sp[0]:.3g} x {sp[1]:.3g})")
    total = counts.sum()
    P = np.where(weight > 0, counts / np.where(weight > 0, weight, 1.0), 0.0) / (total if total > 0 else 1.0)
    nz_x, nz_y = np.flatnonzero(counts.sum(axis=1)), np.flatnonzero(counts.sum(axis=0))
    if nz_x.size == 0:
        return xe, ye, P, how
    R = max(abs(xe[nz_x[0]]), abs(xe[nz_x[-1] + 1]), abs(ye[nz_y[0]]), abs(ye[nz_y[-1] + 1]))
    keep_x = (xe[1:] > -R - 1e-12) & (xe[:-1] < R + 1e-12)
    keep_y = (ye[1:] > -R - 1e-12) & (ye[:-1] < R + 1e-12)
    xs, ys = np.flatnonzero(keep_x), np.flatnonzero(keep_y)
    return (xe[xs[0]:xs[-1] + 2], ye[ys[0]:ys[-1] + 2], P[xs[0]:xs[-1] + 1, ys[0]:ys[-1] + 1], how)
