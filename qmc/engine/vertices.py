"""Operator encoding and the vertex (leg) layout of multi-bond operators.

Operator string: ``ops[p]`` (int32) is ``-1`` for an empty slot, else ``(t << 3) | offmask`` where t is the
term index and bit a of ``offmask`` (a = 0..k_t-1) says whether bond a of the term acts off-diagonally
(the singlet-projector hop) or diagonally.  A k-bond term is therefore one operator made of k independent
bond vertices, each of which may be diagonal or off-diagonal: the SSE weight of the operator is
C_t / 2^k whenever every bond is antiparallel, whatever the diagonal/off-diagonal pattern.

Vertices are numbered compactly, only for operators that exist, in the order of the time slices; an
operator of a k-bond term at slice p owns k consecutive bond vertices.  Bond vertex v has four legs
4v + l:

    l = 0: site i below   l = 1: site j below   l = 2: site i above   l = 3: site j above

``links[4v + l]`` is the leg that leg 4v+l is connected to along the site's world line (the next operator
above or the previous below, periodically in imaginary time).  The deterministic loop for singlet
projectors enters a vertex at leg l and leaves at leg ``l ^ 1`` (same time side, other site), so a loop
passing through a vertex toggles it between diagonal and off-diagonal; ``vflip[v]`` records the toggles,
which the next diagonal sweep applies to ``ops`` (:func:`apply_pending_flips` does it explicitly).
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["apply_pending_flips", "count_ops"]


@njit(cache=True)
def apply_pending_flips(ops, vflip, term_start):
    """Toggle the bonds recorded in ``vflip`` into ``ops`` and clear ``vflip`` (same order as the sweep)."""
    v = 0
    for p in range(ops.shape[0]):
        op = ops[p]
        if op < 0:
            continue
        t = op >> 3
        k = term_start[t + 1] - term_start[t]
        for a in range(k):
            if vflip[v + a] != 0:
                op ^= 1 << a
                vflip[v + a] = 0
        ops[p] = op
        v += k
    return v


@njit(cache=True)
def count_ops(ops, term_group, n_groups):
    """Number of operators of each term group in the string (an int64 array of length n_groups)."""
    out = np.zeros(n_groups, dtype=np.int64)
    for p in range(ops.shape[0]):
        op = ops[p]
        if op >= 0:
            out[term_group[op >> 3]] += 1
    return out
