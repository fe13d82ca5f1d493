"""Named slots of the kernels' float64 output and accumulator arrays (one layout, read by name everywhere).

Three arrays carry numbers out of the kernels; their slots are module constants, so that numba folds them
into the code and the kernels, :mod:`qmc.chain.observables` and the tests name the same slot.

``sweep_out`` (float64[SW_SIZE]), filled by one diagonal sweep (ms = 2 M_s, spins +-1):

- SW_N_OLD                 n, operators in the configuration measured in the sweep
- SW_SUM_MS, SW_SUM_MS2, SW_SUM_MS4    sum over the n propagated states of ms, ms^2, ms^4
- SW_MS_END                ms of the state at slice 0 (the only state when n = 0)
- SW_WINDING + a           net displacement of up spins along direction a (a < MAX_DIRS)

``et_out`` (float64[ET_SIZE]), filled by :func:`qmc.engine.equal_time.equal_time` (S^z units):

- ET_MZ2                   (sum_i S^z_i)^2 (only with the plain estimators; not written with the loop ones)
- ET_SQN                   S(Q + dq) averaged over directions (per site; likewise)
- ET_DX, ET_DY             columnar dimer order parameters D_x, D_y

``acc`` (float64[acc_size(G)]), summed over the measured steps of a bin by :func:`qmc.engine.steps.run_steps`
(whole lattice, S^z units, not yet divided by N; formulas in :mod:`qmc.engine.steps`):

- A_NOPS, A_NOPS2          n, n^2
- A_MZ2                    (sum_i S^z_i)^2
- A_MS2, A_MS4             time-averaged M_s^2, M_s^4
- A_CHIS                   Kubo-integrated staggered susceptibility (times N)
- A_SQN                    S(Q + dq)
- A_DX2, A_DY2, A_D4, A_COS4   D_x^2, D_y^2, (D_x^2 + D_y^2)^2, cos 4 theta
- A_W2 + a                 w_a^2 (a < MAX_DIRS)
- A_GROUP + g              n_g, operators of term group g (g < G)
- A_GROUP + G + x          the vertex kind's own slots (``acc_slots(G)`` of its module; none for projectors)
- profile_start(G, K) + .. profiles along x, last, only for models with C = ``n_columns`` > 0 columns
                           (:func:`qmc.engine.profiles.column_profiles`; K the kind's slots): C slots
                           PROFILE_DX and C slots PROFILE_DY (dimer order summed over the bonds touching
                           column c, each bond shared equally by its two sites' columns), then T slots n_t
                           (operators of each term t)

With the loop estimators (:mod:`qmc.engine.loop_estimators`) A_MZ2, A_MS2, A_MS4, A_CHIS and A_SQN hold
their loop forms: the same quantities in the same units, so the layout does not change.

The accumulator is part of the checkpoint (:meth:`qmc.chain.simulation.Simulation.state`): changing
``ACC_LAYOUT`` means raising the checkpoint layout version there.
"""

from __future__ import annotations

__all__ = [
    "MAX_DIRS",
    "SW_N_OLD", "SW_SUM_MS", "SW_SUM_MS2", "SW_SUM_MS4", "SW_MS_END", "SW_WINDING", "SW_SIZE",
    "ET_MZ2", "ET_SQN", "ET_DX", "ET_DY", "ET_SIZE",
    "A_NOPS", "A_NOPS2", "A_MZ2", "A_MS2", "A_MS4", "A_CHIS", "A_SQN",
    "A_DX2", "A_DY2", "A_D4", "A_COS4", "A_W2", "A_GROUP", "ACC_LAYOUT", "acc_size",
    "PROFILE_DX", "PROFILE_DY", "PROFILE_TERMS", "profile_start", "profile_length",
]

MAX_DIRS = 3
"""Winding directions the sweep and the accumulator have room for (lattices of dimension <= 3)."""

SW_N_OLD, SW_SUM_MS, SW_SUM_MS2, SW_SUM_MS4, SW_MS_END, SW_WINDING = 0, 1, 2, 3, 4, 5
SW_SIZE = SW_WINDING + MAX_DIRS

ET_MZ2, ET_SQN, ET_DX, ET_DY = 0, 1, 2, 3
ET_SIZE = 4

ACC_LAYOUT = ("n_ops", "n_ops_sq", "mz2", "ms2", "ms4", "chi_stag", "sq_shifted", "dx2", "dy2", "d4", "cos4",
              *(f"w2_{a}" for a in range(MAX_DIRS)))
"""Names of the accumulator slots before the group slots, in order: the one statement of the layout (the
``A_*`` constants are positions in it).  A test pins it to the checkpoint layout version."""

A_NOPS, A_NOPS2, A_MZ2 = (ACC_LAYOUT.index(x) for x in ("n_ops", "n_ops_sq", "mz2"))
A_MS2, A_MS4, A_CHIS, A_SQN = (ACC_LAYOUT.index(x) for x in ("ms2", "ms4", "chi_stag", "sq_shifted"))
A_DX2, A_DY2, A_D4, A_COS4 = (ACC_LAYOUT.index(x) for x in ("dx2", "dy2", "d4", "cos4"))
A_W2 = ACC_LAYOUT.index("w2_0")
A_GROUP = len(ACC_LAYOUT)


PROFILE_DX, PROFILE_DY, PROFILE_TERMS = 0, 1, 2
"""Offsets, in units of C slots, of the D_x and D_y rows and of the start of the T term counts."""


def profile_start(n_groups: int, kind_slots: int = 0) -> int:
    """First slot of the profile block (after the group slots and the kind's own slots)."""
    return A_GROUP + n_groups + kind_slots


def acc_size(n_groups: int, kind_slots: int = 0, n_columns: int = 0, n_terms: int = 0) -> int:
    """Length of the accumulator for a model with ``n_groups`` term groups, a vertex kind that adds
    ``kind_slots`` slots of its own and, when it measures profiles, ``n_columns`` columns and ``n_terms``
    terms (``n_columns`` = 0: no profiles, the layout of models without them is unchanged)."""
    return profile_start(n_groups, kind_slots) + profile_length(n_columns, n_terms)


def profile_length(n_columns: int, n_terms: int) -> int:
    """Slots of the profile block, the last block of the accumulator (0 without columns)."""
    return PROFILE_TERMS * n_columns + n_terms if n_columns else 0
