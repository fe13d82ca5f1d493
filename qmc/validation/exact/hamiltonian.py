"""Full-space sparse Hamiltonians of S=1/2 spins for the exact-diagonalization reference.

Independent reference: imports only numpy and scipy (never the engine, ``models`` or other parts of ``qmc``).

Basis: integer ``s`` in [0, 2^N); bit i of s equal to 1 means site i is up (S^z_i = +1/2).

Hamiltonian (energies in the units of J and Q):

    H = sum_b J_b S_i.S_j  -  sum_t Q_t prod_{a in t} P_{i_a j_a}  +  diag(d),
    P_ij = 1/4 - S_i.S_j   (singlet projector; bonds inside one product are site-disjoint),
    S_i.S_j = S^z_i S^z_j + (1/2) (e^{+i theta_ij} S^+_i S^-_j + e^{-i theta_ij} S^-_i S^+_j).

The twist angle theta_ij comes from the ``twist`` dict: ``twist[(i, j)] = theta`` (and a key (j, i) means
theta_ij = -theta).  The same phase is used in the Heisenberg exchange and in every projector factor.
The matrix is built with vectorized bit operations (no Python loop over states).
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence

import numpy as np
import scipy.sparse as sp

__all__ = ["basis_states", "popcount", "permute_states", "sz_diagonal", "build_hamiltonian"]


def basis_states(n_sites: int) -> np.ndarray:
    """All 2^N basis states as int64."""
    return np.arange(1 << n_sites, dtype=np.int64)


def popcount(states: np.ndarray, n_sites: int) -> np.ndarray:
    """Number of up spins in each state."""
    out = np.zeros(states.shape, dtype=np.int64)
    for i in range(n_sites):
        out += (states >> i) & 1
    return out


def permute_states(states: np.ndarray, perm: Sequence[int]) -> np.ndarray:
    """Image of each state under the site permutation i -> perm[i] (spin of site i moves to perm[i])."""
    out = np.zeros(states.shape, dtype=np.int64)
    for i, p in enumerate(perm):
        out |= ((states >> i) & 1) << int(p)
    return out


def sz_diagonal(n_sites: int, weights: Sequence[float] | np.ndarray | None = None) -> np.ndarray:
    """Diagonal of sum_i w_i S^z_i for all 2^N states (w_i = 1 if weights is None)."""
    w = np.ones(n_sites) if weights is None else np.asarray(weights, dtype=float)
    if w.shape != (n_sites,):
        raise ValueError(f"sz_diagonal: weights must have length {n_sites}, got shape {w.shape}")
    s = basis_states(n_sites)
    out = np.zeros(s.shape, dtype=float)
    for i in range(n_sites):
        out += w[i] * (((s >> i) & 1) - 0.5)
    return out


def _check_bond(i: int, j: int, n_sites: int, where: str) -> tuple[int, int]:
    i, j = int(i), int(j)
    if not (0 <= i < n_sites and 0 <= j < n_sites) or i == j:
        raise ValueError(f"build_hamiltonian: invalid bond ({i}, {j}) in {where} for {n_sites} sites")
    return i, j


class _Twist:
    def __init__(self, twist: dict | None):
        self.table = {} if twist is None else {(int(a), int(b)): float(t) for (a, b), t in twist.items()}
        self.used: set = set()

    def angle(self, i: int, j: int) -> float:
        if (i, j) in self.table:
            self.used.add((i, j))
            return self.table[(i, j)]
        if (j, i) in self.table:
            self.used.add((j, i))
            return -self.table[(j, i)]
        return 0.0

    def check_used(self) -> None:
        unused = set(self.table) - self.used
        if unused:
            raise ValueError(f"build_hamiltonian: twist given for bonds not in H: {sorted(unused)}")


def build_hamiltonian(
    n_sites: int,
    heisenberg: Iterable[tuple[float, int, int]] = (),
    projector_products: Iterable[tuple[float, Sequence[tuple[int, int]]]] = (),
    twist: dict[tuple[int, int], float] | None = None,
    diagonal: np.ndarray | None = None,
) -> sp.csr_matrix:
    """Sparse CSR matrix of H (formula in the module docstring) in the full 2^N space.

    heisenberg: (J, i, j) triples; projector_products: (Q, [(i1, j1), (i2, j2), ...]) with site-disjoint
    bonds; twist: {(i, j): theta}; diagonal: optional length-2^N array added to the diagonal.
    The dtype is complex128 when ``twist`` is given, float64 otherwise.
    """
    if n_sites < 1 or n_sites > 24:
        raise ValueError(f"build_hamiltonian: n_sites must be in 1..24, got {n_sites}")
    dim = 1 << n_sites
    dtype = complex if twist is not None else float
    tw = _Twist(twist)
    s = basis_states(n_sites)
    bits = [(s >> i) & 1 for i in range(n_sites)]
    diag = np.zeros(dim, dtype=float)
    rows: list[np.ndarray] = []
    cols: list[np.ndarray] = []
    vals: list[np.ndarray] = []

    for J, i, j in heisenberg:
        i, j = _check_bond(i, j, n_sites, "heisenberg")
        J = float(J)
        anti = bits[i] ^ bits[j]
        diag += 0.25 * J * (1 - 2 * anti)
        src = s[anti == 1]
        theta = tw.angle(i, j)
        # bit i = 0 (i down, j up): S^+_i S^-_j acts, phase e^{+i theta}; otherwise e^{-i theta}
        sign = 1 - 2 * ((src >> i) & 1)
        amp = 0.5 * J * np.exp(1j * theta * sign) if twist is not None else np.full(src.size, 0.5 * J)
        rows.append(src ^ ((1 << i) | (1 << j)))
        cols.append(src)
        vals.append(amp)

    for Q, bonds in projector_products:
        Q = float(Q)
        blist = [_check_bond(i, j, n_sites, "projector_products") for i, j in bonds]
        sites = [x for b in blist for x in b]
        if len(set(sites)) != len(sites):
            raise ValueError(f"build_hamiltonian: projector-product bonds not site-disjoint: {blist}")
        k = len(blist)
        ok = np.ones(dim, dtype=bool)
        for i, j in blist:
            ok &= (bits[i] ^ bits[j]) == 1
        src = s[ok]
        base = -Q * 0.5**k
        diag[ok] += base
        # off-diagonal factor of P_ij on an antiparallel pair: -(1/2) e^{+-i theta}
        factors = []
        for i, j in blist:
            theta = tw.angle(i, j)
            sign = 1 - 2 * ((src >> i) & 1)
            factors.append(-np.exp(1j * theta * sign) if twist is not None else np.full(src.size, -1.0))
        for subset in range(1, 1 << k):
            dst = src.copy()
            amp = np.full(src.size, base, dtype=dtype)
            for a, (i, j) in enumerate(blist):
                if (subset >> a) & 1:
                    dst ^= (1 << i) | (1 << j)
                    amp = amp * factors[a]
            rows.append(dst)
            cols.append(src)
            vals.append(amp)

    tw.check_used()
    if diagonal is not None:
        d = np.asarray(diagonal, dtype=float)
        if d.shape != (dim,):
            raise ValueError(f"build_hamiltonian: diagonal must have length {dim}, got shape {d.shape}")
        diag = diag + d
    r = np.concatenate(rows + [s])
    c = np.concatenate(cols + [s])
    v = np.concatenate([np.asarray(x, dtype=dtype) for x in vals] + [diag.astype(dtype)])
    H = sp.csr_matrix((v, (r, c)), shape=(dim, dim), dtype=dtype)
    H.sum_duplicates()
    H.eliminate_zeros()
    return H
