"""Spectra and thermodynamics of the exact-diagonalization reference: :class:`ExactSpectrum`.

Independent reference: this package imports only numpy and scipy (never the engine, ``models`` or any
other part of ``qmc``), so that it can check the simulation.

The full-space Hamiltonian (see :mod:`qmc.validation.exact.hamiltonian`) is block-diagonalized in total
S^z and, optionally, in the momentum sectors of an abelian site-permutation group.  For a group element g
the symmetrized basis vector of representative r in sector k is

    |r_k> = sum_g conj(chi_k(g)) T_g |r> / norm,      H_k = U_k^dagger H U_k,

and every block is diagonalized densely.  All thermal averages are Tr(e^{-beta H} ...)/Z over the whole
2^N space; energies per site are <H>/N with all constants included (units of the couplings, k_B = 1).

Diagonal observables O (length-2^N arrays in the S^z basis) are averaged exactly through
Tr(e^{-beta H} O) = sum_s O(s) <s|e^{-beta H}|s>; in a momentum block |<s|n>|^2 = |c_r|^2 / |orbit(r)|.
The Kubo integral of O connects momentum k to k + q for every Fourier component q of O; the needed
cross-sector matrix elements U_k'^dagger O U_k are computed directly.  Non-diagonal operators (currents)
are handled when they transform as a single representation of the group (``kubo_operator``), which
gives the twist stiffness exactly by perturbation theory (``twist_stiffness``), a cross-check of the
finite-difference ``stiffness_by_twist``.
"""

from __future__ import annotations

import time
from collections.abc import Callable

import numpy as np
import scipy.sparse as sp

from .blocks import Block, Sector, as_betas
from .hamiltonian import basis_states, popcount, sz_diagonal
from .response import ResponseMixin
from .symmetry import PermutationGroup, SymmetryTable, permute_operator, symmetry_table, validate_group

__all__ = ["ExactSpectrum", "stiffness_by_twist"]


