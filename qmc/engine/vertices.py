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

__all__ = ["apply_pending_flips", "count_ops", "term_table", "TT_META", "TT_BOND"]

TT_META = 0
"""Column of :func:`term_table` holding ``k + 4 * group`` (k = bonds of the term, 1..3)."""
TT_BOND = 1
"""First column of the bond records: bond a of the term is ``(i, j, b)`` at ``TT_BOND + 3a + 0..2``."""


def term_table(term_start: np.ndarray, term_bonds: np.ndarray, term_group: np.ndarray,
               bond_sites: np.ndarray) -> np.ndarray:
    """Everything the diagonal sweep needs about term t in one int32 row ``table[t]``.

    ``table[t, TT_META] = k_t + 4 g_t`` (bond count k_t <= 3, term group g_t), then for each bond a of the
    term its sites and bond index ``(i, j, b)`` at ``TT_BOND + 3a``.  Rows are padded to 4, 8 or 16
    entries (k_max = 1, 2, 3), so that a row never straddles more cache lines than it must: one load
    brings a term's bonds instead of the chain term -> bond list -> bond -> sites.
    """
    start = np.asarray(term_start, dtype=np.int64)
    k = np.diff(start)
    if k.size and (k.min() < 1 or k.max() > 3):
        raise ValueError("terms must have 1 to 3 bonds")
    kmax = int(k.max()) if k.size else 1
    width = {1: 4, 2: 8, 3: 16}[kmax]
    table = np.zeros((k.size, width), dtype=np.int32)
    table[:, TT_META] = k + 4 * np.asarray(term_group, dtype=np.int64)
    bonds = np.asarray(term_bonds, dtype=np.int64)
    sites = np.asarray(bond_sites, dtype=np.int64).reshape(-1, 2)
    for a in range(kmax):
        rows = np.flatnonzero(k > a)
        b = bonds[start[rows] + a]
        table[rows, TT_BOND + 3 * a] = sites[b, 0]
        table[rows, TT_BOND + 3 * a + 1] = sites[b, 1]
        table[rows, TT_BOND + 3 * a + 2] = b
    return table


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
