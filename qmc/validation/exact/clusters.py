"""Exact thermal observables of small periodic clusters, in the conventions of the simulation's bins.

Independent reference: imports only numpy/scipy and the sibling modules of this package.

Clusters (site numbering of :mod:`qmc.validation.exact.lattices`):

* ``chain``   (L,):       H = J sum_x S_x.S_{x+1}
* ``square``  (Lx, Ly):   H = J sum_<ij> S_i.S_j - Q sum_{plaquette pairs} P_ij P_kl,  P_ij = 1/4 - S_i.S_j
                          (J-Q2 model, both orientations of the bond pair on every plaquette)
* ``bilayer`` (Lx, Ly):   H = J sum_{in-plane <ij>} S_i.S_j + J_inter sum_rungs S_i.S_j

Observables at inverse temperature beta (per site, energies in units of the couplings, k_B = 1):

    energy         <H>/N
    specific_heat  beta^2 (<H^2> - <H>^2) / N
    chi_uniform    beta <(sum_i S^z_i)^2> / N
    m_stag2        <(M_s/N)^2>,  M_s = sum_i phi_i S^z_i,  phi_i = (-1)^(x+y(+layer))
    stiffness      rho = (1/N) d^2F/dphi^2 for a twist phi on every bond along x (exact second-order
                   perturbation theory, ExactSpectrum.twist_stiffness), averaged over x and y when the
                   cluster is not square-symmetric
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import scipy.sparse as sp

from .hamiltonian import build_hamiltonian, sz_diagonal
from .lattices import (
    bilayer_bonds,
    bilayer_translations,
    chain_bonds,
    chain_translations,
    q2_plaquette_pairs,
    square_bonds,
    square_translations,
    staggered_signs_bilayer,
    staggered_signs_chain,
    staggered_signs_square,
)
from .spectrum import ExactSpectrum

__all__ = ["CLUSTER_KINDS", "cluster_observables"]

CLUSTER_KINDS = ("chain", "square", "bilayer")


def _cluster(kind: str, size: Sequence[int], J: float, Q: float, J_inter: float):
    """(n_sites, heisenberg triples, projector products, translation group, phases, bonds per direction)."""
    if kind == "chain":
        (L,) = size
        bonds = chain_bonds(L)
        return (L, [(J, i, j) for i, j in bonds], [], chain_translations(L), staggered_signs_chain(L),
                [bonds])
    if kind == "square":
        Lx, Ly = size
        xb, yb = square_bonds(Lx, Ly)
        q = [(Q, pair) for pair in q2_plaquette_pairs(Lx, Ly)] if Q else []
        return (Lx * Ly, [(J, i, j) for i, j in xb + yb], q, square_translations(Lx, Ly),
                staggered_signs_square(Lx, Ly), [xb, yb])
    if kind == "bilayer":
        Lx, Ly = size
        xb, yb, rungs = bilayer_bonds(Lx, Ly)
        heis = [(J, i, j) for i, j in xb + yb] + [(J_inter, i, j) for i, j in rungs]
        return (2 * Lx * Ly, heis, [], bilayer_translations(Lx, Ly), staggered_signs_bilayer(Lx, Ly),
                [xb, yb])
    raise ValueError(f"cluster_observables: unknown cluster kind {kind!r} (choose from {CLUSTER_KINDS})")


def cluster_observables(kind: str, size: Sequence[int], beta: float, J: float = 1.0, Q: float = 0.0,
                        J_inter: float = 0.0) -> dict[str, float]:
    """Exact ``energy``, ``specific_heat``, ``chi_uniform``, ``m_stag2``, ``stiffness`` (see module doc)."""
    size = tuple(int(s) for s in size)
    n, heis, qterms, group, phase, directions = _cluster(kind, size, float(J), float(Q), float(J_inter))
    spec = ExactSpectrum(build_hamiltonian(n, heis, qterms), n, translations=group)
    ms = sz_diagonal(n, phase)
    out = {
        "energy": spec.energy_per_site(beta),
        "specific_heat": spec.specific_heat_per_site(beta),
        "chi_uniform": spec.chi_uniform(beta),
        "m_stag2": spec.expect_diag(beta, (ms / n) ** 2),
    }
    # a square-symmetric cluster has rho_x = rho_y; otherwise average the directions, as the simulation does
    if kind != "chain" and size[0] == size[1]:
        directions = directions[:1]
    rho = []
    for along in directions:
        twisted = set(along)
        winding = max([1] + [sum(b in twisted for b in pair) for _, pair in qterms])

        def build(phi: float, twisted=twisted) -> sp.csr_matrix:
            return build_hamiltonian(n, heis, qterms, twist={b: phi for b in twisted})

        rho.append(spec.twist_stiffness(beta, build, max_winding=winding))
    out["stiffness"] = float(np.mean(rho))
    return {k: float(v) for k, v in out.items()}
