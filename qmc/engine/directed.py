"""The directed-loop vertex kind: XXZ bonds with folded fields (:mod:`models.directed`), singlet projectors.

Weights.  A directed bond term t has diagonal weights W_t(q) (q = (i up) + 2 (j up)) and hop weight |J|/2;
the diagonal update draws t with probability w_t / W_tot, w_t = max_q W_t(q)
(:attr:`models.compiled.CompiledModel.term_weights`).  Projector terms keep their weights (1/2 per
antiparallel bond).

- Insertion (:func:`insertion_allowed`): accepted with probability prod_a W(q_a) / w_t over the term's bonds,
  i.e. W_t(q)/w_t for a directed bond and 1 or 0 (all bonds antiparallel or not) for a projector term; a
  random number is drawn only when that ratio lies strictly between 0 and 1.
- Recording (:func:`vertex_added`): where the sweep appends bond vertex v, its leg configuration, its type
  (row of the tables; 0 is the projector bond) and whether it acts off-diagonally are packed into
  ``vertices.state[v] = off << 30 | (16 type + bits) << 2``, so that ``state | e`` (e the entrance leg)
  is the row of the exit tables without further arithmetic.
- Loop update (:func:`loop_update`): ``counters[1]`` directed loops per step, each started at a uniformly
  drawn leg; at a vertex entered at leg e the loop leaves at leg x with the fewest-bounce probability of
  :mod:`qmc.engine.directed_tables` (a table lookup without random number where it is 0 or 1), flipping the
  spins on e and x; it closes when it leaves through, or arrives at, its starting leg.  Afterwards the
  vertices whose off-diagonal status changed are marked in ``vflip`` (applied by the next sweep as for
  projector loops), sites with operators take the spin of their first leg, free sites flip with
  probability 1/2.
- Loops per step: while ``counters[2] == 0`` (warm-up; :class:`qmc.chain.simulation.Simulation` sets it to 1
  when measuring starts) the count is adapted after every step towards 2 n_vertices vertex visits per step
  (the work of one deterministic loop decomposition, which passes every vertex twice); it is then frozen,
  so the measured chain is a fixed product of loop updates (common practice, no source).
- Measurement (:func:`measure`): M = sum_i S^z_i and, per term group, sum_i f_{g,i} S^z_i of
  ``group_field``, in the accumulator slots after the groups (``DIRECTED_SLOTS``).

Exactness of the estimators for these models: energy, specific heat, ``term_energy``, ``magnetization``,
``chi_uniform`` (M is conserved by every term, so the equal-time <M^2> gives the Kubo integral),
``m_stag2``/``m_stag4``/``chi_stag`` along z, ``s_q``, ``s_q_shifted``, the dimer order parameters and the
winding-number stiffness (the twist acts on the hops only) are exact estimators for any mix of xxz, field,
heisenberg and projector-product terms.  Transverse (xy) correlations are not measured.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from numba import njit

from qmc.engine.directed_tables import PROJECTOR_DIAGONAL, PROJECTOR_HOP, exit_probabilities
from qmc.engine.rng import next_double
from qmc.engine.slots import A_GROUP
from qmc.engine.vertices import TT_BOND, TT_BOND_WIDTH
from qmc.models.compiled import KIND_DIRECTED, CompiledModel
from qmc.models.directed import diagonal_weights

__all__ = ["DirectedKind", "record", "insertion_allowed", "vertex_added", "loop_update", "measure",
           "VERTEX_STATE", "LOOP_ESTIMATORS", "TRACER_CHOICE", "acc_slots", "X_MZ", "X_FIELD"]

U = np.uint32
TRACER_CHOICE = False
"""The loop update has one path (``vertices.interleave_above`` is not read)."""
LOOP_ESTIMATORS = False
"""Directed loops are not flipped independently of each other: only the plain estimators apply."""
VERTEX_STATE = True
"""This kind records a state per vertex (``vertices.state``, allocated with the vertex list)."""
X_MZ = 0
"""Extra accumulator slot (after the groups) of M = sum_i S^z_i; ``X_FIELD + g``: sum_i f_{g,i} S^z_i."""
X_FIELD = 1
_ROW_MASK = (1 << 30) - 1


def acc_slots(n_groups: int) -> int:
    """Accumulator slots this kind adds after the group slots."""
    return X_FIELD + n_groups


class DirectedKind(NamedTuple):
    """Tables of the directed-loop kind (all built by :func:`record`)."""

    term_type: np.ndarray  # int32[T]: vertex type of the term's bond vertices (0: singlet projector)
    diag_ratio: np.ndarray  # float64[types, 4]: W(q) / w_t, the insertion probability
    exit_cum: np.ndarray  # float64[types * 64, 4]: cumulative exit probabilities, row (type 16 + bits) 4 + e
    exit_det: np.ndarray  # int8[types * 64]: the exit leg where it is certain, else -1
    group_field: np.ndarray  # float64[G, N]
    field_groups: np.ndarray  # int32[*]: groups with a non-zero row of group_field


def record(model: CompiledModel) -> DirectedKind:
    """Vertex types (distinct weight tables) and their exit probabilities for ``model``."""
    directed = model.group_kind[np.asarray(model.term_group)] == KIND_DIRECTED
    w = model.term_weights
    rows = np.zeros((model.n_terms, 5))  # (W(0..3)/w_t, hop/w_t); projector terms: the projector bond
    rows[:, :4] = PROJECTOR_DIAGONAL / 0.5
    rows[:, 4] = PROJECTOR_HOP / 0.5
    if np.any(directed):
        xxz = model.term_xxz[directed]
        rows[directed, :4] = diagonal_weights(*xxz.T) / w[directed, None]
        rows[directed, 4] = np.abs(xxz[:, 0]) / 2.0 / w[directed]
    uniq, inverse = np.unique(np.round(rows, 14), axis=0, return_inverse=True)
    types = np.vstack([rows[:1] * 0 + np.r_[PROJECTOR_DIAGONAL / 0.5, PROJECTOR_HOP / 0.5], uniq])
    term_type = inverse.reshape(-1) + 1  # type 0: the projector bond, whether or not a term uses it
    cum = np.zeros((len(types) * 64, 4))
    det = np.full(len(types) * 64, -1, dtype=np.int8)
    for k, row in enumerate(types):
        P = exit_probabilities(row[:4], row[4]).reshape(64, 4)
        c = np.cumsum(P, axis=1)
        c[:, 3] = 2.0  # never exceeded by a draw in [0, 1): round-off cannot run past the last leg
        cum[64 * k:64 * (k + 1)] = c
        certain = np.max(P, axis=1) == 1.0
        det[64 * k:64 * (k + 1)][certain] = np.argmax(P, axis=1)[certain]
    field = np.ascontiguousarray(model.group_field, dtype=np.float64)
    return DirectedKind(term_type=np.ascontiguousarray(term_type.reshape(-1), dtype=np.int32),
                        diag_ratio=np.ascontiguousarray(types[:, :4]), exit_cum=cum, exit_det=det,
                        group_field=field,
                        field_groups=np.flatnonzero(np.any(field != 0.0, axis=1)).astype(np.int32))


@njit(inline="always")
def insertion_allowed(kind, table, t, k, spins, s0, s1, s2, s3):
    """(allowed, rng words): insert an operator of term t with probability prod_a W(q_a) / w_t."""
    typ = kind.term_type[U(t)]
    p = 1.0
    for a in range(k):
        col = TT_BOND + TT_BOND_WIDTH * a
        q = (spins[U(table[U(t), col])] > 0) + 2 * (spins[U(table[U(t), col + 1])] > 0)
        p *= kind.diag_ratio[U(typ), U(q)]
    if p >= 1.0:
        return True, s0, s1, s2, s3
    if p <= 0.0:
        return False, s0, s1, s2, s3
    u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
    return u < p, s0, s1, s2, s3


@njit(inline="always")
def vertex_added(kind, vertices, v, t, a, op, si, sj):
    """Record bond vertex v (bond a of term t, operator ``op``; si, sj the spins above it)."""
    off = (op >> a) & 1
    above = (si > 0) + 2 * (sj > 0)
    below = above ^ (3 * off)
    vertices.state[U(v)] = (off << 30) | (((kind.term_type[U(t)] << 4) | below | (above << 2)) << 2)


@njit(cache=True, boundscheck=False)
def loop_update(kind, chain, vertices, n_vertices):
    """``counters[1]`` directed loops (adapted during warm-up); returns the number of loops built."""
    spins, rng, counters = chain.spins, chain.rng, chain.counters
    links, vflip, first, state = vertices.links, vertices.vflip, vertices.first, vertices.state
    cum, det = kind.exit_cum, kind.exit_det
    s0, s1, s2, s3 = rng[0], rng[1], rng[2], rng[3]
    n_loops = counters[1]
    if n_loops < 1:
        n_loops = 1
    visits = 0
    if n_vertices > 0:
        n_legs = 4 * n_vertices
        for _ in range(n_loops):
            u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
            l0 = int(u * n_legs)
            e = l0
            while True:
                v = e >> 2
                st = state[U(v)]
                row = (st & _ROW_MASK) | (e & 3)
                x = det[U(row)]
                if x < 0:
                    u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
                    x = 0
                    while u >= cum[U(row), U(x)]:
                        x += 1
                state[U(v)] = st ^ (4 << (e & 3)) ^ (4 << x)
                visits += 1
                leg = (v << 2) | x
                if leg == l0:
                    break
                e = links[U(leg)]
                if e == l0:
                    break
        for v in range(n_vertices):
            st = state[v]
            vflip[v] = ((st ^ (st >> 2)) >> 2 & 1) ^ (st >> 30)
    for i in range(spins.shape[0]):
        f = first[i]
        if f < 0:
            u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
            if u < 0.5:
                spins[i] = -spins[i]
        else:
            spins[i] = 1 if (state[U(f >> 2)] >> (2 + (f & 3))) & 1 else -1
    if counters[2] == 0 and visits > 0:
        ratio = 2.0 * n_vertices / visits
        counters[1] = max(1, int(0.5 * n_loops * (1.0 + ratio) + 0.5))
    rng[0] = s0
    rng[1] = s1
    rng[2] = s2
    rng[3] = s3
    return n_loops


@njit(inline="always")
def measure(kind, chain, tallies):
    """Add M and sum_i f_{g,i} S^z_i (per field group) to the kind's accumulator slots."""
    spins, acc, field = chain.spins, tallies.acc, kind.group_field
    base = A_GROUP + field.shape[0]
    mz = 0.0
    for i in range(spins.shape[0]):
        mz += spins[i]
    acc[base + X_MZ] += 0.5 * mz
    for g in kind.field_groups:
        s = 0.0
        for i in range(spins.shape[0]):
            s += field[g, i] * spins[i]
        acc[base + X_FIELD + g] += 0.5 * s
