"""Profiles along x on strips open along x: the size of their accumulator block and the per-bin values.

For a model with ``site_column`` (:class:`qmc.models.CompiledModel`: open along x, periodic along the
other directions) the engine sums, per column of sites c = 0 .. C-1, the dimer correlations of the bonds
touching c, and the operators of every term (:mod:`qmc.engine.profiles`).  Per bin, with n_c the number
of sites of column c and beta the inverse temperature:

========================  ===================================================================================
``vbs_profile_x/<c>``     D_x(c) = (1/n_c) sum_{x-bonds b touching c} (1/2) (-1)^(x_b) <S^z_i S^z_j>: the
                          columnar x-dimer order parameter per site of column c, each bond shared equally by
                          the columns of its two sites; the mean over c is <D_x> of the whole lattice
``vbs_profile_y/<c>``     D_y(c) = (1/n_c) sum_{y-bonds b in column c} (-1)^(y_b) <S^z_i S^z_j>; the mean
                          over c is <D_y>
``energy_profile/<c>``    e(c) = (1/n_c) sum_t f_tc (E_t - <n_t>/beta): the energy per site of column c,
                          each term t sharing its energy E_t - <n_t>/beta (E_t its part of the constant)
                          among its 2k sites, f_tc the share of its sites in column c; sum_c n_c e(c) is
                          the total energy <H>
========================  ===================================================================================

``E_t = C_t const_g / sum_{t' in g} C_t'`` splits a group's constant over its terms in proportion to their
couplings: ``C_t / 4`` for a Heisenberg term (also a pinned one, :mod:`qmc.models.walls`), 0 for a
projector product.  A dimer (a singlet-like bond) has S^z_i S^z_j < 0, so a column of dimers at even x
gives D_x(c) < 0.  At an open edge a column has one x-bond only, half of whose (negative) correlation
then enters D_x(c) without the bond on the other side that cancels it in the bulk.
"""

from __future__ import annotations

import numpy as np

from qmc.engine.slots import PROFILE_DX, PROFILE_DY, PROFILE_TERMS
from qmc.models.compiled import CompiledModel

__all__ = ["PROFILE_PREFIXES", "profile_names", "profile_size", "profile_values"]

PROFILE_PREFIXES = ("vbs_profile_x/", "vbs_profile_y/", "energy_profile/")
"""Bin-name prefixes of the profile observables, followed by the column index."""


def profile_names(model: CompiledModel) -> list[str]:
    """Bin names of the profiles (empty for a model without profiles), x-profile first, column order."""
    cols = range(model.n_columns)
    return [f"{prefix}{c}" for prefix in PROFILE_PREFIXES for c in cols]


def profile_size(model: CompiledModel) -> tuple[int, int]:
    """(C, T): the columns and terms of the model's profile block, (0, 0) without profiles."""
    return (model.n_columns, model.n_terms) if model.n_columns else (0, 0)


def _term_shares(model: CompiledModel) -> np.ndarray:
    """float64[T, C]: f_tc, the share of term t's 2k sites that lie in column c."""
    start = np.asarray(model.term_start, dtype=np.int64)
    k = np.diff(start)
    bonds = np.asarray(model.bond_sites, dtype=np.int64)[np.asarray(model.term_bonds, dtype=np.int64)]
    term_of = np.repeat(np.arange(model.n_terms), k)
    column = np.asarray(model.site_column, dtype=np.int64)
    shares = np.zeros((model.n_terms, model.n_columns))
    for end in (0, 1):
        np.add.at(shares, (term_of, column[bonds[:, end]]), 1.0 / (2.0 * k[term_of]))
    return shares


def _term_constants(model: CompiledModel) -> np.ndarray:
    """float64[T], E_t: each term's share of its group's constant, in proportion to its coupling."""
    coupling = np.asarray(model.term_coupling, dtype=np.float64)
    group = np.asarray(model.term_group, dtype=np.int64)
    total = np.bincount(group, weights=coupling, minlength=len(model.group_names))
    const = np.asarray(model.group_constant, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(total[group] > 0, coupling * const[group] / total[group], 0.0)


def profile_values(model: CompiledModel, beta: float, block: np.ndarray) -> np.ndarray:
    """Per-bin profile values in :func:`profile_names` order from the step-averaged profile block
    (C slots D_x, C slots D_y, T term counts; :mod:`qmc.engine.profiles`), formulas in the module
    docstring."""
    n_cols, n_terms = profile_size(model)
    block = np.asarray(block, dtype=np.float64)
    dx = block[PROFILE_DX * n_cols:(PROFILE_DX + 1) * n_cols]
    dy = block[PROFILE_DY * n_cols:(PROFILE_DY + 1) * n_cols]
    counts = block[PROFILE_TERMS * n_cols:PROFILE_TERMS * n_cols + n_terms]
    sites = np.bincount(np.asarray(model.site_column, dtype=np.int64), minlength=n_cols).astype(np.float64)
    energy = (_term_constants(model) - counts / beta) @ _term_shares(model) / sites
    return np.concatenate([dx / sites, dy / sites, energy])
