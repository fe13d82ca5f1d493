"""Per-bin observables from the raw sums of :mod:`qmc.engine.steps` (names are the project's contract).

The formulas below are written for S = 1/2 spins.  For N colours per site (the SU(N) colour kind) every name
is kept and the same formulas hold with S^z_i replaced through the staggered colour order,
phi_i S^z_i -> delta(c_i, 0) - 1/N (so M_s/N -> m_s = N^(-1) sum_i (delta(c_i, 0) - 1/N)), the uniform
sum_i S^z_i -> the conserved colour-0 charge sum_i phi_i (delta(c_i, 0) - 1/N), the up-spin winding -> the
winding of colour 0, and S^z_i S^z_j -> -B_ij / 2 with B_ij = delta(c_i, c_j) - 1/N; at N = 2 each of these
is the S = 1/2 quantity itself (derivation in :mod:`qmc.engine.colour`).

N is the number of sites, beta the inverse temperature, H = E_const - sum_t C_t prod P as in
:mod:`models.compiled`; a bin holds averages over ``steps_per_bin`` Monte Carlo steps.

=================  ===========================================================================================
``energy``         <H>/N = (E_const - <n>/beta)/N  (H exactly as written, constants included)
``n_ops``          <n>, expansion order (raw moment)
``n_ops_sq``       <n^2> (raw moment); specific heat per site C/N = (<n^2> - <n>^2 - <n>)/N by jackknife
``chi_uniform``    beta <(sum_i S^z_i)^2>/N (models without directed loops: <sum_i S^z_i> = 0)
``magnetization``  <M>/N, M = sum_i S^z_i (models with directed loops: xxz or field terms)
``m_uniform2``     <(M/N)^2> (directed loops); chi_uniform = beta N (m_uniform2 - magnetization^2), jackknife
``m_stag2``        <(M_s/N)^2>, M_s = sum_i phi_i S^z_i, time-averaged over the propagated states
``m_stag4``        <(M_s/N)^4>; binder_stag = m_stag4 / m_stag2^2 by jackknife
``chi_stag``       (1/N) int_0^beta <M_s(tau) M_s(0)> dtau
``s_q``            S(Q) = (1/N) <M_s^2> = N m_stag2 (static structure factor at the ordering wavevector)
``s_q_shifted``    S(Q + 2 pi/L_a e_a): the structure factor at the ordering wavevector shifted by the
                   smallest wavevector of the lattice, averaged over the winding directions a; gives the
                   second-moment correlation length xi = (L/(2 pi)) sqrt(S(Q)/S(Q+dq) - 1) by jackknife
``stiffness/<a>``  rho_a = <w_a^2>/(beta N), w_a the net number of up-spin hops along +a minus -a
                   (winding estimator: Pollock and Ceperley, Phys. Rev. B 36, 8343 (1987)); it equals
                   (1/N) d^2F/dphi^2 for a twist phi on every bond along a
``stiffness``      average of rho_a over the lattice's directions (all equivalent for the lattices provided)
``vbs_x2``         <D_x^2>, D_x = (1/N) sum_r (-1)^x S^z_r S^z_{r+x}; likewise ``vbs_y2``
``vbs4``           <(D_x^2 + D_y^2)^2>; VBS Binder ratio vbs4 / (vbs_x2 + vbs_y2)^2
``vbs_cos4``       <cos 4 theta> of (D_x, D_y) = |D| (cos theta, sin theta)
``term_energy/g``  contribution of term group g to <H>/N: (const_g - <n_g>/beta + sum_i f_{g,i} <S^z_i>)/N
                   (f: ``group_field``, the field folded into the directed bonds, zero without fields); a
                   group is the terms of one [[terms]] block or one bond class (all term types alike)
=================  ===========================================================================================
"""

from __future__ import annotations

import numpy as np

from qmc.engine import slots as S
from qmc.engine.directed import X_FIELD, X_MZ
from qmc.models.compiled import KIND_DIRECTED, CompiledModel

__all__ = ["RENAMED_OBSERVABLES", "bin_names", "bin_row"]

RENAMED_OBSERVABLES = {"s_q_next": "s_q_shifted", "bond_energy": "term_energy"}
"""Names of earlier releases -> today's (a name ``old/<group>`` becomes ``new/<group>``), for readers of
task files written before the rename."""


def bin_names(model: CompiledModel) -> tuple[str, ...]:
    """Column names of a bin row for this model (order matches :func:`bin_row`)."""
    uniform = ["magnetization", "m_uniform2"] if _directed(model) else ["chi_uniform"]
    names = ["energy", "n_ops", "n_ops_sq", *uniform, "m_stag2", "m_stag4", "chi_stag", "s_q"]
    if _has_winding(model):
        names += ["s_q_shifted", "stiffness"] + [f"stiffness/{d}" for d in model.dir_names]
    elif model.n_dirs > 0:
        names += ["s_q_shifted"]
    if model.n_vbs_dirs >= 1:
        names += ["vbs_x2"]
    if model.n_vbs_dirs >= 2:
        names += ["vbs_y2"]
    if model.n_vbs_dirs >= 1:
        names += ["vbs4"]
    if model.n_vbs_dirs >= 2:
        names += ["vbs_cos4"]
    names += [f"term_energy/{g}" for g in model.group_names]
    return tuple(names)


def _directed(model: CompiledModel) -> bool:
    return bool(np.any(model.group_kind == KIND_DIRECTED))


def _has_winding(model: CompiledModel) -> bool:
    return model.n_dirs > 0 and not model.open_boundaries


def bin_row(model: CompiledModel, beta: float, acc: np.ndarray, n_steps: int) -> np.ndarray:
    """Bin averages (in :func:`bin_names` order) from the raw sums ``acc`` over ``n_steps`` steps."""
    a = acc / float(n_steps)
    n = float(model.n_sites)
    vals: dict[str, float] = {
        "energy": (model.energy_constant - a[S.A_NOPS] / beta) / n,
        "n_ops": a[S.A_NOPS],
        "n_ops_sq": a[S.A_NOPS2],
        "chi_uniform": beta * a[S.A_MZ2] / n,
        "m_stag2": a[S.A_MS2] / n**2,
        "m_stag4": a[S.A_MS4] / n**4,
        "chi_stag": a[S.A_CHIS] / n,
        "s_q": a[S.A_MS2] / n,
        "s_q_shifted": a[S.A_SQN],
        "vbs_x2": a[S.A_DX2],
        "vbs_y2": a[S.A_DY2],
        "vbs4": a[S.A_D4],
        "vbs_cos4": a[S.A_COS4],
    }
    if _has_winding(model):
        rho = [a[S.A_W2 + d] / (beta * n) for d in range(model.n_dirs)]
        vals["stiffness"] = float(np.mean(rho))
        for d, name in enumerate(model.dir_names):
            vals[f"stiffness/{name}"] = rho[d]
    n_groups = len(model.group_names)
    if _directed(model):
        kind = S.A_GROUP + n_groups
        vals["magnetization"] = a[kind + X_MZ] / n
        vals["m_uniform2"] = a[S.A_MZ2] / n**2
    for g, name in enumerate(model.group_names):
        vals[f"term_energy/{name}"] = (model.group_constant[g] - a[S.A_GROUP + g] / beta) / n
        if _directed(model):
            vals[f"term_energy/{name}"] += a[S.A_GROUP + n_groups + X_FIELD + g] / n
    return np.array([vals[name] for name in bin_names(model)], dtype=np.float64)
