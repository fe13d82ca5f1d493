"""Walker's alias table: draw index t with probability w_t / sum(w) from one uniform number.

Draw: r = u * T, t = floor(r); keep t if r - t < prob[t], else take alias[t].  Built with Vose's
stable variant (common practice, no source).
"""

from __future__ import annotations

import numpy as np

__all__ = ["alias_table"]


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
