"""Exit probabilities of directed loops: the directed-loop equations at a four-leg bond vertex, solved with
the fewest bounces (Syljuasen and Sandvik, Phys. Rev. E 66, 046701 (2002), whose scheme this follows; the
solution below is derived here).

Vertex configurations.  A bond vertex has legs l = 0 (site i below), 1 (j below), 2 (i above), 3 (j above);
its configuration is ``bits`` (bit l set: the spin on leg l is up).  The weight of a configuration is the
diagonal weight W(q) of its state q = bits & 3 when below equals above, the hop weight W_off when both spins
flip (below q = 1 or 2, above 3 - q), and 0 otherwise (S^z not conserved, or a parallel pair hopping).

Directed-loop equations.  A loop entering configuration c at leg e flips the spin on e and leaves at leg x,
flipping it too (x = e: a bounce, c unchanged); the new configuration is c ^ (1 << e) ^ (1 << x).  The four
configurations m ^ (1 << x), x = 0..3, reached from one intermediate m = c ^ (1 << e) form a group; with
a_x their weights and b_xy = a_x P(x -> y) (enter at x, leave at y), detailed balance of the loop is

    b_xy = b_yx,   sum_y b_xy = a_x   (b_xy >= 0),

and the bounce weights b_xx are to be as small as possible.  For S = 1/2 XXZ vertices every group has at
most three members of non-zero weight (two diagonal states differing in one spin and one hop, see
:mod:`models.directed`).  For members with weights A >= B >= C:

* A <= B + C (no bounce): b_AB = (A + B - C)/2, b_AC = (A + C - B)/2, b_BC = (B + C - A)/2;
* A > B + C: b_AA = A - B - C (the only bounce), b_AB = B, b_AC = C, b_BC = 0.

Two members: b_AB = B, b_AA = A - B; one member: it bounces.  No solution has a smaller total bounce
weight: sum_x b_xx >= A - B - C follows from the row of A.  The probabilities are P(c, e -> x) = b_ex / a_e.

A singlet-projector bond (weights 1/2 on antiparallel diagonal states and hops, 0 on parallel pairs) is the
case W(ud) = W(du) = W_off, W(uu) = W(dd) = 0: every group is {1/2, 1/2, 0} and the loop leaves at
``l ^ 1`` with probability 1, the deterministic loop of :mod:`qmc.engine.projector`.
"""

from __future__ import annotations

import numpy as np

__all__ = ["vertex_weights", "solve_group", "exit_probabilities", "PROJECTOR_DIAGONAL", "PROJECTOR_HOP"]

PROJECTOR_DIAGONAL = np.array([0.0, 0.5, 0.5, 0.0])
"""W(q) of one singlet-projector bond (q = (i up) + 2 (j up)); its hop weight is ``PROJECTOR_HOP``."""
PROJECTOR_HOP = 0.5


def vertex_weights(diagonal: np.ndarray, hop: float) -> np.ndarray:
    """Weight of each of the 16 leg configurations of a bond vertex (module docstring)."""
    w = np.zeros(16)
    for bits in range(16):
        below, above = bits & 3, bits >> 2
        if below == above:
            w[bits] = diagonal[below]
        elif below in (1, 2) and above == 3 - below:
            w[bits] = hop
    return w


def solve_group(a: np.ndarray) -> np.ndarray:
    """The fewest-bounce symmetric b (4 x 4) with row sums ``a`` (module docstring); at most three non-zero
    entries of ``a`` are supported (all that S = 1/2 bond vertices have)."""
    a = np.asarray(a, dtype=np.float64)
    b = np.zeros((4, 4))
    members = [int(x) for x in np.argsort(-a, kind="stable") if a[x] > 0.0]
    if len(members) > 3:
        raise ValueError("a directed-loop group with four configurations of non-zero weight")
    if len(members) == 1:
        b[members[0], members[0]] = a[members[0]]
    elif len(members) == 2:
        p, q = members
        b[p, q] = b[q, p] = a[q]
        b[p, p] = a[p] - a[q]
    elif len(members) == 3:
        p, q, r = members
        A, B, C = a[p], a[q], a[r]
        if A <= B + C:
            b[p, q] = b[q, p] = (A + B - C) / 2.0
            b[p, r] = b[r, p] = (A + C - B) / 2.0
            b[q, r] = b[r, q] = (B + C - A) / 2.0
        else:
            b[p, p] = A - B - C
            b[p, q] = b[q, p] = B
            b[p, r] = b[r, p] = C
    return b


def exit_probabilities(diagonal: np.ndarray, hop: float) -> np.ndarray:
    """P[bits, e, x]: probability to leave at leg x after entering configuration ``bits`` at leg e (zero rows
    for configurations of zero weight, which loops never meet)."""
    w = vertex_weights(diagonal, hop)
    P = np.zeros((16, 4, 4))
    for m in range(16):  # intermediate configurations: each group once
        members = [m ^ (1 << x) for x in range(4)]
        a = w[members]
        b = solve_group(a)
        for e in range(4):
            if a[e] > 0.0:
                P[members[e], e] = b[e] / a[e]
    return P
