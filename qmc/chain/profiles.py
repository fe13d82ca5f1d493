"""Profiles along x on strips open along x: the kernel's tables and the per-bin values.

For a model with ``site_column`` (:class:`qmc.models.CompiledModel`: open along x, periodic along the
other directions) the engine sums, per column of sites c = 0 .. C-1 (:mod:`qmc.engine.profiles`), the
dimer correlations of the bonds touching c and the operators of the terms touching c.  Per bin, with
n_c the number of sites of column c and beta the inverse temperature:

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
gives D_x(c) < 0.
"""

from __future__ import annotations

import numpy as np

from qmc.engine.slots import PROFILE_DX, PROFILE_DY, PROFILE_OPS
from qmc.models.compiled import CompiledModel

__all__ = ["PROFILE_PREFIXES", "profile_names", "profile_probes", "profile_values"]

PROFILE_PREFIXES = ("vbs_profile_x/", "vbs_profile_y/", "energy_profile/")
"""Bin-name prefixes of the profile observables, followed by the column index."""


def profile_names(model: CompiledModel) -> list[str]:
    """Bin names of the profiles (empty for a model without profiles), x-profile first, column order."""
    cols = range(model.n_columns)
    return [f"{prefix}{c}" for prefix in PROFILE_PREFIXES for c in cols]


def _term_sites(model: CompiledModel) -> tuple[np.ndarray, np.ndarray]:
    """(sites int64[T, 2 kmax] padded with -1, k int64[T]) of every term."""
    start = np.asarray(model.term_start, dtype=np.int64)
    k = np.diff(start)
    kmax = int(k.max()) if k.size else 1
    sites = np.full((model.n_terms, 2 * kmax), -1, dtype=np.int64)
    bonds = np.asarray(model.bond_sites, dtype=np.int64)[np.asarray(model.term_bonds, dtype=np.int64)]
    term_of = np.repeat(np.arange(model.n_terms), k)
    slot = np.arange(bonds.shape[0]) - start[term_of]
    sites[term_of, 2 * slot] = bonds[:, 0]
    sites[term_of, 2 * slot + 1] = bonds[:, 1]
    return sites, k


def profile_probes(model: CompiledModel) -> dict[str, np.ndarray]:
    """``site_column``, ``term_columns``, ``term_column_weight`` for the kernel's Probes record (empty
    arrays for a model without profiles): site s of term t lies in column ``term_columns[t, s]`` and carries
    ``1/(2 k_t)`` of the term (padding entries carry weight 0)."""
    if model.site_column is None:
        return {"site_column": np.zeros(0, np.int32), "term_columns": np.zeros((0, 1), np.int32),
                "term_column_weight": np.zeros((0, 1), np.float64)}
    column = np.ascontiguousarray(model.site_column, dtype=np.int32)
    sites, k = _term_sites(model)
    present = sites >= 0
    columns = np.where(present, column[np.where(present, sites, 0)], 0).astype(np.int32)
    weight = np.where(present, 1.0 / (2.0 * k[:, None]), 0.0)
    return {"site_column": column, "term_columns": np.ascontiguousarray(columns),
            "term_column_weight": np.ascontiguousarray(weight, dtype=np.float64)}


def _column_constants(model: CompiledModel) -> np.ndarray:
    """float64[C], sum_t f_tc E_t: each term's share of its group's constant, split over its sites."""
    coupling = np.asarray(model.term_coupling, dtype=np.float64)
    group = np.asarray(model.term_group, dtype=np.int64)
    total = np.bincount(group, weights=coupling, minlength=len(model.group_names))
    const = np.asarray(model.group_constant, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        per_term = np.where(total[group] > 0, coupling * const[group] / total[group], 0.0)
    probes = profile_probes(model)
    return np.bincount(probes["term_columns"].ravel(),
                       weights=(probes["term_column_weight"] * per_term[:, None]).ravel(),
                       minlength=model.n_columns)


def profile_values(model: CompiledModel, beta: float, block: np.ndarray) -> np.ndarray:
    """Per-bin profile values in :func:`profile_names` order from the step-averaged profile block
    (float64[3 C], rows :data:`qmc.engine.slots.PROFILE_DX`... ; see the module docstring)."""
    n_cols = model.n_columns
    rows = np.asarray(block, dtype=np.float64).reshape(3, n_cols)
    sites = np.bincount(np.asarray(model.site_column, dtype=np.int64), minlength=n_cols).astype(np.float64)
    energy = (_column_constants(model) - rows[PROFILE_OPS] / beta) / sites
    return np.concatenate([rows[PROFILE_DX] / sites, rows[PROFILE_DY] / sites, energy])
