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
  the b-th loop built marks the even leg of each pair of legs it passes (a pair {2q, 2q + 1} lies on one
  loop; the odd legs keep their links) ~(2 b) = -1 - 2 b (visited, kept) or ~(2 b + 1) (visited,
  flipped): negative, the flip in the lowest bit, and the loop's label b (:func:`loop_label`) for the loop
  estimators (:mod:`qmc.engine.loop_estimators`).  Sites without any operator are flipped with
  probability 1/2; the other sites follow the loop through their first leg.
- The state is S^z_i = spins[i] / 2 (``spins`` +-1); a flipped loop toggles the diagonal/off-diagonal bit of
  each bond side it passes (``vflip``), which the next sweep xors into ``ops`` (:func:`apply_changes`); an
  off-diagonal bond flips both spins (:func:`hop`).  Per-site and per-bond values of the estimators
  (:func:`site_value`, :func:`bond_value`) are 2 S^z_i and 4 S^z_i S^z_j.

The kind needs no tables of its own: its record :class:`ProjectorKind` is empty.  It is the fast path
(benchmarks/c_compare.py) and must stay bit-identical (tests/chain/test_stored_bins.py).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from numba import njit

from qmc.engine.interleaved import (
    ALONE,
    TRACERS,
    WINDOW,
    interleaved_loop_update,
    use_interleaved,
)
from qmc.engine.rng import next_double
from qmc.engine.vertices import TT_BOND, TT_BOND_WIDTH

__all__ = ["ProjectorKind", "record", "initial_spins", "SLOT_COLOURS", "VERTEX_STATE", "acc_slots",
           "insertion_allowed", "loop_update", "apply_changes", "hop", "hop_masked", "site_value",
           "bond_value", "vertex_added", "measure", "bonds_blocked", "loop_label",
           "loop_moments", "LOOP_ESTIMATORS", "TRACER_CHOICE", "max_loop_labels"]

U = np.uint32  # unsigned indices: no negative-index wrap-around code in the hot loop
SLOT_COLOURS = False
"""The projector kind keeps no per-slot colours (``Chain.above`` is empty)."""
VERTEX_STATE = False
"""Projector loops need no per-vertex state (``vertices.state`` is empty)."""
LOOP_ESTIMATORS = True
"""Every loop is flipped independently with probability 1/2: the loop estimators apply."""
TRACER_CHOICE = True
"""The loop update has two paths, one tracer or several interleaved (``vertices.interleave_above``)."""


def max_loop_labels(kind: object) -> int:
    """How many loops :func:`loop_update` can label in an int32 mark ~(2 b + flipped)."""
    return 1 << 30


def acc_slots(n_groups: int) -> int:
    """Accumulator slots the kind adds after the group slots: none."""
    return 0


class ProjectorKind(NamedTuple):
    """Record of the singlet-projector kind (no fields: its vertices need no tables)."""


def record(model: object) -> ProjectorKind:
    """The kind's record for a compiled model (the same for every model)."""
    return ProjectorKind()


@njit(inline="always")
def bonds_blocked(table, t, k, spins, blocked_if_equal):
    """Whether a bond of term t (k bonds) blocks an insertion: one whose two site states are equal
    (``blocked_if_equal``, S = 1/2 spins: a parallel pair) or differ (colours).  Shared with the colour
    kind; the flag is a constant in each caller, so it folds away when inlined."""
    blocked = False
    for a in range(k):  # no early exit: one data-dependent branch per attempt, not one per bond
        col = TT_BOND + TT_BOND_WIDTH * a
        blocked |= (spins[U(table[U(t), col])] == spins[U(table[U(t), col + 1])]) == blocked_if_equal
    return blocked


def initial_spins(kind: ProjectorKind, u: np.ndarray) -> np.ndarray:
    """Spins +-1, each up with probability 1/2 (u < 1/2)."""
    return np.where(u < 0.5, 1, -1).astype(np.int8)


@njit(inline="always")
def insertion_allowed(kind, table, t, k, spins, s0, s1, s2, s3):
    """(allowed, rng words): may an operator of term t (k bonds, row ``table[t]``) be inserted now?"""
    return not bonds_blocked(table, t, k, spins, True), s0, s1, s2, s3


@njit(inline="always")
def vertex_added(kind, vertices, v, t, a, op, si, sj):
    """Nothing to record where the sweep appends a bond vertex (the loops need only the links)."""


@njit(inline="always")
def measure(kind, chain, tallies):
    """No estimators of the kind's own."""


