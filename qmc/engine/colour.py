"""The SU(N) colour vertex kind: N colours per site, singlet projectors, loops that each carry one colour.

Basis and weights
-----------------
A site of sublattice A carries the fundamental representation of SU(N), a site of B the conjugate one.  In
the basis used here a site's state is a colour c = 0..N-1 (``Chain.spins``, int8), a B site's colour being
the label of the conjugate state, so that the bond singlet of an A-B bond is ``|s> = N^(-1/2) sum_a |a a>``
and the projector ``P_ij = |s><s|`` has the matrix elements

    <c c| P_ij |a a> = 1/N  for all a, c,     P_ij |a b> = 0  for a != b.

A term ``C_t prod_{a<k} P`` therefore has, on every operator-string configuration, the weight C_t / N^k when
every one of its k bonds carries two equal colours below (and then, by the matrix elements, two equal
colours above), and 0 otherwise; all matrix elements are >= 0, so with C_t >= 0 there is no sign problem.
For N = 2 this is the S = 1/2 projector 1/4 - S_i.S_j: with colour 0 = up on A and colour 0 = down on B
(the conjugate doublet), the singlet (|up down> - |down up>)/sqrt(2) is (|0 0> + |1 1>)/sqrt(2) up to the
sign of one basis state per B site, a diagonal change of basis that leaves every diagonal observable and
every weight unchanged.

The updates (derived here from these weights; the SSE bookkeeping is that of :mod:`qmc.engine.diagonal`)
---------------------------------------------------------------------------------------------------------
- Diagonal update (:func:`insertion_allowed`): the alias table draws term t with probability w_t / W_tot,
  w_t = C_t / N^k (:attr:`qmc.models.compiled.CompiledModel.term_weights`); the weight of the new operator
  is w_t exactly when every bond has equal colours, else 0, so the insertion is accepted exactly when all
  bonds have equal colours.  No random number is drawn.
- Loop update (:func:`loop_update`): the deterministic loops of the projector kind (enter a bond vertex at
  leg l, leave at leg l ^ 1, the other site on the same time side, follow the world line).  Both legs of a
  vertex side carry the same colour (weight non-zero), and a world line keeps its colour between two
  operators, so every leg of a loop has one colour.  Changing the colour of a whole loop to any of the N
  colours keeps every vertex allowed and its weight 1/N; the loop structure depends only on where the
  operators are, not on the colours.  Given the loops, the weight is therefore the same for all N^(loops)
  colourings, and drawing every loop's colour uniformly and independently is the heat-bath update of the
  colours given the loops: it samples their conditional distribution exactly (detailed balance), whatever
  the old colours were.  For N = 2 the new colour equals the old one with probability 1/2, which is the
  projector kind's "flip each loop with probability 1/2".  A site without operators is a loop of its own
  and gets a uniform colour.  Every leg is visited once.
- Bookkeeping: the b-th loop built marks the even leg of each pair of legs it passes with
  ``~((b << colour_bits) | colour)`` in ``links``
  (negative; the colour in the low ``colour_bits`` bits, the loop's label b above them for the loop
  estimators, :func:`loop_label`); a last pass stores for every bond
  vertex its new upper colour plus one in ``vflip`` (0: no change pending).  The next sweep (or
  :func:`qmc.engine.diagonal.fold_pending`) applies it (:func:`apply_changes`): the colour above bond a of
  the operator at slot p goes into byte a of ``Chain.above[p]``, and the bond is off-diagonal exactly when
  that colour differs from the colour below it (the propagated state at slot p).  :func:`hop` propagates
  the state through an off-diagonal bond: both sites take the colour above.

Estimators (:mod:`qmc.engine.equal_time`, :mod:`qmc.engine.diagonal`, :mod:`qmc.chain.observables`) come
from three per-state values, each equal at N = 2 to the S = 1/2 one it replaces (phi_i = +1 on A, -1 on B):

- staggered colour order: ms = 2 sum_i (delta(c_i, 0) - 1/N), the share of site i being
  phi_i sigma_i with sigma_i = 2 phi_i (delta(c_i, 0) - 1/N) (:func:`site_value`).  At N = 2,
  delta(c_i, 0) - 1/2 = phi_i S^z_i, so sigma_i = 2 S^z_i and ms = 2 M_s: m_stag2, m_stag4, chi_stag, s_q
  and s_q_shifted are those of m_s = N_sites^(-1) sum_i (delta(c_i, 0) - 1/N), exactly M_s / N_sites at
  N = 2; chi_uniform is beta <Q_0^2> / N_sites with the conserved colour-0 charge
  Q_0 = sum_i phi_i (delta(c_i, 0) - 1/N) (= sum_i S^z_i at N = 2).
- valence-bond order: c_ij = -2 B_ij = 2/N - 2 delta(c_i, c_j) (:func:`bond_value`), so that
  D_a = (1/(4 N_sites)) sum_b (-1)^(r_a) c_b = -(1/(2 N_sites)) sum_b (-1)^(r_a) B_b.  At N = 2, for
  i, j on opposite sublattices, delta(c_i, c_j) = 1/2 - 2 S^z_i S^z_j, so B_ij = -2 S^z_i S^z_j and
  c_ij = 4 S^z_i S^z_j: vbs_x2, vbs_y2, vbs4, vbs_cos4 and the (D_x, D_y) histogram are the S = 1/2 ones.
- winding of colour 0 (:func:`hop`): an off-diagonal bond taking both sites from colour a to colour c moves
  the colour-0 charge phi_i (delta(a, 0) - delta(c, 0)) from i to j; summed with the bond displacement
  this is w_a, and stiffness = <w_a^2> / (beta N_sites) is the stiffness of a twist of colour 0's U(1).
  At N = 2 the charge moved is 2 S^z_i before the hop (an up spin going i -> j), the S = 1/2 winding.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from numba import njit

from qmc.engine.interleaved import mark_loop
from qmc.engine.projector import bonds_blocked
from qmc.engine.rng import next_double
from qmc.engine.vertices import TT_BOND, TT_BOND_WIDTH

__all__ = ["ColourKind", "record", "initial_spins", "SLOT_COLOURS", "insertion_allowed", "loop_update",
           "hop_masked", "apply_changes", "hop", "site_value", "bond_value", "loop_label", "loop_moments",
           "colour_moments", "LOOP_ESTIMATORS", "TRACER_CHOICE", "max_loop_labels"]

U = np.uint32  # unsigned indices: no negative-index wrap-around code in the hot loop
SLOT_COLOURS = True
"""The colour kind keeps the colours above off-diagonal bonds per slot (``Chain.above``, 8 bits a bond)."""
TRACER_CHOICE = False
"""The loop update has one path (``vertices.interleave_above`` is not read)."""
LOOP_ESTIMATORS = True
"""Every loop takes one of the N colours uniformly and independently: the loop estimators apply."""


class ColourKind(NamedTuple):
    """Record of the colour kind: N, the number of colours per site, 1/N, the staggered sign phi_i
    (int8[N_sites]: +1 on A, -1 on B) and the bits a colour takes in a loop mark (N <= 2^colour_bits)."""

    n_colours: int
    inv_n: float
    phase: np.ndarray
    colour_bits: int


def record(model: object) -> ColourKind:
    """The kind's record for a compiled model (its ``n_colours`` and ``phase``)."""
    n = int(model.n_colours)
    return ColourKind(n, 1.0 / n, np.ascontiguousarray(model.phase, dtype=np.int8), int(n - 1).bit_length())


