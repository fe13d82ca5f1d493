"""The diagonal update, fused with building the linked vertex list and the time-integrated estimators.

SSE with a fixed-length string of M slots and n operators samples

    W = beta^n (M - n)! / M!  prod_p  C_{t_p} / 2^{k_{t_p}}

for H = E_const - sum_t C_t prod_a P_{i_a j_a} (see :mod:`models.compiled`).  At an empty slot an operator
is inserted with probability min(1, beta W_tot / (M - n)) times [all its bonds antiparallel], the term
being drawn with probability w_t / W_tot (w_t = C_t / 2^{k_t}, alias table); a fully diagonal operator
is removed with probability min(1, (M - n + 1) / (beta W_tot)).  Off-diagonal operators stay and
propagate the spins.

One pass over the string does three things per slot:

1. applies the loop flips of the previous step to the operator (``vflip``),
2. measures the *old* configuration (the one the previous loop update produced; diagonal updates do not
   change the propagated states): the number of operators per term group, the staggered magnetisation
   after each operator (for the Kubo-integrated susceptibility and time-averaged moments) and the winding
   numbers (net displacement of up spins along each direction),
3. performs the diagonal update at that slot and appends the resulting operator's bond vertices to the
   linked vertex list (leg layout in :mod:`qmc.engine.vertices`).

Implementation notes (measured, see benchmarks/c_compare.py): the sweep is bound by data-dependent branches,
so the loop flips are applied without a branch (``op ^= vflip << a``) and the insertion test ORs the bond
checks instead of leaving early; the bond count is masked with ``& 3`` (k <= 3 is implied by the 3-bit
off-diagonal mask), which stops LLVM from vectorising the one-to-three-bond loops behind run-time checks.
A term's bond count, group, sites and bonds come from one row of :func:`qmc.engine.vertices.term_table`
rather than the chain term -> bond list -> bond -> sites.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from qmc.engine.rng import next_double

__all__ = ["diagonal_sweep", "SWEEP_OUT_SIZE"]

U = np.uint32  # unsigned indices: no negative-index wrap-around code in the hot loop

# layout of ``out`` filled by diagonal_sweep
SWEEP_OUT_SIZE = 8  # n_old, sum_ms, sum_ms2, sum_ms4, ms_end, w_0, w_1, w_2


@njit(cache=True, boundscheck=False)
def diagonal_sweep(
    ops, vflip, spins, links, first, last, n_ops,
    beta_wtot, alias_prob, alias_idx,
    table, bond_disp, phase,
    rng, group_counts, out,
):
    """One diagonal-update sweep; returns (n_new, n_vertices).  ``ms`` is 2 M_s (spins are +-1).

    ``table`` is :func:`qmc.engine.vertices.term_table` (int32[T, 4|8|16]: ``k + 4 group``, then
    ``(i, j, b)`` per bond)."""
    M = ops.shape[0]
    n_sites = spins.shape[0]
    n_terms = alias_prob.shape[0]
    n_dirs = bond_disp.shape[1]
    s0, s1, s2, s3 = rng[0], rng[1], rng[2], rng[3]

    ms = 0
    for i in range(n_sites):
        first[i] = -1
        last[i] = -1
        ms += phase[U(i)] * spins[i]
    for g in range(group_counts.shape[0]):
        group_counts[g] = 0
    w0 = 0.0
    w1 = 0.0
    w2 = 0.0

    n = n_ops
    n_old = 0
    sum_ms = 0.0
    sum_ms2 = 0.0
    sum_ms4 = 0.0
    v_old = 0
    v = 0
    for p in range(M):
        op = ops[p]
        t = 0
        k = 0
        if op >= 0:
            t = op >> 3
            meta = table[U(t), 0]
            k = meta & 3  # k <= 3: tells LLVM the bond loops are short
            for a in range(k):  # branch-free: a loop flips a vertex with probability 1/2
                op ^= np.int32(vflip[U(v_old + a)]) << a
                vflip[U(v_old + a)] = 0
            v_old += k
            n_old += 1
            group_counts[U(meta >> 2)] += 1
            if (op & 7) != 0:
                ops[p] = op
                for a in range(k):
                    if (op >> a) & 1:
                        i = table[U(t), 1 + 3 * a]
                        j = table[U(t), 2 + 3 * a]
                        b = table[U(t), 3 + 3 * a]
                        si = spins[U(i)]
                        if n_dirs > 0:
                            w0 += si * bond_disp[U(b), 0]
                            if n_dirs > 1:
                                w1 += si * bond_disp[U(b), 1]
                                if n_dirs > 2:
                                    w2 += si * bond_disp[U(b), 2]
                        ms -= 2 * phase[U(i)] * si + 2 * phase[U(j)] * spins[U(j)]
                        spins[U(i)] = -si
                        spins[U(j)] = -spins[U(j)]
                fm = float(ms)
                sum_ms += fm
                sum_ms2 += fm * fm
                sum_ms4 += fm * fm * fm * fm
            else:
                fm = float(ms)
                sum_ms += fm
                sum_ms2 += fm * fm
                sum_ms4 += fm * fm * fm * fm
                u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
                if u * beta_wtot < M - n + 1:
                    ops[p] = -1
                    n -= 1
                    continue
                ops[p] = op
        else:
            u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
            if u * (M - n) >= beta_wtot:
                continue
            u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
            r = u * n_terms
            t = int(r)
            if r - t >= alias_prob[U(t)]:
                t = alias_idx[U(t)]
            k = table[U(t), 0] & 3
            blocked = False
            for a in range(k):  # no early exit: one data-dependent branch per attempt, not one per bond
                blocked |= spins[U(table[U(t), 1 + 3 * a])] == spins[U(table[U(t), 2 + 3 * a])]
            if blocked:
                continue
            ops[p] = t << 3
            n += 1
        # append the bond vertices of the operator now at slot p (term t, k bonds)
        for a in range(k):
            i = table[U(t), 1 + 3 * a]
            j = table[U(t), 2 + 3 * a]
            leg = 4 * v
            prev = last[U(i)]
            if prev >= 0:
                links[U(prev)] = leg
                links[U(leg)] = prev
            else:
                first[U(i)] = leg
            last[U(i)] = leg + 2
            prev = last[U(j)]
            if prev >= 0:
                links[U(prev)] = leg + 1
                links[U(leg + 1)] = prev
            else:
                first[U(j)] = leg + 1
            last[U(j)] = leg + 3
            v += 1

    for i in range(n_sites):
        f = first[i]
        if f >= 0:
            lst = last[i]
            links[U(f)] = lst
            links[U(lst)] = f

    rng[0] = s0
    rng[1] = s1
    rng[2] = s2
    rng[3] = s3
    out[0] = n_old
    out[1] = sum_ms
    out[2] = sum_ms2
    out[3] = sum_ms4
    out[4] = ms
    out[5] = w0
    out[6] = w1
    out[7] = w2
    return n, v