@njit(cache=True, boundscheck=False)
def loop_update(kind, chain, vertices, n_vertices):
    """Build all loops of the linked vertex list, flip each with probability 1/2; returns the loop count.
    Vertex lists of more than ``vertices.interleave_above[0]`` bond vertices go to
    :func:`qmc.engine.interleaved.interleaved_loop_update` (the same loops, flips and random numbers,
    several tracers at once; which path is faster depends on the size, the loops and the machine:
    :mod:`qmc.chain.tracer_choice`)."""
    spins = chain.spins
    rng = chain.rng
    links = vertices.links
    vflip = vertices.vflip
    first = vertices.first
    if use_interleaved(n_vertices, links.shape[0], vertices.interleave_above[0]):
        return interleaved_loop_update(links, vflip, first, spins, rng, n_vertices, TRACERS, ALONE, WINDOW, 0,
                                       True)  # loop labels in the marks, as below (the loop estimators)
    s0, s1, s2, s3 = rng[0], rng[1], rng[2], rng[3]
    n_legs = 4 * n_vertices
    n_loops = 0
    for q in range(n_legs >> 1):  # pairs q, even legs 2q (a range of q: the tighter scan, measured)
        l0 = q + q
        if links[U(l0)] < 0:
            continue
        u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
        # one walk for kept and flipped loops, without a branch on the coin: a kept loop xors 0 into vflip;
        # the mark ~(2 label + flipped) carries the loop's label for the loop estimators
        f = np.uint8(u < 0.5)
        mark = np.int32(-1 - 2 * n_loops) - np.int32(f)
        n_loops += 1
        leg = l0
        while True:  # one mark per pair of legs, on its even leg (the pair lies on one loop)
            vflip[U(leg >> 2)] ^= f
            nxt = links[U(leg ^ 1)]
            links[U(leg & ~1)] = mark
            leg = nxt
            if leg == l0:
                break
    for i in range(spins.shape[0]):
        f = first[i]
        if f < 0:
            u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
            if u < 0.5:
                spins[i] = -spins[i]
        elif (~links[U(f & ~1)]) & 1:
            spins[i] = -spins[i]
    rng[0] = s0
    rng[1] = s1
    rng[2] = s2
    rng[3] = s3
    return n_loops


@njit(inline="always")
def apply_changes(kind, op, p, t, k, table, spins, above, vflip, v):
    """The operator word with the pending loop flips of bond vertices v .. v+k-1 xored in (and cleared)."""
    for a in range(k):  # branch-free: a loop flips a vertex with probability 1/2
        op ^= np.int32(vflip[U(v + a)]) << a
        vflip[U(v + a)] = 0
    return op


@njit(inline="always")
def hop(kind, spins, phase, above, p, a, i, j):
    """Flip the antiparallel pair (i, j); returns (2 S^z_i before the flip, change of ms = 2 M_s)."""
    si = spins[U(i)]
    d_ms = -(2 * phase[U(i)] * si + 2 * phase[U(j)] * spins[U(j)])
    spins[U(i)] = -si
    spins[U(j)] = -spins[U(j)]
    return si, d_ms


@njit(inline="always")
def hop_masked(kind, spins, phase, above, p, a, i, j, f):
    """:func:`hop` if f = 1, nothing if f = 0 (returns (0, 0)), without a branch: the sweep propagates
    through every bond of an off-diagonal multi-bond operator this way, since which of its bonds hop is
    a coin flip that a branch predictor cannot guess."""
    si = spins[U(i)]
    sj = spins[U(j)]
    d_ms = -f * (2 * phase[U(i)] * si + 2 * phase[U(j)] * sj)
    sign = 1 - 2 * f  # -1: flip the pair, +1: keep it
    spins[U(i)] = sign * si
    spins[U(j)] = sign * sj
    return f * si, d_ms


@njit(inline="always")
def site_value(kind, spins, i):
    """2 S^z_i."""
    return spins[i]


@njit(inline="always")
def bond_value(kind, spins, i, j):
    """4 S^z_i S^z_j."""
    return spins[i] * spins[j]


@njit(inline="always")
def loop_label(kind, mark):
    """The label b of the loop whose legs :func:`loop_update` marked ``mark`` (= ~(2 b + flipped))."""
    return (~mark) >> 1


@njit(inline="always")
def loop_moments(kind):
    """(E[x^2], E[x^4]) of a loop's share x = phi_i S^z_i = +-1/2 of the staggered order, each sign with
    probability 1/2 after the loop update: (1/4, 1/16)."""
    return 0.25, 0.0625