class ExactSpectrum(ResponseMixin):
    """Complete spectrum (and, if ``vectors``, eigenvectors) of a full-space Hamiltonian.

    H: (2^N, 2^N) Hermitian matrix (sparse or dense); sz_sectors: split by total S^z (H must conserve it);
    translations: ``SymmetryGroup`` or ``(perms, chars)`` of an abelian site-permutation group with its
    complete character table (H must commute with it); vectors: keep eigenvectors (needed by
    ``expect_diag`` and ``kubo_diag``); spin_flip: also use the global spin flip when H commutes with it
    (spectra of S^z = -m are copied from S^z = m, the S^z = 0 sector is split by flip parity);
    tol: relative tolerance of the Hermiticity/symmetry checks.  For a real H, the blocks of conjugate
    representations (k and -k) are diagonalized once; for a twisted H with F H F = conj(H) and
    vectors=False, (S^z, k) and (-S^z, -k) are.
    """

    def __init__(self, H, n_sites: int, sz_sectors: bool = True, translations=None,
                 vectors: bool = True, spin_flip: bool = True, tol: float = 1e-10):
        t0 = time.perf_counter()
        self.n_sites = int(n_sites)
        self.dim = 1 << self.n_sites
        H = sp.csr_matrix(H)
        if H.shape != (self.dim, self.dim):
            raise ValueError(f"ExactSpectrum: H has shape {H.shape}, expected ({self.dim}, {self.dim})")
        self.vectors = bool(vectors)
        self.sz_sectors = bool(sz_sectors)
        self._H = H
        self._tol = tol
        scale = max(float(abs(H).max()) if H.nnz else 0.0, 1e-300)
        if H.nnz and abs(H - H.conj().T).max() > tol * scale:
            raise ValueError("ExactSpectrum: H is not Hermitian")
        self._real = not np.iscomplexobj(H.data) or not H.nnz or float(np.abs(H.data.imag).max()) == 0.0
        states = basis_states(self.n_sites)
        self.group: PermutationGroup | None = None
        if translations is not None:
            self.group = validate_group(translations, self.n_sites)
            plain = symmetry_table(self.group, self.n_sites, spin_flip=False)
            for g in self.group.generators:
                if H.nnz and abs(permute_operator(H, plain.stmap[g]) - H).max() > tol * scale:
                    raise ValueError(f"ExactSpectrum: H does not commute with permutation {g}: "
                                     f"{self.group.perms[g].tolist()}")
        else:
            plain = None
        flip_map = states[::-1]  # s -> s XOR (2^N - 1)
        asym = H.nnz and abs(permute_operator(H, flip_map) - H).max() > tol * scale
        self.spin_flip = bool(spin_flip) and not asym
        # twisted H: F H F = conj(H) makes (flip x complex conjugation) an antiunitary symmetry, so the
        # spectrum of (S^z, k) equals that of (-S^z, -k); used for eigenvalues only
        self._anti = (bool(spin_flip) and bool(asym) and not self.vectors and bool(sz_sectors)
                      and not abs(permute_operator(H, flip_map) - H.conj()).max() > tol * scale)
        flipped = symmetry_table(self.group, self.n_sites, spin_flip=True) if self.spin_flip else None
        if sz_sectors:
            nup = popcount(states, self.n_sites)
            coo = H.tocoo()
            bad = nup[coo.row] != nup[coo.col]
            if np.any(bad & (np.abs(coo.data) > tol * scale)):
                raise ValueError("ExactSpectrum: H does not conserve total S^z; use sz_sectors=False")
            groups = [(m, np.flatnonzero(nup == m)) for m in range(self.n_sites + 1)]
        else:
            groups = [(None, states)]
        self._pos = np.empty(self.dim, dtype=np.int64)
        built: dict = {}
        for n_up, S in groups:
            self_dual = n_up is None or 2 * n_up == self.n_sites
            if (self.spin_flip or self._anti) and not self_dual and n_up > self.n_sites - n_up:
                continue  # copied from the flipped sector below
            self._pos[S] = np.arange(S.size)
            table = flipped if (self.spin_flip and self_dual) else plain
            conj_reuse = self._real or (self._anti and self_dual)
            built[n_up] = self._build_sector(n_up, S, H[S][:, S], table, conj_reuse)
        self.sectors: list[Sector] = []
        for n_up, _ in groups:
            if n_up in built:
                self.sectors.append(built[n_up])
            elif self.spin_flip:
                self.sectors.append(self._flip_copy(built[self.n_sites - n_up]))
            else:
                self.sectors.append(self._anti_copy(built[self.n_sites - n_up]))
        energies, sz = [], []
        for sec in self.sectors:
            for blk in sec.blocks.values():
                energies.append(blk.E)
                sz.append(np.full(blk.E.size, np.nan if sec.n_up is None else sec.n_up - self.n_sites / 2))
        self._E = np.concatenate(energies)
        self._sz = np.concatenate(sz)
        if self._E.size != self.dim:
            raise RuntimeError(f"ExactSpectrum: internal error, {self._E.size} levels for {self.dim} states")
        self.E0 = float(self._E.min())
        self.build_seconds = time.perf_counter() - t0

    # ------------------------------------------------------------------ construction
    def _diag(self, Hk: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
        Hk = 0.5 * (Hk + Hk.conj().T)
        if np.iscomplexobj(Hk) and np.abs(Hk.imag).max(initial=0.0) <= 1e-14 * max(1.0, np.abs(Hk).max()):
            Hk = Hk.real.copy()
        if self.vectors:
            return np.linalg.eigh(Hk)
        return np.linalg.eigvalsh(Hk), None

    def _build_sector(self, n_up, S: np.ndarray, HS: sp.csr_matrix, table: SymmetryTable | None,
                      conj_reuse: bool) -> Sector:
        D = S.size
        if table is None:
            E, W = self._diag(HS.toarray())
            blk = Block(0, E, W, None, np.arange(D))
            return Sector(n_up, S, sp.identity(D, format="csr"), None, {0: blk})
        G = table.order
        img = self._pos[table.stmap[:, S]]  # (G, D) positions of images
        rep_pos = img.min(axis=0)  # S is sorted, so the minimal position is the minimal state
        reps, orbit_idx = np.unique(rep_pos, return_inverse=True)
        n_orb = reps.size
        orbit_size = np.bincount(orbit_idx, minlength=n_orb)
        avg = sp.csr_matrix((1.0 / orbit_size[orbit_idx], (orbit_idx, np.arange(D))), shape=(n_orb, D))
        rep_img = img[:, reps]  # (G, n_orb)
        col = np.broadcast_to(np.arange(n_orb), (G, n_orb)).ravel()
        blocks: dict = {}
        total = 0
        for k in range(G):
            ch = np.conj(table.chars[k])
            if np.abs(ch.imag).max() == 0.0:
                ch = ch.real
            data = np.broadcast_to(ch[:, None], (G, n_orb)).ravel()
            U = sp.csc_matrix((data, (rep_img.ravel(), col)), shape=(D, n_orb))
            norm2 = np.asarray(abs(U).power(2).sum(axis=0)).ravel()
            keep = np.flatnonzero(norm2 > 0.5)
            if keep.size == 0:
                continue
            U = (U[:, keep] @ sp.diags(1.0 / np.sqrt(norm2[keep]))).tocsr()
            kc = int(table.conj[k])
            if conj_reuse and kc in blocks:  # H_{conj k} = conj(H_k): same spectrum, conjugate vectors
                src = blocks[kc]
                blocks[k] = Block(k, src.E, src.W, U, keep, conj=not src.conj)
            else:
                E, W = self._diag((U.conj().T @ (HS @ U)).toarray())
                blocks[k] = Block(k, E, W, U, keep)
            total += keep.size
        if total != D:
            raise RuntimeError(f"ExactSpectrum: internal error, momentum blocks hold {total} of {D} states")
        return Sector(n_up, S, avg, table, blocks)

    def _flip_copy(self, sec: Sector) -> Sector:
        """Sector N - n_up from sector n_up: the flip maps the i-th state to the (D-1-i)-th one, so the
        symmetrized basis (rows of U and of the orbit-averaging matrix) is reversed; without a symmetry
        table the basis is the states themselves and the eigenvectors are reversed instead."""
        mask = self.dim - 1
        states = (sec.states ^ mask)[::-1]
        if sec.table is None:
            blocks = {k: Block(k, b.E, None if b.W is None else b.W[::-1], None, b.orbits, b.conj)
                      for k, b in sec.blocks.items()}
            return Sector(self.n_sites - sec.n_up, states, sec.avg, None, blocks, source=sec)
        blocks = {k: Block(k, b.E, b.W, b.U[::-1], b.orbits, b.conj) for k, b in sec.blocks.items()}
        return Sector(self.n_sites - sec.n_up, states, sec.avg[:, ::-1].tocsr(), sec.table, blocks,
                      source=sec)

    def _anti_copy(self, sec: Sector) -> Sector:
        """Eigenvalues of sector N - n_up from sector n_up under flip x conjugation: block k -> conj(k)."""
        mask = self.dim - 1
        blocks = {}
        for k, b in sec.blocks.items():
            kc = 0 if sec.table is None else int(sec.table.conj[k])
            blocks[kc] = Block(kc, b.E, None, None, b.orbits)
        return Sector(self.n_sites - sec.n_up, (sec.states ^ mask)[::-1], sec.avg[:, ::-1].tocsr(),
                       sec.table, blocks)

    # ------------------------------------------------------------------ spectra
    def ground_state_energy(self) -> float:
        """Lowest eigenvalue E0 (total, not per site)."""
        return self.E0

    def eigenvalues(self) -> np.ndarray:
        """All 2^N eigenvalues, sorted."""
        return np.sort(self._E)

    def block_eigenvalues(self) -> dict:
        """{(S^z_total or None, momentum index or 0): sorted eigenvalues} (flip-parity blocks merged)."""
        out: dict = {}
        for sec in self.sectors:
            sz = None if sec.n_up is None else sec.n_up - self.n_sites / 2
            for k, blk in sec.blocks.items():
                key = (sz, 0 if sec.table is None else int(sec.table.kindex[k]))
                out[key] = np.sort(np.concatenate([out.get(key, np.empty(0)), blk.E]))
        return out

    # ------------------------------------------------------------------ thermal averages
    def _boltzmann(self, betas: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        w = np.exp(-np.outer(self._E - self.E0, betas))  # (levels, n_beta)
        return w, w.sum(axis=0)

    def free_energy(self, beta) -> float | np.ndarray:
        """F = -ln(Z)/beta (total), beta > 0."""
        b, scalar = as_betas(beta)
        if np.any(b == 0):
            raise ValueError("free_energy: beta must be > 0")
        _, Z = self._boltzmann(b)
        F = self.E0 - np.log(Z) / b
        return float(F[0]) if scalar else F

    def energy_per_site(self, beta) -> float | np.ndarray:
        """<H>/N."""
        b, scalar = as_betas(beta)
        w, Z = self._boltzmann(b)
        e = (self._E @ w) / Z / self.n_sites
        return float(e[0]) if scalar else e

    def specific_heat_per_site(self, beta) -> float | np.ndarray:
        """C/N = beta^2 (<H^2> - <H>^2) / N."""
        b, scalar = as_betas(beta)
        w, Z = self._boltzmann(b)
        mean = (self._E @ w) / Z
        var = (((self._E[:, None] - mean[None, :]) ** 2) * w).sum(axis=0) / Z
        c = b**2 * var / self.n_sites
        return float(c[0]) if scalar else c

    def chi_uniform(self, beta) -> float | np.ndarray:
        """beta <(sum_i S^z_i)^2> / N."""
        b, scalar = as_betas(beta)
        if np.isnan(self._sz).any():
            m2 = np.atleast_1d(self.expect_diag(b, sz_diagonal(self.n_sites) ** 2))
        else:
            w, Z = self._boltzmann(b)
            m2 = (self._sz**2 @ w) / Z
        c = b * m2 / self.n_sites
        return float(c[0]) if scalar else c

    def _need_vectors(self, name: str) -> None:
        if not self.vectors:
            raise ValueError(f"ExactSpectrum.{name}: eigenvectors were not kept (vectors=False)")

    def _values(self, values, name: str) -> np.ndarray:
        v = np.asarray(values)
        if np.iscomplexobj(v):
            raise ValueError(f"ExactSpectrum.{name}: values must be real")
        v = v.astype(float)
        if v.shape[-1:] != (self.dim,) or v.ndim > 2:
            raise ValueError(f"ExactSpectrum.{name}: values must have shape ({self.dim},) or "
                             f"(m, {self.dim}), got {v.shape}")
        return v

    def expect_diag(self, beta, values) -> float | np.ndarray:
        """<O> for O diagonal in the S^z basis, O|s> = values[s]|s>.

        values: shape (2^N,) or (m, 2^N); result shape values.shape[:-1] + beta.shape."""
        self._need_vectors("expect_diag")
        v = self._values(values, "expect_diag")
        b, scalar = as_betas(beta)
        V = v.reshape(-1, self.dim)
        acc = np.zeros((V.shape[0], b.size))
        for sec in self.sectors:
            ob = sec.avg @ V[:, sec.states].T  # (n_orbits, m) orbit means
            for blk in sec.blocks.values():
                w = np.exp(-np.outer(blk.E - self.E0, b))
                d = (np.abs(blk.W) ** 2) @ w  # (n_k, n_beta)
                acc += ob[blk.orbits].T @ d
        _, Z = self._boltzmann(b)
        acc /= Z[None, :]
        out = acc.reshape(v.shape[:-1] + b.shape)
        if scalar:
            out = out[..., 0]
        return float(out) if out.ndim == 0 else out


def stiffness_by_twist(build_H_of_phi: Callable[[float], sp.spmatrix], n_sites: int, beta,
                       h: float = 0.002, sz_sectors: bool = True, translations=None,
                       even: bool = True) -> float | np.ndarray:
    """rho = (1/N) d^2 F / d phi^2 at phi = 0, F = -ln Z / beta, by the five-point central difference

        F'' ~ [-F(2h) + 16 F(h) - 30 F(0) + 16 F(-h) - F(-2h)] / (12 h^2),   error -(h^4/90) F^(6).

    build_H_of_phi(phi) must return the full-space Hamiltonian with the twist phi applied to every bond
    along the chosen direction (sign = the bond's displacement along it).  Only eigenvalues are used;
    beta may be a 1-D array (one set of spectra serves all temperatures).  With ``even``,
    F(-phi) = F(phi) is used (true when H(-phi) = conj H(phi), as for twist phases), so only three
    spectra are computed.  F depends on phi mainly through the flux L*phi (L = linear size along the
    twist), so the relative truncation error is ~(L h)^4 / 90: ~2e-9 for L = 16 and the default
    h = 0.002; the round-off is ~1e-14 * 5 / h^2 ~ 1e-8 absolute on F'' for N <= 16."""
    b, scalar = as_betas(beta)
    if np.any(b == 0):
        raise ValueError(f"stiffness_by_twist: beta must be positive, got {beta!r}")

    def F(phi: float) -> np.ndarray:
        spec = ExactSpectrum(build_H_of_phi(phi), n_sites, sz_sectors=sz_sectors,
                             translations=translations, vectors=False)
        return spec.free_energy(b)

    f = {m: F(m * h) for m in ((0, 1, 2) if even else (-2, -1, 0, 1, 2))}
    if even:
        f[-1], f[-2] = f[1], f[2]
    rho = (-f[2] + 16 * f[1] - 30 * f[0] + 16 * f[-1] - f[-2]) / (12 * h * h) / n_sites
    return float(rho[0]) if scalar else rho
