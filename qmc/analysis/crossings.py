"""Crossing points of a dimensionless quantity R_L(g) for pairs of system sizes, and 1/nu from slopes.

Input per size ``L``: arrays ``(g, R, dR)`` of a dimensionless quantity (Binder ratio, rho_s L,
xi/L, ...) versus the coupling ``g``.  For a size pair ``(L1, L2)``:

1. A starting point ``g0`` is a sign change of ``R_L1 - R_L2`` (linear interpolation on the union
   of both grids inside their common range).  When several exist, the one where the difference
   changes fastest (least-squares slope over a few neighbouring grid points) is taken, which skips
   spurious crossings where the curves run together (e.g. both saturated deep in a phase).
2. Each curve is fitted, weighted by ``1/dR``, with a polynomial of degree ``degree`` (2 or 3) in
   ``g - g0`` over its ``n_points`` points nearest to ``g0`` (or those within ``window`` of
   ``g0``).  The crossing ``g*`` is the real root of ``p_1 - p_2`` inside the common fit range
   nearest to ``g0``; the window is re-centred on ``g*`` and the fit repeated until it is stable.
3. ``R* = (p_1(g*) + p_2(g*)) / 2`` and slopes ``s_i = p_i'(g*)``.  Since near the critical point
   ``R_L(g) = f((g - g_c) L^(1/nu))``, ``s_L`` grows like ``L^(1/nu)`` and

       1/nu(L1, L2) = ln(s_2 / s_1) / ln(L2 / L1)       (= ln(s(2L)/s(L)) / ln 2 for L2 = 2 L1).

4. Errors: parametric bootstrap, ``R_i -> R_i + dR_i * N(0, 1)`` independently for every point,
   with the windows of the central fit kept fixed; the standard deviations of the bootstrap
   ``g*``, ``R*`` and ``1/nu`` are the errors.  Resamples without a root in the window are dropped
   (their number is reported).  Randomness comes only from the ``numpy.random.Generator`` passed in.
   ``fit_chi2_dof`` is the larger chi^2/dof of the two central local fits; values well above 1 mean
   the polynomial does not describe the curve inside the window (too coarse a grid of couplings,
   too wide a window), which biases mainly the slopes and hence 1/nu.

Size pairs (:func:`size_pairs`): ``(L, 2L)`` for every ``L`` whose double is present when at least
one such pair exists, otherwise successive sizes (common practice, no source).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.polynomial import polynomial as P

__all__ = ["Crossing", "Curve", "find_crossing", "find_crossings", "inverse_nu", "size_pairs"]

Curve = tuple[np.ndarray, np.ndarray, np.ndarray]
"""``(g, R, dR)`` arrays of one size."""


@dataclass(frozen=True)
class Crossing:
    """Crossing of the curves of sizes ``L1 < L2``; errors from the bootstrap."""

    L1: float
    L2: float
    g: float
    g_err: float
    value: float
    value_err: float
    slope1: float
    slope2: float
    inv_nu: float
    inv_nu_err: float
    n_boot: int
    n_boot_ok: int
    fit_chi2_dof: float = float("nan")

    @property
    def ok(self) -> bool:
        """A crossing was found and at least half of the bootstrap resamples found one too."""
        return bool(np.isfinite(self.g)) and (self.n_boot == 0 or 2 * self.n_boot_ok >= self.n_boot)


def inverse_nu(slope1: float, slope2: float, L1: float, L2: float) -> float:
    """1/nu = ln(s2/s1) / ln(L2/L1); NaN when the slopes differ in sign or vanish."""
    if not (np.isfinite(slope1) and np.isfinite(slope2)) or slope1 * slope2 <= 0:
        return float("nan")
    return float(np.log(slope2 / slope1) / np.log(L2 / L1))


def size_pairs(sizes: Sequence[float]) -> list[tuple[float, float]]:
    """``(L, 2L)`` pairs when any exist, else pairs of successive sizes (sorted, duplicates removed)."""
    s = sorted(set(sizes))
    present = set(s)
    doubled = [(L, 2 * L) for L in s if 2 * L in present]
    if doubled:
        return doubled
    return list(zip(s[:-1], s[1:], strict=True))


def _sorted_curve(curve: Curve) -> Curve:
    g, y, e = (np.asarray(a, dtype=float).ravel() for a in curve)
    if not (g.size == y.size == e.size):
        raise ValueError(
            f"crossing: g, value and error must have equal lengths ({g.size}, {y.size}, {e.size})"
        )
    good = np.isfinite(g) & np.isfinite(y)
    order = np.argsort(g[good], kind="stable")
    e = np.where(np.isfinite(e) & (e > 0), e, np.nan)[good][order]
    fallback = np.nanmedian(e) if np.isfinite(e).any() else 1.0
    return g[good][order], y[good][order], np.where(np.isfinite(e), e, fallback)


def _start_point(c1: Curve, c2: Curve, lo: float, hi: float) -> float | None:
    grid = np.union1d(c1[0], c2[0])
    grid = grid[(grid >= lo) & (grid <= hi)]
    if grid.size < 2:
        return None
    d = np.interp(grid, c1[0], c1[1]) - np.interp(grid, c2[0], c2[1])
    change = np.flatnonzero(np.sign(d[:-1]) * np.sign(d[1:]) <= 0)
    if change.size == 0:
        return None
    best, score = None, -1.0
    for j in change:
        a, b = max(0, j - 2), min(grid.size, j + 4)
        slope = abs(np.polyfit(grid[a:b], d[a:b], 1)[0]) if b - a >= 2 else 0.0
        if slope > score:
            # root of the linear interpolation between grid[j] and grid[j+1]
            den = d[j] - d[j + 1]
            t = 0.5 if den == 0 else d[j] / den
            best, score = grid[j] + t * (grid[j + 1] - grid[j]), slope
    return best


def _window(curve: Curve, g0: float, n_points: int, window: float | None) -> np.ndarray:
    dist = np.abs(curve[0] - g0)
    if window is not None:
        idx = np.flatnonzero(dist <= window)
    else:
        idx = np.sort(np.argsort(dist, kind="stable")[:n_points])
    return idx


def _fit(g: np.ndarray, y: np.ndarray, e: np.ndarray, g0: float, degree: int) -> np.ndarray:
    return P.polyfit(g - g0, y, degree, w=1.0 / e)


def _chi2_dof(curve: Curve, idx: np.ndarray, coef: np.ndarray, g0: float, degree: int) -> float:
    dof = idx.size - degree - 1
    if dof < 1:
        return float("nan")
    r = (curve[1][idx] - P.polyval(curve[0][idx] - g0, coef)) / curve[2][idx]
    return float(np.sum(r**2) / dof)


def _root(c1: np.ndarray, c2: np.ndarray, lo: float, hi: float, near: float) -> float:
    diff = P.polysub(c1, c2)
    roots = P.polyroots(diff) if np.any(diff[1:] != 0) else np.array([])
    scale = max(abs(hi - lo), 1e-300)
    real = roots[np.abs(roots.imag) <= 1e-7 * scale].real
    real = real[(real >= lo - 1e-9 * scale) & (real <= hi + 1e-9 * scale)]
    if real.size == 0:
        return float("nan")
    return float(real[np.argmin(np.abs(real - near))])


def find_crossing(
    curve1: Curve,
    curve2: Curve,
    L1: float,
    L2: float,
    *,
    rng: np.random.Generator,
    degree: int = 3,
    n_points: int | None = None,
    window: float | None = None,
    n_boot: int = 200,
    g_range: tuple[float, float] | None = None,
) -> Crossing | None:
    """Crossing of ``curve1`` (size ``L1``) and ``curve2`` (size ``L2``); ``None`` if none is found.

    ``n_points`` defaults to ``degree + 4`` points per curve; ``window`` (half-width in g) overrides
    it.  ``g_range`` restricts the search for the starting point.
    """
    if degree not in (1, 2, 3, 4):
        raise ValueError(f"crossing: degree must be 1..4, got {degree}")
    c1, c2 = _sorted_curve(curve1), _sorted_curve(curve2)
    npts = int(n_points) if n_points is not None else degree + 4
    if min(c1[0].size, c2[0].size) < degree + 1:
        return None
    lo, hi = max(c1[0][0], c2[0][0]), min(c1[0][-1], c2[0][-1])
    if g_range is not None:
        lo, hi = max(lo, g_range[0]), min(hi, g_range[1])
    g0 = _start_point(c1, c2, lo, hi)
    if g0 is None:
        return None
    for _ in range(6):
        i1, i2 = _window(c1, g0, npts, window), _window(c2, g0, npts, window)
        if min(i1.size, i2.size) < degree + 1:
            return None
        f1 = _fit(c1[0][i1], c1[1][i1], c1[2][i1], g0, degree)
        f2 = _fit(c2[0][i2], c2[1][i2], c2[2][i2], g0, degree)
        wlo = max(c1[0][i1].min(), c2[0][i2].min()) - g0
        whi = min(c1[0][i1].max(), c2[0][i2].max()) - g0
        x = _root(f1, f2, wlo, whi, 0.0)
        if not np.isfinite(x):
            return None
        g_new = g0 + x
        same = np.array_equal(_window(c1, g_new, npts, window), i1) and np.array_equal(
            _window(c2, g_new, npts, window), i2
        )
        if same:
            break
        g0 = g_new

    def measure(a1: np.ndarray, a2: np.ndarray, near: float) -> tuple[float, float, float, float]:
        r = _root(a1, a2, wlo, whi, near)
        if not np.isfinite(r):
            return (np.nan,) * 4
        v = 0.5 * (P.polyval(r, a1) + P.polyval(r, a2))
        return g0 + r, v, P.polyval(r, P.polyder(a1)), P.polyval(r, P.polyder(a2))

    g_star, value, s1, s2 = measure(f1, f2, x)
    chi2_dof = max(_chi2_dof(c1, i1, f1, g0, degree), _chi2_dof(c2, i2, f2, g0, degree))
    boot = []
    for _ in range(int(n_boot)):
        y1 = c1[1][i1] + c1[2][i1] * rng.standard_normal(i1.size)
        y2 = c2[1][i2] + c2[2][i2] * rng.standard_normal(i2.size)
        b = measure(_fit(c1[0][i1], y1, c1[2][i1], g0, degree), _fit(c2[0][i2], y2, c2[2][i2], g0, degree), x)
        if np.isfinite(b[0]):
            boot.append((b[0], b[1], inverse_nu(b[2], b[3], L1, L2)))
    arr = np.array(boot).reshape(-1, 3)

    def spread(col: np.ndarray) -> float:
        col = col[np.isfinite(col)]
        return float(np.std(col, ddof=1)) if col.size >= 2 else float("nan")

    return Crossing(
        L1=L1,
        L2=L2,
        g=float(g_star),
        g_err=spread(arr[:, 0]),
        value=float(value),
        value_err=spread(arr[:, 1]),
        slope1=float(s1),
        slope2=float(s2),
        inv_nu=inverse_nu(s1, s2, L1, L2),
        inv_nu_err=spread(arr[:, 2]),
        n_boot=int(n_boot),
        n_boot_ok=len(boot),
        fit_chi2_dof=chi2_dof,
    )


def find_crossings(
    curves: Mapping[float, Curve],
    *,
    rng: np.random.Generator,
    pairs: Sequence[tuple[float, float]] | None = None,
    **kwargs: object,
) -> list[Crossing]:
    """Crossings for ``pairs`` (default :func:`size_pairs` of the sizes in ``curves``); pairs
    without a crossing are left out.  ``kwargs`` go to :func:`find_crossing`."""
    out = []
    for L1, L2 in pairs if pairs is not None else size_pairs(list(curves)):
        c = find_crossing(curves[L1], curves[L2], L1, L2, rng=rng, **kwargs)
        if c is not None:
            out.append(c)
    return out
