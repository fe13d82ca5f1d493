"""Monte Carlo steps and the per-step accumulation of raw estimator sums.

One Monte Carlo step = one diagonal-update sweep over the operator string (:mod:`qmc.engine.diagonal`)
+ the off-diagonal update of the model's vertex kind (:func:`qmc.engine.kinds.loop_update`).  When
measuring, each step adds to ``tallies.acc`` (slots ``A_*`` of :mod:`qmc.engine.slots`; S^z units, whole
lattice, not yet divided by N):

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
- profile block        per-column sums on strips open along x (:mod:`qmc.engine.profiles`), only when the
                       model measures profiles (``probes.site_column`` not empty)

With ``improved`` (kinds whose loops are updated independently,
:func:`qmc.engine.kinds.loop_estimators_apply`) A_MZ2, A_MS2, A_MS4, A_CHIS and A_SQN hold instead the
loop estimators of the same quantities, averaged over the loop update's choices
(:mod:`qmc.engine.loop_estimators`); the chain itself is the same.

Which machine code runs (measured, see CHANGELOG): numba compiles a kernel that :func:`run_steps` calls
twice over, once on its own and once more as a copy inside run_steps' module, optimised again with it;
the two compilations of the diagonal sweep differ in register allocation, and the square-lattice step with
the copy is 3-4% slower.  When everything is compiled in the process, the kernels' own compilations are
loaded first and the copies are never called (the JIT linker keeps the first definition of a symbol); when
run_steps comes from numba's cache, the kernels' own compilations are not loaded and the copies would run.
:func:`bound_run_steps` therefore loads the sweep on its own first, so a cached start runs the code a fresh
one does (the loop estimators' copy measured as fast as their own compilation; the loop update is the
kind's hook, compiled into run_steps from its Python source, and calling its own compilation instead
measured no faster).
"""

from __future__ import annotations

from collections.abc import Callable

from numba import njit, typeof

from qmc.engine.diagonal import diagonal_sweep
from qmc.engine.equal_time import equal_time
from qmc.engine.kinds import loop_update
from qmc.engine.kinds import measure as kind_measure
from qmc.engine.loop_estimators import loop_estimators
from qmc.engine.profiles import column_profiles
from qmc.engine.slots import (
    A_CHIS,
    A_COS4,
    A_D4,
    A_DX2,
    A_DY2,
    A_GROUP,
    A_MS2,
    A_MS4,
    A_MZ2,
    A_NOPS,
    A_NOPS2,
    A_SQN,
    A_W2,
    ET_DX,
    ET_DY,
    ET_MZ2,
    ET_SQN,
    PROFILE_TERMS,
    SW_MS_END,
    SW_N_OLD,
    SW_SUM_MS,
    SW_SUM_MS2,
    SW_SUM_MS4,
    SW_WINDING,
)

__all__ = ["run_steps", "bound_run_steps"]


@njit(cache=True, boundscheck=False)
def run_steps(n_steps, measure, stop_when_full, improved, chain, terms, kind, vertices, probes, tallies):
    """Run up to ``n_steps`` Monte Carlo steps; returns the number done.  Records: :mod:`qmc.engine.records`;
    ``kind`` is the record of the model's vertex kind (:func:`qmc.engine.kinds.kind_record`).  ``improved``
    selects the loop estimators (module docstring; only for kinds to which they apply).

    ``chain.counters[0]`` holds n (operators in the string).  The scratch arrays of ``tallies`` are owned
    by the caller: allocating them here made the inlined sweep about 20% slower (measured).  With
    ``stop_when_full`` the run stops after a step that leaves fewer than n/3 empty slots, so that the
    caller can grow the cutoff (warm-up only).
    """
    acc, group_counts = tallies.acc, tallies.group_counts
    sweep_out, et_out = tallies.sweep_out, tallies.et_out
    spins, counters = chain.spins, chain.counters
    beta = terms.beta
    n_groups = group_counts.shape[0]  # the kind may add slots after the groups (qmc.engine.slots)
    n_cols = 0  # profiles along x: the last block of the accumulator (qmc.engine.slots)
    for i in range(probes.site_column.shape[0]):
        n_cols = max(n_cols, probes.site_column[i] + 1)
    profile_at = acc.shape[0] - PROFILE_TERMS * n_cols - terms.table.shape[0]
    n_dirs = probes.disp_classes.shape[1]
    M = chain.ops.shape[0]
    for step in range(n_steps):
        n, n_vert = diagonal_sweep(chain, terms, kind, vertices, probes, tallies)
        counters[0] = n
        n_loops = loop_update(kind, chain, vertices, n_vert)
        if measure:
            n_old = sweep_out[SW_N_OLD]
            acc[A_NOPS] += n_old
            acc[A_NOPS2] += n_old * n_old
            for g in range(n_groups):
                acc[A_GROUP + g] += group_counts[g]
            if not improved and n_old > 0:
                m1 = 0.5 * sweep_out[SW_SUM_MS]
                m2 = 0.25 * sweep_out[SW_SUM_MS2]
                acc[A_MS2] += m2 / n_old
                acc[A_MS4] += 0.0625 * sweep_out[SW_SUM_MS4] / n_old
                acc[A_CHIS] += beta * (m1 * m1 + m2) / (n_old * (n_old + 1.0))
            elif not improved:
                m = 0.5 * sweep_out[SW_MS_END]
                acc[A_MS2] += m * m
                acc[A_MS4] += m * m * m * m
                acc[A_CHIS] += beta * m * m
            for d in range(n_dirs):
                w = sweep_out[SW_WINDING + d]
                acc[A_W2 + d] += w * w
            kind_measure(kind, chain, tallies)
            equal_time(kind, spins, probes, tallies, not improved)  # improved: M_z^2, S(Q+dq) from the loops
            if improved:
                loop_estimators(kind, chain, terms, vertices, probes, tallies, n_vert, n_loops)
            else:
                acc[A_MZ2] += et_out[ET_MZ2]
                acc[A_SQN] += et_out[ET_SQN]
            dx2 = et_out[ET_DX] * et_out[ET_DX]
            dy2 = et_out[ET_DY] * et_out[ET_DY]
            d2 = dx2 + dy2
            acc[A_DX2] += dx2
            acc[A_DY2] += dy2
            acc[A_D4] += d2 * d2
            if d2 > 0.0:
                acc[A_COS4] += (dx2 * dx2 - 6.0 * dx2 * dy2 + dy2 * dy2) / (d2 * d2)
            if n_cols > 0:
                column_profiles(chain.ops, spins, probes, acc, profile_at, n_cols)
        if stop_when_full and 3 * (M - n) < n:
            return step + 1
    return n_steps


def bound_run_steps(chain, terms, kind, vertices, probes, tallies) -> Callable[..., int]:
    """:func:`run_steps` compiled (or loaded from numba's cache) for the types of these records, callable
    with the same arguments without numba's per-call type dispatch (about 8 us per call for the six
    records, measured; 2-4 us remain).  Valid for any records of the same types: build them with
    :func:`qmc.engine.records.build`, which fixes every field's dtype, dimensions and layout.

    The diagonal sweep is loaded first, on its own, so that the step driver calls that compilation of it
    and not the copy inside its own cached machine code (see the module notes)."""
    types = tuple(typeof(r) for r in (chain, terms, kind, vertices, probes, tallies))
    diagonal_sweep.compile(types)
    return run_steps.compile((typeof(0), typeof(True), typeof(True), typeof(True), *types))
