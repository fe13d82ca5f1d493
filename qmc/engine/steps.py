"""Monte Carlo steps and the per-step accumulation of raw estimator sums.

One Monte Carlo step = one diagonal-update sweep over the operator string (:mod:`qmc.engine.diagonal`)
+ one full loop decomposition (:mod:`qmc.engine.loops`).  When measuring, each step adds to ``acc``
(indices ``A_*`` below; all in S^z units, whole lattice, not yet divided by N):

- A_NOPS, A_NOPS2      n, n^2 of the configuration measured in the sweep
- A_MZ2                (sum_i S^z_i)^2
- A_MS2, A_MS4         time averages (1/n) sum_p M_s(p)^2, (1/n) sum_p M_s(p)^4 over the n propagated states
                       (M_s(0)^2, M_s(0)^4 when n = 0)
- A_CHIS               beta [ (sum_p M_s(p))^2 + sum_p M_s(p)^2 ] / (n (n + 1))  (beta M_s^2 when n = 0):
                       the SSE estimator of int_0^beta <M_s(tau) M_s(0)> dtau (common practice, no source)
- A_SQN                S(Q + dq) averaged over directions (already per site)
- A_DX2, A_DY2, A_D4, A_COS4   D_x^2, D_y^2, (D_x^2 + D_y^2)^2, cos 4 theta
- A_W2 + a             w_a^2, the squared net up-spin displacement along direction a
- A_GROUP + g          n_g, the number of operators of term group g
"""

from __future__ import annotations

from numba import njit

from qmc.engine.diagonal import diagonal_sweep
from qmc.engine.equal_time import equal_time
from qmc.engine.loops import loop_update

__all__ = [
    "run_steps", "acc_size",
    "A_NOPS", "A_NOPS2", "A_MZ2", "A_MS2", "A_MS4", "A_CHIS", "A_SQN",
    "A_DX2", "A_DY2", "A_D4", "A_COS4", "A_W2", "A_GROUP",
]

A_NOPS, A_NOPS2, A_MZ2, A_MS2, A_MS4, A_CHIS, A_SQN = 0, 1, 2, 3, 4, 5, 6
A_DX2, A_DY2, A_D4, A_COS4 = 7, 8, 9, 10
A_W2 = 11  # three slots
A_GROUP = 14


def acc_size(n_groups: int) -> int:
    """Length of the accumulator for a model with ``n_groups`` term groups."""
    return A_GROUP + n_groups


@njit(cache=True, boundscheck=False)
def run_steps(
    n_steps, measure, stop_when_full,
    ops, vflip, spins, links, first, last, counters,
    beta, beta_wtot, alias_prob, alias_idx,
    table, bond_disp, phase,
    cos_tab, sin_tab, vbs_bonds, vbs_dir, vbs_phase, hist, hist_range,
    rng, acc, group_counts, sweep_out, et_out,
):
    """Run up to ``n_steps`` Monte Carlo steps; returns the number done.  ``table`` is
    :func:`qmc.engine.vertices.term_table`.

    ``counters[0]`` holds n (operators in the string).  ``group_counts`` (int64[max(G, 1)]), ``sweep_out``
    (float64[SWEEP_OUT_SIZE]) and ``et_out`` (float64[4]) are scratch arrays owned by the caller: allocating
    them here made the inlined sweep about 20% slower (measured).  With ``stop_when_full`` the run stops after
    a step that leaves fewer than n/3 empty slots, so that the caller can grow the cutoff (warm-up only).
    """
    n_groups = acc.shape[0] - A_GROUP
    n_dirs = bond_disp.shape[1]
    M = ops.shape[0]
    for step in range(n_steps):
        n, n_vert = diagonal_sweep(
            ops, vflip, spins, links, first, last, counters[0],
            beta_wtot, alias_prob, alias_idx,
            table, bond_disp, phase,
            rng, group_counts, sweep_out,
        )
        counters[0] = n
        loop_update(links, vflip, n_vert, spins, first, rng)
        if measure:
            n_old = sweep_out[0]
            acc[A_NOPS] += n_old
            acc[A_NOPS2] += n_old * n_old
            for g in range(n_groups):
                acc[A_GROUP + g] += group_counts[g]
            if n_old > 0:
                m1 = 0.5 * sweep_out[1]
                m2 = 0.25 * sweep_out[2]
                acc[A_MS2] += m2 / n_old
                acc[A_MS4] += 0.0625 * sweep_out[3] / n_old
                acc[A_CHIS] += beta * (m1 * m1 + m2) / (n_old * (n_old + 1.0))
            else:
                m = 0.5 * sweep_out[4]
                acc[A_MS2] += m * m
                acc[A_MS4] += m * m * m * m
                acc[A_CHIS] += beta * m * m
            for d in range(n_dirs):
                acc[A_W2 + d] += sweep_out[5 + d] * sweep_out[5 + d]
            equal_time(spins, cos_tab, sin_tab, vbs_bonds, vbs_dir, vbs_phase, hist, hist_range, et_out)
            acc[A_MZ2] += et_out[0]
            acc[A_SQN] += et_out[1]
            dx2 = et_out[2] * et_out[2]
            dy2 = et_out[3] * et_out[3]
            d2 = dx2 + dy2
            acc[A_DX2] += dx2
            acc[A_DY2] += dy2
            acc[A_D4] += d2 * d2
            if d2 > 0.0:
                acc[A_COS4] += (dx2 * dx2 - 6.0 * dx2 * dy2 + dy2 * dy2) / (d2 * d2)
        if stop_when_full and 3 * (M - n) < n:
            return step + 1
    return n_steps
