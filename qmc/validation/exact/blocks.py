"""Shared data types and helpers of the exact-diagonalization reference (numpy/scipy only).

Block: one diagonalized symmetry block (eigenvalues E, eigenvectors W in the symmetrized basis U, whose
columns are orbits of the sector).  Sector: all blocks of one total-S^z sector (or of the whole space).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from .symmetry import SymmetryTable

__all__ = ["Block", "Sector", "kubo_kernel", "clean_operator", "as_betas"]


def kubo_kernel(Ea: np.ndarray, Eb: np.ndarray, beta: float) -> np.ndarray:
    """int_0^beta dtau e^{-(beta - tau) Eb} e^{-tau Ea} = (e^{-beta Eb} - e^{-beta Ea}) / (Ea - Eb).

    For |beta (Ea - Eb)| < 1e-3 the exact form beta e^{-beta (Ea+Eb)/2} sinh(x/2)/(x/2), x = beta (Ea - Eb),
    is used through its series 1 + x^2/24 (includes the degenerate limit beta e^{-beta E}).  Energies should
    be shifted to be >= 0; broadcasting column/row vectors keeps the exponentials O(n)."""
    Ea, Eb = np.asarray(Ea, dtype=float), np.asarray(Eb, dtype=float)
    wa, wb = np.exp(-beta * Ea), np.exp(-beta * Eb)
    d = Ea - Eb
    x = beta * d
    small = np.abs(x) < 1e-3
    out = np.asarray((wb - wa) / np.where(small, 1.0, d), dtype=float)
    if np.any(small):
        series = beta * np.sqrt(wa * wb) * (1.0 + x * x / 24.0)
        out = np.where(small, series, out)
    return out


@dataclass
class Block:
    k: int  # representation index in the sector's symmetry table (0 without one)
    E: np.ndarray  # eigenvalues
    W: np.ndarray | None  # eigenvectors in the symmetrized basis (columns), conjugated if ``conj``
    U: sp.csr_matrix | None  # (D, n_k) symmetrized basis, None without symmetry table
    orbits: np.ndarray  # orbit index (within the sector) of each basis column
    conj: bool = False

    def vecs(self) -> np.ndarray:
        return self.W.conj() if self.conj else self.W


@dataclass
class Sector:
    n_up: int | None
    states: np.ndarray  # sorted basis states of the sector
    avg: sp.csr_matrix  # (n_orbits, D): orbit-averaging matrix
    table: SymmetryTable | None
    blocks: dict
    source: Sector | None = None  # the sector this one was copied from by the spin flip


def clean_operator(X: sp.spmatrix, cut: float) -> sp.csr_matrix:
    """Drop round-off: real and imaginary parts below ``cut`` are set to zero."""
    X = sp.csr_matrix(X)
    re, im = X.data.real.copy(), X.data.imag.copy()
    re[np.abs(re) < cut] = 0.0
    im[np.abs(im) < cut] = 0.0
    X.data = re + 1j * im
    X.eliminate_zeros()
    return X


def as_betas(beta) -> tuple[np.ndarray, bool]:
    b = np.asarray(beta, dtype=float)
    scalar = b.ndim == 0
    b = np.atleast_1d(b)
    if b.ndim != 1 or not np.all(np.isfinite(b)) or np.any(b < 0):
        raise ValueError(f"beta must be a finite non-negative number or 1-D array, got {beta!r}")
    return b, scalar
