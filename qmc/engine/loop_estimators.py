"""Loop (improved) estimators: the averages of the order-parameter estimators over the loop update's choices.

Why they hold
-------------
The loop update of the projector and the colour kinds builds every loop of the configuration and then draws
each loop's new state independently of all others and of the old state: S = 1/2 loops are flipped with
probability 1/2, SU(N) loops take one of the N colours uniformly (:mod:`qmc.engine.projector`,
:mod:`qmc.engine.colour`).  Along a loop the staggered share of a site, x = phi_i S^z_i (spins; the vertex
joins two antiparallel spins of opposite sublattices) or x = delta(c_i, 0) - 1/N (colours), is one number
x_l, and the new x_l are independent with E[x] = 0, E[x^2] = mu2, E[x^4] = mu4 (spins: 1/4, 1/16; N
colours: (N-1)/N^2 and (N-1)(N^2-3N+3)/N^4, :func:`qmc.engine.colour.colour_moments`; hook
``loop_moments``).  Given the loops, an estimator f of the new configuration may therefore be replaced by
its average over the x_l, E[f | loops], which has the same mean and never a larger variance (the conditional
expectation; the Markov chain is untouched and no random number is drawn).

With n_l(p) the number of sites of loop l in the propagated state p (p = 1..n after each of the n
operators, p = 0 = n the state at slice 0) the staggered order is M_s(p) = sum_l x_l n_l(p), and with
Q2(p) = sum_l n_l(p)^2, Q4(p) = sum_l n_l(p)^4:

    E[M_s(p)^2] = mu2 Q2(p)
    E[M_s(p)^4] = 3 mu2^2 Q2(p)^2 + (mu4 - 3 mu2^2) Q4(p)        (spins: (3 Q2^2 - 2 Q4) / 16)

(the fourth moment of a sum of independent zero-mean terms; odd powers of any x_l average to zero).  The
SSE estimators of :mod:`qmc.engine.steps` become (slots ``A_*``, S^z units, whole lattice)

- A_MS2  mu2 (1/n) sum_p Q2(p)
- A_MS4  (1/n) sum_p [3 mu2^2 Q2(p)^2 + (mu4 - 3 mu2^2) Q4(p)]
- A_CHIS beta mu2 [sum_l L_l^2 + sum_p Q2(p)] / (n (n + 1)), L_l = sum_p n_l(p) the loop's length in
         operator steps (the loop form of (sum_p M_s(p))^2 -> sum_l L_l^2 x_l^2)
- A_MZ2  mu2 sum_l w_l^2, w_l = sum_{i in l at slice 0} phi_i the uniform share of loop l (sum_i S^z_i =
         sum_l x_l w_l; w_l is the same at every time: a vertex moves two sites of opposite sublattices)
- A_SQN  mu2 sum_l |F_l|^2 / (D N), F_l = sum_{i in l at slice 0} exp(i dq_a . r_i), summed over the D
         directions a (S(Q + dq_a))

and with no operator at all (n = 0; every site a loop of its own) the slice-0 forms with Q2 = Q4 = N.  A site
without operators is a loop of its own with n_l = 1 at every p (L_l = n).  The forms are those of the loop
estimators known since the loop cluster algorithms (common practice, no source); the N-colour moments are
derived here.

Work: one pass over the sites (loops at slice 0) and one over the bond vertices in order, following the
two loops of every bond vertex (the loop below it loses its two sites, the loop above gains them), so Q2,
Q4 and the lengths L_l are updated in O(1) per vertex.  The loop of a leg is its label in ``links``
(hook ``loop_label``), written by the loop update on the even leg of each pair.  When every operator is one
bond vertex, vertex v is operator v + 1; with multi-bond operators a propagated state ends only after the
last vertex of an operator, which one branch-free pass over the string marks first (:func:`_mark_ends`).

Implementation notes (measured on the 32x32 canonical cases, see CHANGELOG): a loop's site count and
length sit side by side in one int64 array (one cache line per loop touched, not two); the quartic change
is written as 8 [a (a^2 + 1) - b (b^2 + 1)] (fewer multiplications); the end-of-operator marks come from a
pass with one store per slot and no branch (branching on empty slots and on the bond count mispredicts),
and the per-vertex sums are masked with them rather than branched on; the scratch is left zero for the next
call, so the clearing rides along the last pass over the loops instead of a pass of its own.  Letting the
diagonal sweep write the marks instead was measured and dropped: the guarded store made the plain-estimator
step about 3% slower on the square case.  The vertex pass (:func:`_vertex_sums`) runs over the leg index
4 v rather than v, in a compilation of its own with fused multiply-adds allowed (its products are exact
on up to 8192 sites, so its sums are the same to the last bit): 9-10% less time for the pass on both
canonical cases, although the square case's pass then executes 2% more instructions.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from qmc.engine.kinds import loop_label, loop_moments
from qmc.engine.slots import A_CHIS, A_MS2, A_MS4, A_MZ2, A_SQN
from qmc.engine.vertices import OP_TERM_SHIFT

__all__ = ["loop_estimators"]

U = np.uint32


@njit(inline="always")
def _pass_vertex(kind, links, tally, leg, p, q2, q4):
    """The bond vertex whose legs start at ``leg`` (= 4 v) in the p-th operator: its loop below loses two
    sites, its loop above gains them; returns the new (Q2, Q4).  Branch-free: when the same loop is below
    and above, the changes cancel exactly.  ``tally[2 b]`` is loop b's site count, ``tally[2 b + 1]`` its
    length (one cache line for both)."""
    below = U(2 * loop_label(kind, links[U(leg)]))
    above = U(2 * loop_label(kind, links[U(leg + 2)]))
    cb = tally[below]
    tally[below] = cb - 2
    tally[below + U(1)] += 2 * p
    ca = tally[above]
    tally[above] = ca + 2
    tally[above + U(1)] -= 2 * p
    # with a = ca + 1, b = cb - 1: (ca + 2)^2 - ca^2 + (cb - 2)^2 - cb^2 = 4 (a - b) and
    # (ca + 2)^4 - ca^4 + (cb - 2)^4 - cb^4 = 8 [a (a^2 + 1) - b (b^2 + 1)], exact in int64 (Q4 itself in
    # float64: it may pass 2^63)
    a = ca + 1
    b = cb - 1
    q2 += 4 * (a - b)
    q4 += np.float64(8 * (a * (a * a + 1) - b * (b * b + 1)))
    return q2, q4


@njit(cache=True, fastmath={"contract"}, boundscheck=False)
def _vertex_sums(kind, links, tally, ends, n_vertices, n, q2, q4):
    """(sum_p Q2(p), sum_p Q2(p)^2, sum_p Q4(p)) over the propagated states p = 1 .. n, from Q2 and Q4 at
    slice 0, in one pass over the bond vertices.  When every operator is one bond vertex (n_vertices == n)
    vertex v is operator v + 1; otherwise a state ends after the last vertex of each operator: ends[v + 1]
    = 1 there, else 0, and the sums are masked with it (no branch).  Fused multiply-adds are allowed here
    only, where they change nothing: 0 or 1 times Q4 is exact, and so is Q2^2 while Q2 <= 2^26 (always on
    up to 8192 sites, since Q2 <= N^2).  Beyond, a CPU without FMA may round sum_p Q2(p)^2 differently
    in its last bit; one machine always gives the same bins."""
    sum_q2 = 0.0
    sum_q2sq = 0.0
    sum_q4 = 0.0
    p = np.int64(1)
    if n_vertices == n:
        for leg in range(0, 4 * n_vertices, 4):
            q2, q4 = _pass_vertex(kind, links, tally, leg, p, q2, q4)
            fq2 = np.float64(q2)
            sum_q2 += fq2
            sum_q2sq += fq2 * fq2
            sum_q4 += q4
            p += 1
    else:
        v = np.int64(0)
        for leg in range(0, 4 * n_vertices, 4):
            q2, q4 = _pass_vertex(kind, links, tally, leg, p, q2, q4)
            v += 1
            e = np.int64(ends[U(v)])
            fq2 = np.float64(q2 & -e)  # Q2 at the end of an operator, else 0
            sum_q2 += fq2
            sum_q2sq += fq2 * fq2
            sum_q4 += np.float64(e) * q4
            p += e
    return sum_q2, sum_q2sq, sum_q4


@njit(inline="always")
def _mark_ends(ops, bond_count, ends):
    """Set ends[v + 1] = 1 for every bond vertex v that is the last of its operator (ends all zero before),
    one store per slot and no branch on it: after an operator of k bonds (0 for an empty slot, whose store
    repeats the previous operator's) the next vertex is v, and ends[v] marks vertex v - 1.  ends[0] is a
    dummy.  ``bond_count[t]`` = k_t (one byte per term: 5% faster than the term table's rows on J-Q2).
    Returns n_vertices."""
    v = np.int64(0)
    for slot in range(ops.shape[0]):
        op = ops[slot]
        v += np.int64(bond_count[U(max(op, 0) >> OP_TERM_SHIFT)]) * np.int64(op >= 0)
        ends[U(v)] = 1
    return v


@njit(cache=True, boundscheck=False)
def loop_estimators(kind, chain, terms, vertices, probes, tallies, n_vertices, n_loops):
    """Add the loop estimators (module docstring) of the configuration the loop update just produced to
    ``tallies.acc`` (slots A_MZ2, A_MS2, A_MS4, A_CHIS, A_SQN).  ``n_vertices``: bond vertices in the list,
    ``n_loops``: the loops the update built (labels 0 .. n_loops - 1).  Scratch: ``tallies.loop_tally``
    (int64, count and length of loop b at 2 b and 2 b + 1), ``loop_site`` (int64, one per site),
    ``loop_sums`` (float64[sites, 1 + 2 D]) and, with multi-bond operators, ``loop_ends`` (uint8, at least
    n_vertices + 1: where the operators end, :func:`_mark_ends`).  Both ``loop_tally`` and ``loop_ends`` are
    all zero on entry and are left so."""
    links, first = vertices.links, vertices.first
    phase, cos_tab, sin_tab = probes.phase, probes.cos_tab, probes.sin_tab
    tally, site_loop, sums = tallies.loop_tally, tallies.loop_site, tallies.loop_sums
    acc = tallies.acc
    mu2, mu4 = loop_moments(kind)
    n = chain.counters[0]
    n_sites = first.shape[0]
    # slice 0: the loops through it, numbered 0 .. n_c - 1 in order of appearance (the number kept in
    # the length slot until the lengths start); Q2 and Q4 of the state at slice 0.  A site's first leg f is
    # read through the even leg of its pair (f & ~1), where every loop update leaves its mark.
    n_c = 0
    n_free = 0
    q2 = np.int64(0)
    q4 = 0.0
    for i in range(n_sites):
        f = first[i]
        if f < 0:
            c = n_c
            n_c += 1
            n_free += 1
            q2 += 1
            q4 += 1.0
        else:
            b = U(2 * loop_label(kind, links[U(f & ~1)]))
            cb = tally[b]
            if cb == 0:
                tally[b + U(1)] = n_c
                n_c += 1
            c = tally[b + U(1)]
            tally[b] = cb + 1
            q2 += 2 * cb + 1
            q4 += np.float64(4 * cb * cb * cb + 6 * cb * cb + 4 * cb + 1)  # (cb + 1)^4 - cb^4
        site_loop[i] = c
    n_dirs = cos_tab.shape[0]
    width = 1 + 2 * n_dirs
    for c in range(n_c):
        for x in range(width):
            sums[c, x] = 0.0
    for i in range(n_sites):  # cos_tab, sin_tab carry phi_i: phi_i^2 = 1 takes it out
        c = site_loop[i]
        ph = np.float64(phase[i])
        sums[c, 0] += ph
        for d in range(n_dirs):
            sums[c, 1 + 2 * d] += ph * cos_tab[d, i]
            sums[c, 2 + 2 * d] += ph * sin_tab[d, i]
    w2 = 0.0
    f2 = 0.0
    for c in range(n_c):
        w2 += sums[c, 0] * sums[c, 0]
        for x in range(1, width):
            f2 += sums[c, x] * sums[c, x]
    acc[A_MZ2] += mu2 * w2
    if n_dirs > 0:
        acc[A_SQN] += mu2 * f2 / (n_dirs * n_sites)
    cross = 3.0 * mu2 * mu2
    if n == 0:
        fq2 = np.float64(q2)
        acc[A_MS2] += mu2 * fq2
        acc[A_MS4] += cross * fq2 * fq2 + (mu4 - cross) * q4
        acc[A_CHIS] += terms.beta * mu2 * fq2
        return
    for i in range(n_sites):  # L_l = n n_l(0) - sum over its changes d at operator p of d p
        f = first[i]
        if f >= 0:
            b = U(2 * loop_label(kind, links[U(f & ~1)]))
            tally[b + U(1)] = n * tally[b]
    ends = tallies.loop_ends
    multi_bond = n_vertices != n  # some operator has several bond vertices: mark where operators end
    if multi_bond:
        _mark_ends(chain.ops, terms.bond_count, ends)
    sum_q2, sum_q2sq, sum_q4 = _vertex_sums(kind, links, tally, ends, n_vertices, n, q2, q4)
    if multi_bond:
        for v in range(n_vertices + 1):  # left zero for the next call
            ends[v] = 0
    sum_l2 = np.float64(n_free) * np.float64(n) * np.float64(n)
    for b in range(n_loops):
        ell = np.float64(tally[2 * b + 1])
        sum_l2 += ell * ell
        tally[2 * b] = 0
        tally[2 * b + 1] = 0
    fn = np.float64(n)
    acc[A_MS2] += mu2 * sum_q2 / fn
    acc[A_MS4] += (cross * sum_q2sq + (mu4 - cross) * sum_q4) / fn
    acc[A_CHIS] += terms.beta * mu2 * (sum_l2 + sum_q2) / (fn * (fn + 1.0))