def max_loop_labels(kind: ColourKind) -> int:
    """How many loops :func:`loop_update` can label in an int32 mark ~((b << colour_bits) | colour)."""
    return 1 << (31 - kind.colour_bits)


def initial_spins(kind: ColourKind, u: np.ndarray) -> np.ndarray:
    """Colours 0..N-1, each with probability 1/N (floor(N u))."""
    return np.minimum((u * kind.n_colours).astype(np.int64), kind.n_colours - 1).astype(np.int8)


@njit(inline="always")
def insertion_allowed(kind, table, t, k, spins, s0, s1, s2, s3):
    """(allowed, rng words): an operator of term t (k bonds) may be inserted when every bond has equal
    colours on its two sites."""
    return not bonds_blocked(table, t, k, spins, False), s0, s1, s2, s3


@njit(cache=True, boundscheck=False)
def loop_update(kind, chain, vertices, n_vertices):
    """Build all loops of the linked vertex list, give each a uniform colour; returns the loop count."""
    spins = chain.spins
    rng = chain.rng
    links = vertices.links
    vflip = vertices.vflip
    first = vertices.first
    n_colours = kind.n_colours
    bits = kind.colour_bits
    s0, s1, s2, s3 = rng[0], rng[1], rng[2], rng[3]
    n_legs = 4 * n_vertices
    n_loops = 0
    for l0 in range(0, n_legs, 2):
        if links[U(l0)] < 0:
            continue
        u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
        mark_loop(links, l0, np.int32(~((n_loops << bits) | int(u * n_colours))))
        n_loops += 1
    mask = (1 << bits) - 1
    for v in range(n_vertices):  # the new colour above every bond vertex, plus one
        vflip[U(v)] = np.uint8(((~links[U(4 * v + 2)]) & mask) + 1)
    for i in range(spins.shape[0]):
        f = first[i]
        if f < 0:
            u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
            spins[i] = np.int8(int(u * n_colours))
        else:
            spins[i] = np.int8((~links[U(f & ~1)]) & mask)
    rng[0] = s0
    rng[1] = s1
    rng[2] = s2
    rng[3] = s3
    return n_loops


