"""Operator encoding and the vertex (leg) layout of multi-bond operators.

Operator string: ``ops[p]`` (int32) is ``EMPTY`` (-1) for an empty slot, else
``(t << OP_TERM_SHIFT) | offmask`` where t is the term index and bit a of ``offmask`` (a = 0..k_t-1) says
whether bond a of the term acts off-diagonally (the singlet-projector hop) or diagonally.  A k-bond term is
therefore one operator made of k independent bond vertices, each of which may be diagonal or off-diagonal:
the SSE weight of the operator is C_t / 2^k whenever every bond is antiparallel, whatever the
diagonal/off-diagonal pattern.

Vertices are numbered compactly, only for operators that exist, in the order of the time slices; an
operator of a k-bond term at slice p owns k consecutive bond vertices.  Bond vertex v has four legs
4v + l:

    l = 0: site i below   l = 1: site j below   l = 2: site i above   l = 3: site j above

``links[4v + l]`` is the leg that leg 4v+l is connected to along the site's world line (the next operator
above or the previous below, periodically in imaginary time).  The deterministic loop for singlet
projectors enters a vertex at leg l and leaves at leg ``l ^ 1`` (same time side, other site), so a loop
passing through a vertex toggles it between diagonal and off-diagonal; ``vflip[v]`` records the toggles,
which the next diagonal sweep applies to ``ops`` (:func:`qmc.engine.diagonal.fold_pending` does it
explicitly, for every vertex kind).
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["count_ops", "term_table", "displacement_classes", "TT_META", "TT_BOND", "TT_BOND_WIDTH",
           "MAX_KINDS", "meta_bonds", "meta_kind", "meta_group", "OP_TERM_SHIFT", "OP_OFF_MASK", "EMPTY"]

EMPTY = -1
"""``ops[p]`` of an empty slot."""
OP_TERM_SHIFT = 3
"""``ops[p] >> OP_TERM_SHIFT`` is the term t of a non-empty slot."""
OP_OFF_MASK = (1 << OP_TERM_SHIFT) - 1
"""``ops[p] & OP_OFF_MASK`` is the off-diagonal mask (bit a: bond a acts off-diagonally)."""

TT_META = 0
"""Column of :func:`term_table` holding the term's packed ``k | kind << 2 | group << 5`` (see ``meta_*``)."""
TT_BOND = 1
"""First column of the bond records: bond a of the term is ``(i, j, c)`` at ``TT_BOND + TT_BOND_WIDTH a``
plus 0, 1, 2 (sites i, j and the bond's displacement class c, its row of :func:`displacement_classes`)."""
TT_BOND_WIDTH = 3

_KIND_SHIFT = 2
_GROUP_SHIFT = 5
MAX_KINDS = 1 << (_GROUP_SHIFT - _KIND_SHIFT)
"""Vertex kinds that fit into the packed column (codes 0..7, :data:`qmc.models.compiled.VERTEX_KINDS`)."""


@njit(inline="always")
def meta_bonds(meta):
    """k, the number of bonds of the term (1..3); ``& 3`` also tells LLVM that the bond loops are short."""
    return meta & 3


@njit(inline="always")
def meta_kind(meta):
    """The vertex-kind code of the term's group."""
    return (meta >> _KIND_SHIFT) & (MAX_KINDS - 1)


@njit(inline="always")
def meta_group(meta):
    """The term's group g."""
    return meta >> _GROUP_SHIFT


def displacement_classes(bond_disp: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(rows float64[C, D], class int32[nb]): the distinct rows of the bonds' displacements ``bond_disp``
    float64[nb, D] and each bond's row, ``bond_disp[b] == rows[class[b]]`` exactly.

    A lattice tiled from a unit cell has at most as many classes as the cell declares bonds (square: 2),
    so the diagonal sweep reads a bond's displacement from a table of a few cache lines instead of a row
    per bond (square lattice at L = 32: 32 KiB read at random places per sweep, next to the term table;
    the values, and so the sums over them, are the same bits either way).
    """
    disp = np.asarray(bond_disp, dtype=np.float64)
    if disp.ndim != 2:
        raise ValueError(f"bond displacements must be a 2-d array [bonds, directions], not {disp.ndim}-d")
    if disp.shape[1] == 0 or disp.shape[0] == 0:
        return np.zeros((1, disp.shape[1])), np.zeros(disp.shape[0], dtype=np.int32)
    rows, cls = np.unique(disp, axis=0, return_inverse=True)
    return np.ascontiguousarray(rows), cls.reshape(-1).astype(np.int32)


def term_table(term_start: np.ndarray, term_bonds: np.ndarray, term_group: np.ndarray,
               bond_sites: np.ndarray, group_kind: np.ndarray, bond_class: np.ndarray) -> np.ndarray:
    """Everything the diagonal sweep needs about term t in one int32 row ``table[t]``.

    ``table[t, TT_META]`` packs the bond count k_t <= 3, the vertex kind of the term's group and the
    group g_t (read them with :func:`meta_bonds`, :func:`meta_kind`, :func:`meta_group`); then for each
    bond a of the term its sites and displacement class ``(i, j, c)`` at ``TT_BOND + TT_BOND_WIDTH a``
    (``c = bond_class[b]``, from :func:`displacement_classes`).  Rows are padded to 4, 8 or 16 entries
    (k_max = 1, 2, 3), so that a row never straddles more cache lines than it must: one load brings a
    term's bonds instead of the chain term -> bond list -> bond -> sites.
    """
    start = np.asarray(term_start, dtype=np.int64)
    k = np.diff(start)
    if k.size and (k.min() < 1 or k.max() > 3):
        raise ValueError("terms must have 1 to 3 bonds")
    kind = np.asarray(group_kind, dtype=np.int64)
    if kind.size and (kind.min() < 0 or kind.max() >= MAX_KINDS):
        raise ValueError(f"vertex-kind codes must lie in 0..{MAX_KINDS - 1}")
    group = np.asarray(term_group, dtype=np.int64)
    kmax = int(k.max()) if k.size else 1
    width = {1: 4, 2: 8, 3: 16}[kmax]
    table = np.zeros((k.size, width), dtype=np.int32)
    table[:, TT_META] = k | kind[group] << _KIND_SHIFT | group << _GROUP_SHIFT
    bonds = np.asarray(term_bonds, dtype=np.int64)
    sites = np.asarray(bond_sites, dtype=np.int64).reshape(-1, 2)
    cls = np.asarray(bond_class, dtype=np.int64)
    for a in range(kmax):
        rows = np.flatnonzero(k > a)
        b = bonds[start[rows] + a]
        col = TT_BOND + TT_BOND_WIDTH * a
        table[rows, col] = sites[b, 0]
        table[rows, col + 1] = sites[b, 1]
        table[rows, col + 2] = cls[b]
    return table


@njit(cache=True)
def count_ops(ops, term_group, n_groups):
    """Number of operators of each term group in the string (an int64 array of length n_groups)."""
    out = np.zeros(n_groups, dtype=np.int64)
    for p in range(ops.shape[0]):
        op = ops[p]
        if op >= 0:
            out[term_group[op >> OP_TERM_SHIFT]] += 1
    return out
