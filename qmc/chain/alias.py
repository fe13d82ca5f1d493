"""Tables for drawing a term t with probability w_t / sum(w) from one uniform number
(the draw itself: :func:`qmc.engine.term_draw.draw_term`).

- :func:`group_draw_tables`: when every term group has one weight and its terms are contiguous, the
  distribution is piecewise uniform: the probability before each group, the group's terms per unit of
  probability, its first and last term.  Used whenever it applies (at most :data:`MAX_DRAW_GROUPS`
  groups, at least two).
- :func:`alias_table`: Walker's alias table for any weights.  Draw: r = u * T, t = floor(r); keep t if
  r - t < prob[t], else take alias[t].  Built with Vose's stable variant (common practice, no source).
"""

from __future__ import annotations

import numpy as np

__all__ = ["alias_table", "group_draw_tables", "MAX_DRAW_GROUPS"]

MAX_DRAW_GROUPS = 4
"""Above this many groups the alias table is used (the group draw compares u with four group edges)."""


def group_draw_tables(term_group: np.ndarray, weights: np.ndarray
                      ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(edge float64[4], scale float64[4], first int32[4], last int32[4]) for the draw by group, or four
    empty arrays when it does not apply: a group whose terms differ in weight (relative 1e-12) or are not
    contiguous, a group of weight zero, or more than :data:`MAX_DRAW_GROUPS` groups.  edge[g] is the
    probability of the terms before group g (+inf for the missing groups g >= G), scale[g] = W_tot / w_g,
    first/last the group's term range.  A single group gets the alias table too (it draws t = floor(u T)
    there, and measured slightly faster)."""
    group = np.asarray(term_group, dtype=np.int64)
    w = np.asarray(weights, dtype=np.float64)
    empty = (np.zeros(0), np.zeros(0), np.zeros(0, dtype=np.int32), np.zeros(0, dtype=np.int32))
    if group.size == 0 or group.size != w.size:
        return empty
    starts = np.flatnonzero(np.r_[True, group[1:] != group[:-1]])
    if not 2 <= starts.size <= MAX_DRAW_GROUPS or np.unique(group).size != starts.size:
        return empty  # one group, too many groups, or a group split into several runs
    ends = np.r_[starts[1:], group.size]
    wg = w[starts]
    uneven = any(np.any(np.abs(w[a:b] - w[a]) > 1e-12 * w[a]) for a, b in zip(starts, ends, strict=True))
    if uneven or not np.all(wg > 0):
        return empty
    mass = wg * (ends - starts)
    total = float(np.sum(mass))
    edge = [float(x) for x in np.r_[0.0, np.cumsum(mass)[:-1]] / total]
    scale = [float(x) for x in total / wg]
    pad = MAX_DRAW_GROUPS - len(edge)
    return (np.array(edge + [np.inf] * pad), np.array(scale + [1.0] * pad),
            np.r_[starts, [0] * pad].astype(np.int32), np.r_[ends - 1, [0] * pad].astype(np.int32))


def alias_table(weights: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(prob float64[T], alias int32[T]) for non-negative weights with a positive sum."""
    w = np.asarray(weights, dtype=np.float64)
    if w.ndim != 1 or w.size == 0 or np.any(w < 0) or not np.sum(w) > 0:
        raise ValueError("alias table needs a non-empty vector of non-negative weights with positive sum")
    t = w.size
    scaled = w * (t / np.sum(w))
    prob = np.ones(t, dtype=np.float64)
    alias = np.arange(t, dtype=np.int32)
    small = [i for i in range(t) if scaled[i] < 1.0]
    large = [i for i in range(t) if scaled[i] >= 1.0]
    while small and large:
        s = small.pop()
        g = large.pop()
        prob[s] = scaled[s]
        alias[s] = g
        scaled[g] = (scaled[g] + scaled[s]) - 1.0
        (small if scaled[g] < 1.0 else large).append(g)
    for i in small + large:  # leftovers are 1 up to rounding
        prob[i] = 1.0
        alias[i] = i
    return prob, alias
