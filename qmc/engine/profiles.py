"""Profiles along x on strips open along x: dimer order and operator counts per column of sites.

Measured only for models with ``site_column`` (:class:`qmc.models.CompiledModel`; S = 1/2 models of the
projector kind, whose spins are +-1), once per measured step, into the profile block at the end of the
accumulator (:func:`qmc.engine.slots.profile_start`, C columns, T terms):

- C slots from PROFILE_DX:  for column c, the sum over the x-bonds b = (i, j) touching column c of
  (1/2) (-1)^(x_b) S^z_i S^z_j, each bond shared equally by the columns of its two sites (x_b the column of
  its first site, the phase of the dimer pattern); the sum over c is N D_x
- C slots from PROFILE_DY:  the same for the y-bonds, which lie inside one column: sum of
  (-1)^(y_b) S^z_i S^z_j over the y-bonds of column c; the sum over c is N D_y
- T slots from PROFILE_TERMS: n_t, the operators of term t in the string (the per-column energies are
  formed from them once per bin, :mod:`qmc.chain.profiles`)

The equal-time rows use the spins at slice 0 after the step's loop update; the term counts are those of
the string after the step's updates (the loop update changes no term index).  Cost per measured step:
O(N) for the dimer rows and one pass over the string with one increment per operator, paid only by
models that measure profiles.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from qmc.engine.slots import PROFILE_DX, PROFILE_TERMS
from qmc.engine.vertices import OP_TERM_SHIFT

__all__ = ["column_profiles"]

U = np.uint32  # unsigned indices: no negative-index wrap-around code


@njit(cache=True, boundscheck=False)
def column_profiles(ops, spins, probes, acc, start, n_cols):
    """Add this step's profile sums (module docstring) to the block of ``acc`` that begins at ``start``."""
    col = probes.site_column
    vbs_bonds, vbs_dir, vbs_phase = probes.vbs_bonds, probes.vbs_dir, probes.vbs_phase
    for b in range(vbs_bonds.shape[0]):
        i = vbs_bonds[b, 0]
        j = vbs_bonds[b, 1]
        half = 0.125 * vbs_phase[b] * spins[U(i)] * spins[U(j)]  # (1/2) phase S^z_i S^z_j, S^z = spin/2
        row = start + (PROFILE_DX + vbs_dir[b]) * n_cols
        acc[U(row + col[U(i)])] += half
        acc[U(row + col[U(j)])] += half
    base = start + PROFILE_TERMS * n_cols
    for p in range(ops.shape[0]):
        op = ops[p]
        if op >= 0:
            acc[U(base + (op >> OP_TERM_SHIFT))] += 1.0
