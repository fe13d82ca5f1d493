"""XXZ couplings in uniform or staggered fields: Hamiltonian and thermal observables for the reference.

Independent reference: imports only numpy and scipy (and sibling modules), never the engine or ``models``.

    H = sum_b J_b (S^x_i S^x_j + S^y_i S^y_j + delta_b S^z_i S^z_j) - sum_i h_i S^z_i,

with S^x S^x + S^y S^y = (S^+ S^- + S^- S^+)/2; a twist theta on bond (i, j) multiplies S^+_i S^-_j by
e^{+i theta} (convention of :mod:`qmc.validation.exact.hamiltonian`).  H conserves total S^z, so
:class:`~qmc.validation.exact.spectrum.ExactSpectrum` diagonalizes it in S^z blocks (and momentum blocks of
the cluster's translations, which a uniform or staggered field keeps); the field breaks the global spin
flip, which ExactSpectrum then does not use.

:func:`xxz_observables` returns, per site (k_B = 1): ``energy`` <H>/N, ``specific_heat`` beta^2 (<H^2> -
<H>^2)/N, ``magnetization`` <M>/N with M = sum_i S^z_i, ``chi_uniform`` beta (<M^2> - <M>^2)/N (M is
conserved, so this is the static susceptibility), ``m_stag2`` <(M_s/N)^2> with M_s = sum_i phi_i S^z_i,
and ``stiffness`` (1/N) d^2F/dphi^2 for a twist phi on every bond along one lattice direction, averaged over
the directions (exact second-order perturbation theory, ``ExactSpectrum.twist_stiffness``).
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence

import numpy as np
import scipy.sparse as sp

from .hamiltonian import basis_states, sz_diagonal
from .lattices import (
    bilayer_bonds,
    bilayer_translations,
    chain_bonds,
    chain_translations,
    square_bonds,
    square_translations,
    staggered_signs_bilayer,
    staggered_signs_chain,
    staggered_signs_square,
)
from .spectrum import ExactSpectrum

__all__ = ["xxz_hamiltonian", "xxz_observables"]


def xxz_hamiltonian(n_sites: int, bonds: Iterable[tuple[float, float, int, int]], field: np.ndarray,
                    twist: dict[tuple[int, int], float] | None = None) -> sp.csr_matrix:
    """Sparse H (module docstring) in the full 2^N space; bonds are (J, delta, i, j), ``field`` is h_i."""
    dim = 1 << n_sites
    s = basis_states(n_sites)
    diag = -sz_diagonal(n_sites, np.asarray(field, dtype=float))
    rows, cols, vals = [], [], []
    for J, delta, i, j in bonds:
        bi, bj = (s >> i) & 1, (s >> j) & 1
        diag = diag + J * delta * 0.25 * (2 * bi - 1) * (2 * bj - 1)
        src = s[bi != bj]
        theta = 0.0
        if twist is not None:
            theta = twist[(i, j)] if (i, j) in twist else -twist.get((j, i), 0.0)
        up_j = (src >> j) & 1  # j up, i down: S^+_i S^-_j acts, phase e^{+i theta}
        amp = 0.5 * J * np.exp(1j * theta * np.where(up_j == 1, 1.0, -1.0))
        rows.append(src ^ ((1 << i) | (1 << j)))
        cols.append(src)
        vals.append(amp if twist is not None else amp.real)
    rows.append(s)
    cols.append(s)
    vals.append(diag.astype(complex) if twist is not None else diag)
    return sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                         shape=(dim, dim))


def _cluster(kind: str, size: Sequence[int]):
    """(n_sites, bonds per kind of bond, translation group, staggered signs, bonds along each direction)."""
    if kind == "chain":
        (L,) = size
        b = chain_bonds(L)
        return L, {"nn": b}, chain_translations(L), staggered_signs_chain(L), [b]
    if kind == "square":
        Lx, Ly = size
        xb, yb = square_bonds(Lx, Ly)
        return Lx * Ly, {"nn": xb + yb}, square_translations(Lx, Ly), staggered_signs_square(Lx, Ly), [xb, yb]
    if kind == "bilayer":
        Lx, Ly = size
        xb, yb, rungs = bilayer_bonds(Lx, Ly)
        return (2 * Lx * Ly, {"nn": xb + yb, "rung": rungs}, bilayer_translations(Lx, Ly),
                staggered_signs_bilayer(Lx, Ly), [xb, yb])
    raise ValueError(f"xxz_observables: unknown cluster kind {kind!r}")


def xxz_observables(kind: str, size: Sequence[int], beta: float, couplings: dict[str, tuple[float, float]],
                    h: float = 0.0, staggered: bool = False, stiffness: bool = True) -> dict[str, float]:
    """Exact thermal observables (module docstring) of a periodic ``chain``, ``square`` or ``bilayer``
    cluster; ``couplings`` maps a bond kind ("nn", and "rung" for the bilayer) to (J, delta)."""
    n, classes, group, phase, directions = _cluster(kind, tuple(int(x) for x in size))
    bonds = [(J, d, i, j) for name, (J, d) in couplings.items() for i, j in classes[name]]
    field = h * (phase if staggered else np.ones(n))
    H = xxz_hamiltonian(n, bonds, field)
    spec = ExactSpectrum(H, n, translations=None if staggered else group)  # phi_i breaks odd translations
    m = sz_diagonal(n)
    ms = sz_diagonal(n, phase)
    mean_m = spec.expect_diag(beta, m)
    out = {
        "energy": spec.energy_per_site(beta),
        "specific_heat": spec.specific_heat_per_site(beta),
        "magnetization": mean_m / n,
        "chi_uniform": beta * (spec.expect_diag(beta, m**2) - mean_m**2) / n,
        "m_stag2": spec.expect_diag(beta, (ms / n) ** 2),
    }
    if stiffness:
        rho = []
        for along in (directions[:1] if kind != "chain" and size[0] == size[1] else directions):
            twisted = set(along)

            def build(phi: float, twisted=twisted) -> sp.csr_matrix:
                return xxz_hamiltonian(n, bonds, field, twist={b: phi for b in twisted})

            rho.append(spec.twist_stiffness(beta, build, max_winding=1))
        out["stiffness"] = float(np.mean(rho))
    return {k: float(v) for k, v in out.items()}
