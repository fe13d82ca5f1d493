"""The diagonal update, fused with building the linked vertex list and the time-integrated estimators.

SSE with a fixed-length string of M slots and n operators samples

    W = beta^n (M - n)! / M!  prod_p  C_{t_p} / 2^{k_{t_p}}

for H = E_const - sum_t C_t prod_a P_{i_a j_a} (see :mod:`models.compiled`).  At an empty slot an operator
is proposed with probability min(1, beta W_tot / (M - n)), the term being drawn with probability
w_t / W_tot (w_t = C_t / 2^{k_t}; :mod:`qmc.engine.term_draw`), and accepted as its vertex kind says
(:func:`qmc.engine.kinds.insertion_allowed`; singlet projectors: when all its bonds are antiparallel); a
fully diagonal operator is removed with probability min(1, (M - n + 1) / (beta W_tot)).  Off-diagonal
operators stay and propagate the state (hook ``hop``).

One pass over the string does three things per slot:

1. applies the loop update's pending changes to the operator (hook ``apply_changes``: the projector kind
   xors the flips in ``vflip`` into the off-diagonal bits),
2. measures the *old* configuration (the one the previous loop update produced; diagonal updates do not
   change the propagated states): the number of operators per term group, the staggered magnetisation
   after each operator (for the Kubo-integrated susceptibility and time-averaged moments) and the winding
   numbers (net displacement of up spins along each direction),
3. performs the diagonal update at that slot and appends the resulting operator's bond vertices to the
   linked vertex list (leg layout in :mod:`qmc.engine.vertices`).

Implementation notes (measured, see benchmarks/c_compare.py): the sweep is bound by data-dependent branches,
so the loop flips are applied without a branch (``op ^= vflip << a``), an off-diagonal operator propagates
through all its bonds with the off-diagonal bit as a factor (hook ``hop_masked``), the term draw reads
only per-group constants when the groups are uniform (:mod:`qmc.engine.term_draw`), and the insertion
test ORs the bond checks instead of leaving early; the bond count is masked with ``& 3`` (k <= 3 is
implied by the 3-bit off-diagonal mask), which stops LLVM from vectorising the one-to-three-bond loops
behind run-time checks.  The old string's operator count is the n the sweep starts from rather than a
counter in the loop (4% fewer instructions per sweep on the square case, 3% on J-Q2, counted with
callgrind; about 2% less time on the square case, J-Q2 within noise).
A term's bond count, group, sites and bonds' displacement classes come from one row of
:func:`qmc.engine.vertices.term_table` rather than the chain term -> bond list -> bond -> sites; a bond's
displacement is read from the few rows of ``probes.disp_classes`` rather than from a row per bond (27% /
36% fewer L1 read misses per slot on the square / J-Q2 case, counted with benchmarks/instruction_counts.py;
the same instructions and the same bits).  The records' arrays are copied into locals once
per sweep, so that the hot loop indexes plain arrays.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from qmc.engine.kinds import apply_changes, hop, hop_masked, insertion_allowed, site_value, vertex_added
from qmc.engine.rng import next_double
from qmc.engine.slots import (
    SW_MS_END,
    SW_N_OLD,
    SW_SUM_MS,
    SW_SUM_MS2,
    SW_SUM_MS4,
    SW_WINDING,
)
from qmc.engine.term_draw import draw_term
from qmc.engine.vertices import (
    EMPTY,
    OP_OFF_MASK,
    OP_TERM_SHIFT,
    TT_BOND,
    TT_BOND_WIDTH,
    TT_META,
    meta_bonds,
    meta_group,
)

__all__ = ["diagonal_sweep", "fold_pending"]

U = np.uint32  # unsigned indices: no negative-index wrap-around code in the hot loop


@njit(cache=True, boundscheck=False)
def diagonal_sweep(chain, terms, kind, vertices, probes, tallies):
    """One diagonal-update sweep; returns (n_new, n_vertices).  Fills ``tallies.sweep_out`` (slots ``SW_*``)
    and ``tallies.group_counts``; ``ms`` is 2 M_s (spins are +-1).  Records: :mod:`qmc.engine.records`."""
    ops, spins, rng, above = chain.ops, chain.spins, chain.rng, chain.above
    links, vflip, first, last = vertices.links, vertices.vflip, vertices.first, vertices.last
    table, alias_prob, alias_idx, beta_wtot = terms.table, terms.alias_prob, terms.alias_idx, terms.beta_wtot
    edge, scale, g_first, g_last = terms.group_edge, terms.group_scale, terms.group_first, terms.group_last
    disp, phase = probes.disp_classes, probes.phase
    group_counts, out = tallies.group_counts, tallies.sweep_out
    M = ops.shape[0]
    n_sites = spins.shape[0]
    n_terms = alias_prob.shape[0]
    n_dirs = disp.shape[1]
    s0, s1, s2, s3 = rng[0], rng[1], rng[2], rng[3]

    ms = 0
    for i in range(n_sites):
        first[i] = -1
        last[i] = -1
        ms += phase[U(i)] * site_value(kind, spins, i)
    for g in range(group_counts.shape[0]):
        group_counts[g] = 0
    w0 = 0.0
    w1 = 0.0
    w2 = 0.0

    n = chain.counters[0]
    n_old = n  # the operators of the old string (one counter less in the loop: measured, see module notes)
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
            t = op >> OP_TERM_SHIFT
            meta = table[U(t), TT_META]
            k = meta_bonds(meta)
            op = apply_changes(kind, op, p, t, k, table, spins, above, vflip, v_old)
            v_old += k
            group_counts[U(meta_group(meta))] += 1
            if (op & OP_OFF_MASK) != 0:
                ops[p] = op
                # propagate through every bond: off-diagonal ones (f = 1) flip their pair, diagonal ones
                # (f = 0) change nothing and add zero; no branch on the bond pattern of a multi-bond
                # operator, which the predictor cannot guess
                for a in range(k):
                    col = TT_BOND + TT_BOND_WIDTH * a
                    i = table[U(t), col]
                    j = table[U(t), col + 1]
                    c = table[U(t), col + 2]
                    si, d_ms = hop_masked(kind, spins, phase, above, p, a, i, j, (op >> a) & 1)
                    if n_dirs > 0:
                        w0 += si * disp[U(c), 0]
                        if n_dirs > 1:
                            w1 += si * disp[U(c), 1]
                            if n_dirs > 2:
                                w2 += si * disp[U(c), 2]
                    ms += d_ms
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
                    ops[p] = EMPTY
                    n -= 1
                    continue
                ops[p] = op
        else:
            u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
            if u * (M - n) >= beta_wtot:
                continue
            u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
            t = draw_term(u, n_terms, alias_prob, alias_idx, edge, scale, g_first, g_last)
            k = meta_bonds(table[U(t), TT_META])
            allowed, s0, s1, s2, s3 = insertion_allowed(kind, table, t, k, spins, s0, s1, s2, s3)
            if not allowed:
                continue
            ops[p] = t << OP_TERM_SHIFT
            n += 1
        # append the bond vertices of the operator now at slot p (term t, k bonds)
        for a in range(k):
            col = TT_BOND + TT_BOND_WIDTH * a
            i = table[U(t), col]
            j = table[U(t), col + 1]
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
            vertex_added(kind, vertices, v, t, a, ops[p], spins[U(i)], spins[U(j)])
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
    out[SW_N_OLD] = n_old
    out[SW_SUM_MS] = sum_ms
    out[SW_SUM_MS2] = sum_ms2
    out[SW_SUM_MS4] = sum_ms4
    out[SW_MS_END] = ms
    out[SW_WINDING] = w0
    out[SW_WINDING + 1] = w1
    out[SW_WINDING + 2] = w2
    return n, v


@njit(cache=True, boundscheck=False)
def fold_pending(chain, terms, kind, vertices, probes):
    """Apply the loop update's pending changes to the operator string (and ``chain.above``) as the next
    sweep would, without measuring or updating: the chain is unchanged in law and in bits.  The state at
    slice 0 is left as it is (the propagation runs on a copy)."""
    ops, above, table, vflip, phase = chain.ops, chain.above, terms.table, vertices.vflip, probes.phase
    spins = chain.spins.copy()
    v = 0
    for p in range(ops.shape[0]):
        op = ops[p]
        if op < 0:
            continue
        t = op >> OP_TERM_SHIFT
        k = meta_bonds(table[U(t), TT_META])
        op = apply_changes(kind, op, p, t, k, table, spins, above, vflip, v)
        ops[p] = op
        v += k
        for a in range(k):
            if (op >> a) & 1:
                col = TT_BOND + TT_BOND_WIDTH * a
                hop(kind, spins, phase, above, p, a, table[U(t), col], table[U(t), col + 1])
    return v