@njit(inline="always")
def apply_changes(kind, op, p, t, k, table, spins, above, vflip, v):
    """The operator word at slot p with the loop update's new colours of bond vertices v .. v+k-1: each bond's
    colour above goes into byte a of ``above[p]``, and its off-diagonal bit is set when it differs from the
    colour below (``spins``, the state just below slot p)."""
    for a in range(k):
        c = vflip[U(v + a)]
        if c != 0:
            up = np.int32(c) - 1
            below = np.int32(spins[U(table[U(t), TT_BOND + TT_BOND_WIDTH * a])])
            op = (op & ~(np.int32(1) << a)) | (np.int32(below != up) << a)
            shift = 8 * a
            above[U(p)] = (above[U(p)] & ~(np.int32(0xFF) << shift)) | (up << shift)
            vflip[U(v + a)] = 0
    return op


@njit(inline="always")
def hop(kind, spins, phase, above, p, a, i, j):
    """Both sites take the colour above bond a of slot p; returns (colour-0 charge moved from i to j, change
    of ms)."""
    up = (above[U(p)] >> (8 * a)) & 0xFF
    d = np.int64(up == 0) - np.int64(spins[U(i)] == 0)
    spins[U(i)] = up
    spins[U(j)] = up
    return -phase[U(i)] * d, 4 * d


@njit(inline="always")
def hop_masked(kind, spins, phase, above, p, a, i, j, f):
    """:func:`hop` if f = 1, nothing if f = 0 (returns (0, 0))."""
    if f:
        return hop(kind, spins, phase, above, p, a, i, j)
    return np.int64(0), np.int64(0)


@njit(inline="always")
def site_value(kind, spins, i):
    """sigma_i = 2 phi_i (delta(c_i, 0) - 1/N), phi_i = +1 on A, -1 on B (2 S^z_i at N = 2)."""
    return kind.phase[i] * (2.0 * (np.float64(spins[i] == 0) - kind.inv_n))


@njit(inline="always")
def bond_value(kind, spins, i, j):
    """c_ij = 2/N - 2 delta(c_i, c_j) = -2 B_ij (4 S^z_i S^z_j at N = 2)."""
    return 2.0 * kind.inv_n - 2.0 * np.float64(spins[i] == spins[j])


@njit(inline="always")
def loop_label(kind, mark):
    """The label b of the loop whose legs :func:`loop_update` marked ``mark`` (= ~((b << bits) | colour))."""
    return (~mark) >> kind.colour_bits


@njit(inline="always")
def colour_moments(n):
    """(E[x^2], E[x^4]) of x = delta(c, 0) - 1/N for a colour c uniform on 0..N-1: x = 1 - 1/N with
    probability 1/N and -1/N otherwise, so E[x^2] = (N-1)/N^2 and E[x^4] = (N-1)(N^2-3N+3)/N^4 (at N = 2:
    1/4 and 1/16, the moments of S^z = +-1/2)."""
    nf = np.float64(n)
    return (nf - 1.0) / (nf * nf), (nf - 1.0) * (nf * nf - 3.0 * nf + 3.0) / (nf * nf * nf * nf)


@njit(inline="always")
def loop_moments(kind):
    """(E[x^2], E[x^4]) of a loop's share x = delta(c_l, 0) - 1/N of the staggered colour order."""
    return colour_moments(kind.n_colours)
