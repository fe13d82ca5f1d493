"""The singlet-projector vertex kind: S = 1/2 spins, deterministic loops, each flipped with probability 1/2.

A term of this kind is C_t prod_{a<k} P_{i_a j_a} with P_ij = 1/4 - S_i.S_j (bonds joining opposite
sublattices).  Each bond vertex has weight 1/2 whether it acts diagonally or off-diagonally, and 0 on a
parallel pair, so an operator weighs C_t / 2^k whenever all its bonds are antiparallel
(:attr:`qmc.models.compiled.CompiledModel.term_weights`).

- Insertion (:func:`insertion_allowed`): the alias draw already chose t with probability w_t / W_tot, so
  the operator is accepted exactly when its weight is not zero, i.e. all k bonds are antiparallel; no
  random number is drawn.
- Loop update (:func:`loop_update`): every bond vertex is a four-leg vertex with equal weights, so the
  deterministic loop (enter at leg l, exit at leg l ^ 1, follow the world-line link) changes no weight and
  each loop is flipped with probability 1/2.  All loops are constructed (each leg visited exactly once);
  legs are marked -1 (visited, kept) or -2 (visited, flipped) in ``links``.  Sites without any operator are
  flipped with probability 1/2; the other sites follow the loop through their first leg.

The kind needs no tables of its own: its record :class:`ProjectorKind` is empty.  It is the fast path
(benchmarks/c_compare.py) and must stay bit-identical (tests/chain/test_stored_bins.py).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from numba import njit

from qmc.engine.rng import next_double
from qmc.engine.vertices import TT_BOND, TT_BOND_WIDTH

__all__ = ["ProjectorKind", "record", "insertion_allowed", "loop_update"]

U = np.uint32  # unsigned indices: no negative-index wrap-around code in the hot loop


class ProjectorKind(NamedTuple):
    """Record of the singlet-projector kind (no fields: its vertices need no tables)."""


def record(model: object) -> ProjectorKind:
    """The kind's record for a compiled model (the same for every model)."""
    return ProjectorKind()


@njit(inline="always")
def insertion_allowed(kind, table, t, k, spins, s0, s1, s2, s3):
    """(allowed, rng words): may an operator of term t (k bonds, row ``table[t]``) be inserted now?"""
    blocked = False
    for a in range(k):  # no early exit: one data-dependent branch per attempt, not one per bond
        col = TT_BOND + TT_BOND_WIDTH * a
        blocked |= spins[U(table[U(t), col])] == spins[U(table[U(t), col + 1])]
    return not blocked, s0, s1, s2, s3


@njit(cache=True, boundscheck=False)
def loop_update(kind, chain, vertices, n_vertices):
    """Build all loops of the linked vertex list, flip each with probability 1/2; returns the loop count."""
    spins = chain.spins
    rng = chain.rng
    links = vertices.links
    vflip = vertices.vflip
    first = vertices.first
    s0, s1, s2, s3 = rng[0], rng[1], rng[2], rng[3]
    n_legs = 4 * n_vertices
    n_loops = 0
    for l0 in range(0, n_legs, 2):
        if links[U(l0)] < 0:
            continue
        n_loops += 1
        u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
        leg = l0
        if u < 0.5:
            while True:
                vflip[U(leg >> 2)] ^= 1
                partner = leg ^ 1
                nxt = links[U(partner)]
                links[U(leg)] = -2
                links[U(partner)] = -2
                leg = nxt
                if leg == l0:
                    break
        else:
            while True:
                partner = leg ^ 1
                nxt = links[U(partner)]
                links[U(leg)] = -1
                links[U(partner)] = -1
                leg = nxt
                if leg == l0:
                    break
    for i in range(spins.shape[0]):
        f = first[i]
        if f < 0:
            u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
            if u < 0.5:
                spins[i] = -spins[i]
        elif links[U(f)] == -2:
            spins[i] = -spins[i]
    rng[0] = s0
    rng[1] = s1
    rng[2] = s2
    rng[3] = s3
    return n_loops
