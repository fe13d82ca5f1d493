"""Linear-response part of the exact-diagonalization reference (numpy/scipy only): Kubo integrals of
diagonal and of sparse operators, operator averages and the exact twist stiffness.

For an operator A that maps symmetry representation k to k2, only the block pairs (k, k2) contribute:

    int_0^beta dtau <A(tau) A> = (1/Z) sum_{n in k, m in k2} |<m|A|n>|^2 K(E_m, E_n),
    K(E_m, E_n) = (e^{-beta E_n} - e^{-beta E_m}) / (E_m - E_n)   (limit beta e^{-beta E} when equal),

with <m|A|n> = W_k2^dagger U_k2^dagger A U_k W_k.  Work is saved by folding equivalent pairs: conjugate
representations of a real H, and spin-flip copies of the S^z sectors.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import scipy.sparse as sp

from .blocks import Sector, as_betas, clean_operator, kubo_kernel
from .hamiltonian import basis_states, popcount
from .symmetry import operator_component, permute_operator

__all__ = ["ResponseMixin"]


class ResponseMixin:
    """Methods of ExactSpectrum that need eigenvectors.  Relies on the attributes sectors, E0, n_sites,
    dim, vectors, sz_sectors, spin_flip, _real, _tol, _H and on _boltzmann, _need_vectors, _values and
    expect_diag of the host class."""

    def _pairs(self, sec: Sector, raw, conj_sign: int) -> list[tuple[int, int, float, float]]:
        """Block pairs (k, k2 >= k) with weights (for |M|^2, for the diagonal <n|A|n>).

        The pair (k2, k) gives |M|^2 transposed (A Hermitian), hence weight 2 for k2 > k.  For a real H
        and a real (conj_sign = +1) or imaginary (-1) operator, the pair of conjugate representations has
        M' = +-conj(M): it is folded into its partner (|M|^2 weight added, diagonal weight conj_sign)."""
        out: dict = {}
        for k, k2 in raw:
            if k2 < k or k not in sec.blocks or k2 not in sec.blocks:
                continue
            f = 1.0 if k2 == k else 2.0
            key, fd = (k, k2), f
            if conj_sign and sec.table is not None:
                ck = tuple(sorted((int(sec.table.conj[k]), int(sec.table.conj[k2]))))
                if ck < key:
                    key, fd = ck, conj_sign * f
            fa0, fd0 = out.get(key, (0.0, 0.0))
            out[key] = (fa0 + f, fd0 + fd)
        return [(k, k2, fa, fd) for (k, k2), (fa, fd) in out.items()]

    def _sections(self, raw_pairs, op_of, conj_sign: int, flip_sign: int):
        """[(sector, weighted pairs, operator in the sector, sector weights)] folding spin-flip copies into
        their source sectors when the operator is flip-even (flip_sign = +1) or flip-odd (-1)."""
        out = []
        for sec in self.sectors:
            w = (1.0, 1.0)
            if sec.source is not None and flip_sign:
                continue
            if flip_sign and any(c.source is sec for c in self.sectors):
                w = (2.0, 1.0 + flip_sign)
            out.append((sec, self._pairs(sec, raw_pairs(sec), conj_sign), op_of(sec), w))
        return out

    def _kubo_sum(self, b: np.ndarray, sections) -> tuple[np.ndarray, np.ndarray]:
        """sum_{m,n} |M_mn|^2 K(E_m, E_n) and sum_n e^{-beta (E_n - E0)} M_nn, M = <m|op|n>."""
        acc = np.zeros(b.size)
        diag = np.zeros(b.size)
        for sec, pairs, op_S, (wa, wd) in sections:
            diag_op = op_S.ndim == 1
            for k, k2, fa, fd in pairs:
                blk, blk2 = sec.blocks[k], sec.blocks[k2]
                if blk.U is None:
                    X = op_S[:, None] * blk.vecs() if diag_op else op_S @ blk.vecs()
                else:
                    A = sp.diags(op_S) if diag_op else op_S
                    X = (blk2.U.conj().T @ (A @ blk.U)) @ blk.vecs()
                M = blk2.vecs().conj().T @ X
                M2 = np.abs(M) ** 2
                Ea = (blk2.E - self.E0)[:, None]
                Eb = (blk.E - self.E0)[None, :]
                for i, bi in enumerate(b):
                    acc[i] += wa * fa * float((M2 * kubo_kernel(Ea, Eb, bi)).sum())
                if k == k2 and wd * fd != 0.0:
                    diag += wd * fd * (np.real(np.diag(M)) @ np.exp(-np.outer(blk.E - self.E0, b)))
        return acc, diag

    def _conj_sign(self, data: np.ndarray) -> int:
        """+1 (real) / -1 (imaginary) operator entries when H is real, else 0 (no folding)."""
        if not self._real or data.size == 0:
            return 0
        scale = float(np.abs(data).max())
        if float(np.abs(np.imag(data)).max()) <= 1e-14 * scale:
            return 1
        if float(np.abs(np.real(data)).max()) <= 1e-14 * scale:
            return -1
        return 0

    def _flip_sign_values(self, v: np.ndarray) -> int:
        if not self.spin_flip:
            return 0
        tol = 1e-13 * max(float(np.abs(v).max()), 1e-300)
        if np.abs(v[::-1] - v).max() <= tol:
            return 1
        if np.abs(v[::-1] + v).max() <= tol:
            return -1
        return 0

    def kubo_diag(self, beta, values, connected: bool = False) -> float | np.ndarray:
        """(1/N) int_0^beta dtau <O(tau) O(0)> for O diagonal in the S^z basis (values as in expect_diag,
        1-D only).  With ``connected`` the disconnected part beta <O>^2 / N is subtracted.

        Spectral form: (1/(N Z)) sum_{m,n} |<m|O|n>|^2 (e^{-beta E_n} - e^{-beta E_m}) / (E_m - E_n)."""
        self._need_vectors("kubo_diag")
        v = self._values(values, "kubo_diag")
        if v.ndim != 1:
            raise ValueError("ExactSpectrum.kubo_diag: values must be one-dimensional")
        b, scalar = as_betas(beta)
        supports: dict = {}

        def raw_pairs(sec):
            if sec.table is None:
                return [(0, 0)]
            key = id(sec.table)
            if key not in supports:
                supports[key] = sec.table.fourier_support(v)
            return [(k, int(sec.table.mult[p, k])) for k in sec.blocks for p in supports[key]]

        sections = self._sections(raw_pairs, lambda sec: v[sec.states], 1 if self._real else 0,
                                  self._flip_sign_values(v))
        acc, _ = self._kubo_sum(b, sections)
        _, Z = self._boltzmann(b)
        chi = acc / Z / self.n_sites
        if connected:
            mean = np.atleast_1d(self.expect_diag(b, v))
            chi = chi - b * mean**2 / self.n_sites
        return float(chi[0]) if scalar else chi

    def _operator_sections(self, A, name: str, diagonal_only: bool = False):
        A = sp.csr_matrix(A)
        if A.shape != (self.dim, self.dim):
            raise ValueError(f"ExactSpectrum.{name}: operator has shape {A.shape}, expected "
                             f"({self.dim}, {self.dim})")
        scale = max(float(abs(A).max()) if A.nnz else 0.0, 1e-300)
        if A.nnz and abs(A - A.conj().T).max() > self._tol * scale:
            raise ValueError(f"ExactSpectrum.{name}: operator is not Hermitian")
        if self.sz_sectors and A.nnz:
            nup = popcount(basis_states(self.n_sites), self.n_sites)
            coo = A.tocoo()
            if np.any((nup[coo.row] != nup[coo.col]) & (np.abs(coo.data) > self._tol * scale)):
                raise ValueError(f"ExactSpectrum.{name}: operator does not conserve total S^z")
        flip_sign = 0
        if self.spin_flip and A.nnz:
            AF = permute_operator(A, basis_states(self.n_sites)[::-1])
            if abs(AF - A).max() <= self._tol * scale:
                flip_sign = 1
            elif abs(AF + A).max() <= self._tol * scale:
                flip_sign = -1
        comps: dict = {}

        def raw_pairs(sec):
            if sec.table is None:
                return [(0, 0)]
            key = id(sec.table)
            if key not in comps:
                try:
                    comps[key] = operator_component(sec.table, A, self._tol)
                except ValueError as exc:
                    raise ValueError(f"ExactSpectrum.{name}: {exc}") from None
            return [(k, int(sec.table.mult[comps[key], k])) for k in sec.blocks
                    if not diagonal_only or int(sec.table.mult[comps[key], k]) == k]

        return self._sections(raw_pairs, lambda sec: A[sec.states][:, sec.states],
                              self._conj_sign(A.data), flip_sign)

    def kubo_operator(self, beta, A, connected: bool = False) -> float | np.ndarray:
        """(1/N) int_0^beta dtau <A(tau) A(0)> for a Hermitian sparse operator A (2^N x 2^N) that conserves
        S^z (with sz_sectors) and transforms as one representation of the symmetry group in use
        (T_g A T_g^dagger = chi(g) A, e.g. a uniform current: translation invariant, odd under the flip).
        With ``connected`` beta <A>^2 / N is subtracted."""
        self._need_vectors("kubo_operator")
        b, scalar = as_betas(beta)
        acc, diag = self._kubo_sum(b, self._operator_sections(A, "kubo_operator"))
        _, Z = self._boltzmann(b)
        chi = acc / Z / self.n_sites
        if connected:
            chi = chi - b * (diag / Z) ** 2 / self.n_sites
        return float(chi[0]) if scalar else chi

    def expect_operator(self, beta, A) -> float | np.ndarray:
        """<A> for a Hermitian sparse operator A with the same requirements as in kubo_operator."""
        self._need_vectors("expect_operator")
        b, scalar = as_betas(beta)
        diag = np.zeros(b.size)
        for sec, pairs, A_S, (_, wd) in self._operator_sections(A, "expect_operator", diagonal_only=True):
            for k, _, _, fd in pairs:
                if wd * fd == 0.0:
                    continue
                blk = sec.blocks[k]
                W = blk.vecs()
                B = A_S if blk.U is None else blk.U.conj().T @ (A_S @ blk.U)
                d = np.real(np.einsum("in,in->n", W.conj(), B @ W))  # <n|A|n>
                diag += wd * fd * (d @ np.exp(-np.outer(blk.E - self.E0, b)))
        _, Z = self._boltzmann(b)
        out = diag / Z
        return float(out[0]) if scalar else out

    def twist_stiffness(self, beta, build_H_of_phi: Callable[[float], sp.spmatrix],
                        max_winding: int = 3) -> float | np.ndarray:
        """rho = (1/N) d^2F/dphi^2 at phi = 0 from second-order perturbation theory in the twist:

            N rho = <H''> - int_0^beta dtau <H'(tau) H'(0)> + beta <H'>^2,   H' = dH/dphi, H'' = d^2H/dphi^2.

        Every matrix element of H(phi) is a trigonometric polynomial sum_n c_n e^{i n phi} with |n| <=
        max_winding (the number of twisted bonds in one term), so H' and H'' follow exactly from
        2*max_winding + 1 equally spaced samples (max_winding + 1 builds, using H(-phi) = conj H(phi); the
        reconstruction is checked at a further angle).  build_H_of_phi(0) must be the Hamiltonian of this
        spectrum.  Exact up to round-off; uses the stored eigenvectors."""
        self._need_vectors("twist_stiffness")
        b, scalar = as_betas(beta)
        K = int(max_winding)
        M = 2 * K + 1
        phis = 2 * np.pi * np.arange(M) / M
        Hs = [sp.csr_matrix(build_H_of_phi(float(p)), dtype=complex) for p in phis[: K + 1]]
        Hs += [Hs[M - j].conj() for j in range(K + 1, M)]  # H(-phi) = conj H(phi), checked below
        scale = max(float(abs(self._H).max()), 1e-300)
        if abs(Hs[0] - self._H).max() > self._tol * scale:
            raise ValueError("ExactSpectrum.twist_stiffness: build_H_of_phi(0) differs from the Hamiltonian "
                             "of this spectrum")
        ns = np.arange(-K, K + 1)
        test = 0.6180339887

        def combo(weights_n: np.ndarray, phase: float = 0.0) -> sp.csr_matrix:
            # sum_n weights_n[n] A_n e^{i n phase} with A_n = (1/M) sum_j H_j e^{-i n phi_j}
            cj = (weights_n[None, :] * np.exp(1j * ns[None, :] * (phase - phis[:, None]))).sum(axis=1) / M
            return sp.csr_matrix(sum(H * c for H, c in zip(Hs, cj, strict=True)))

        recon = combo(np.ones(ns.size), test)
        if abs(sp.csr_matrix(build_H_of_phi(test), dtype=complex) - recon).max() > 1e-9 * scale:
            raise ValueError(f"ExactSpectrum.twist_stiffness: H(phi) has windings beyond max_winding={K}")
        H1 = combo(1j * ns)
        H2 = combo(-(ns * ns).astype(float))
        H1, H2 = (clean_operator(0.5 * (X + X.conj().T), 1e-13 * scale) for X in (H1, H2))
        acc, d1 = self._kubo_sum(b, self._operator_sections(H1, "twist_stiffness"))
        e2 = np.atleast_1d(self.expect_operator(b, H2))
        _, Z = self._boltzmann(b)
        rho = (e2 - acc / Z + b * (d1 / Z) ** 2) / self.n_sites
        return float(rho[0]) if scalar else rho
