"""Validation of an abelian site-permutation group and its character table (exact-diagonalization
reference; numpy/scipy only).

A group is given as ``(perms, chars)``: ``perms[g, i]`` is the image of site ``i`` under element ``g`` and
``chars[k, g]`` the value at ``g`` of the one-dimensional irreducible representation ``k``.  The table must be
complete (G rows for G elements).  On basis states the element acts as T_g|s> = |g(s)> (the spin of site i
moves to perms[g, i]); a momentum-k state obeys T_g|psi> = chars[k, g] |psi>.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from .hamiltonian import basis_states, permute_states

__all__ = [
    "PermutationGroup",
    "validate_group",
    "SymmetryTable",
    "symmetry_table",
    "permute_operator",
    "operator_component",
]


@dataclass
class PermutationGroup:
    """Validated abelian permutation group with derived tables."""

    perms: np.ndarray  # (G, N)
    chars: np.ndarray  # (G, G)
    compose: np.ndarray  # (G, G): index of g o h
    mult: np.ndarray  # (G, G): mult[p, k] = index of the representation chars[p] * chars[k]
    trivial: int  # index of the all-ones representation
    generators: list[int] = field(default_factory=list)
    labels: list | None = None

    @property
    def order(self) -> int:
        return self.perms.shape[0]


def _fail(msg: str) -> None:
    raise ValueError(f"translations: {msg}")


def validate_group(translations, n_sites: int, tol: float = 1e-9) -> PermutationGroup:
    """Check closure, commutativity and the character table; return a :class:`PermutationGroup`."""
    try:
        perms, chars = translations[0], translations[1]
    except (TypeError, IndexError, KeyError):
        _fail("expected (perms, chars) or a SymmetryGroup")
    labels = list(translations[2]) if len(translations) > 2 else None
    perms = np.asarray(perms, dtype=np.int64)
    chars = np.asarray(chars, dtype=complex)
    if perms.ndim != 2 or perms.shape[1] != n_sites:
        _fail(f"perms must have shape (G, {n_sites}), got {perms.shape}")
    G = perms.shape[0]
    ident = np.arange(n_sites)
    for g in range(G):
        if not np.array_equal(np.sort(perms[g]), ident):
            _fail(f"perms[{g}] is not a permutation of 0..{n_sites - 1}")
    index = {perms[g].tobytes(): g for g in range(G)}
    if len(index) != G:
        _fail("perms contains repeated elements")
    if ident.astype(np.int64).tobytes() not in index:
        _fail("the identity permutation is missing")
    compose = np.empty((G, G), dtype=np.int64)
    for g in range(G):
        for h in range(G):
            key = perms[g][perms[h]].tobytes()  # apply h, then g
            if key not in index:
                _fail(f"not closed: perms[{g}] o perms[{h}] is not in the list")
            compose[g, h] = index[key]
    if not np.array_equal(compose, compose.T):
        _fail("the group is not abelian")
    if chars.shape != (G, G):
        _fail(f"chars must have shape ({G}, {G}) (a complete character table), got {chars.shape}")
    if np.abs(np.abs(chars) - 1).max() > tol:
        _fail("characters must have modulus 1")
    for g in range(G):
        for h in range(G):
            if np.abs(chars[:, compose[g, h]] - chars[:, g] * chars[:, h]).max() > tol:
                _fail(f"chars are not a representation at elements {g}, {h}")
    if np.abs(chars @ chars.conj().T / G - np.eye(G)).max() > tol:
        _fail("characters are not orthonormal (repeated representation?)")
    overlap = np.einsum("pg,kg,lg->pkl", chars, chars, chars.conj()) / G
    mult = np.argmax(np.abs(overlap), axis=2)
    trivial = int(np.argmax(np.abs(chars.sum(axis=1))))
    # greedy generating set
    generated = {int(np.flatnonzero((perms == ident).all(axis=1))[0])}
    generators: list[int] = []
    for g in range(G):
        if g in generated:
            continue
        generators.append(g)
        frontier = set(generated)
        while frontier:
            new = {int(compose[a, b]) for a in frontier for b in generators} - generated
            generated |= new
            frontier = new
    return PermutationGroup(perms, chars, compose, mult, trivial, generators, labels)


@dataclass
class SymmetryTable:
    """Abelian group acting on basis states through state maps (site permutations, optionally times the
    global spin flip s -> s XOR (2^N - 1)), with its character table.

    stmap[g, s] = image of state s; chars[k, g]; mult[p, k] = index of chars[p] * chars[k];
    conj[k] = index of conj(chars[k]); kindex[k] = index of the translation momentum of representation k;
    parity[k] = spin-flip eigenvalue (+1/-1, or 0 without the flip); generators: element indices that
    generate the group."""

    stmap: np.ndarray
    chars: np.ndarray
    mult: np.ndarray
    conj: np.ndarray
    kindex: np.ndarray
    parity: np.ndarray
    generators: list[int] = field(default_factory=list)

    @property
    def order(self) -> int:
        return self.stmap.shape[0]

    def fourier_support(self, values: np.ndarray) -> list[int]:
        """Representations p with a nonzero component O_p = (1/G) sum_g conj(chi_p(g)) T_g O T_g^dagger of the
        diagonal operator O (values on all basis states).  O_p maps representation k to mult[p, k]."""
        G = self.order
        moved = np.empty((G, values.size))
        for g in range(G):
            moved[g, self.stmap[g]] = values  # value O(g^{-1} s) at s
        comp = self.chars.conj() @ moved / G
        norms = np.sqrt((np.abs(comp) ** 2).sum(axis=1))
        return [int(p) for p in np.flatnonzero(norms > 1e-12 * max(np.linalg.norm(values), 1e-300))]


def permute_operator(A: sp.csr_matrix, stmap: np.ndarray) -> sp.csr_matrix:
    """T A T^dagger for the basis map T|s> = |stmap[s]>."""
    coo = A.tocoo()
    return sp.csr_matrix((coo.data, (stmap[coo.row], stmap[coo.col])), shape=A.shape)


def operator_component(table: SymmetryTable, A: sp.csr_matrix, tol: float = 1e-10) -> int:
    """Index p of the representation with T_g A T_g^dagger = chi_p(g) A for all g (A then maps
    representation k to mult[p, k]); ValueError if A is not such a single component."""
    norm2 = float(np.real(A.multiply(A.conj()).sum()))
    if norm2 == 0.0:
        return int(np.argmax(np.abs(table.chars.sum(axis=1))))
    lam = {}
    for g in table.generators:
        Ag = permute_operator(A, table.stmap[g])
        lam[g] = complex(A.conj().multiply(Ag).sum()) / norm2
        if abs(Ag - lam[g] * A).max() > tol * np.sqrt(norm2):
            raise ValueError("operator is not a single momentum / flip-parity component of the symmetry "
                             "group; use translations=None and spin_flip=False")
    for p in range(table.order):
        if all(abs(table.chars[p, g] - lam[g]) < 1e-8 for g in table.generators):
            return p
    raise ValueError("operator eigenvalues under the group match no representation")


def _conj_index(chars: np.ndarray) -> np.ndarray:
    return np.argmax(np.abs(chars.conj() @ chars.conj().T), axis=1)


def symmetry_table(group: PermutationGroup | None, n_sites: int, spin_flip: bool) -> SymmetryTable | None:
    """State-level table of ``group`` (None: no translations), extended by the spin flip if requested."""
    states = basis_states(n_sites)
    if group is None:
        stmap, chars = states[None, :], np.ones((1, 1), dtype=complex)
        mult, conj = np.zeros((1, 1), int), np.zeros(1, int)
        kindex, parity = np.zeros(1, int), np.zeros(1, int)
        gens: list[int] = []
    else:
        stmap = np.stack([permute_states(states, p) for p in group.perms])
        chars, mult, conj = group.chars, group.mult, _conj_index(group.chars)
        kindex, parity = np.arange(group.order), np.zeros(group.order, dtype=int)
        gens = list(group.generators)
    if not spin_flip:
        return None if group is None else SymmetryTable(stmap, chars, mult, conj, kindex, parity, gens)
    identity = int(np.flatnonzero((stmap == states[None, :]).all(axis=1))[0])
    G = stmap.shape[0]
    mask = (1 << n_sites) - 1
    sign = np.array([[1.0, 1.0], [1.0, -1.0]])  # sign[p, f]
    chars2 = np.einsum("pf,kg->pkfg", sign, chars).reshape(2 * G, 2 * G)
    p_of = np.repeat([0, 1], G)
    k_of = np.tile(np.arange(G), 2)
    mult2 = (p_of[:, None] ^ p_of[None, :]) * G + mult[k_of[:, None], k_of[None, :]]
    return SymmetryTable(np.concatenate([stmap, stmap ^ mask]), chars2, mult2, p_of * G + conj[k_of],
                         kindex[k_of], 1 - 2 * p_of, gens + [G + identity])
