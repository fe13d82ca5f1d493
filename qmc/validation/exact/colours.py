"""Exact diagonalization of SU(N) singlet-projector models (N colours per site) for the tests.

Independent reference: imports only numpy and its sibling module ``blocks`` (the Kubo kernel), never the
engine, ``models`` or any other part of ``qmc``; the Hamiltonian, the symmetry sectors and every observable
are written out here from their definitions.

Model: sites i = 0..n-1 with sublattice signs phi_i = +1 (A, fundamental representation of SU(N)) or -1 (B,
conjugate representation).  A basis state is a colour c_i = 0..N-1 per site, a B site's colour labelling
the conjugate state, so that the singlet of an A-B bond is N^(-1/2) sum_a |a a> and

    H = E_const - sum_t C_t prod_{(i, j) in t} P_ij,    <c c| P_ij |a a> = 1/N,   P_ij |a b> = 0 (a != b),

with site-disjoint bonds inside each product.  For N = 2 (colour 0 = up on A, down on B) P_ij is the
S = 1/2 singlet projector 1/4 - S_i.S_j.

Symmetry: the colour charges Q_c = sum_i phi_i delta(c_i, c) are conserved (P_ij takes |a a> to |c c> on
an A-B pair), so H is diagonalized in each sector of (Q_0, ..., Q_{N-1}) separately (dense).

Twist (stiffness): a twist theta of colour 0's U(1) along one lattice direction multiplies the amplitude
<c c|P_ij|a a> by exp(i theta q d_ij), q = phi_i (delta(a, 0) - delta(c, 0)) the colour-0 charge moved from
i to j and d_ij the bond's displacement along the direction; rho = (1/n) d^2F/dtheta^2 at theta = 0
(second difference of the free energy, F(-theta) = F(theta) since H(-theta) = conj H(theta)).
"""

from __future__ import annotations

import itertools
from collections.abc import Sequence

import numpy as np

from .blocks import kubo_kernel

__all__ = ["ColourSpectrum", "colour_states", "open_square_bonds", "open_square_plaquette_pairs",
           "chain_pair_products"]

Bond = tuple[int, int]


def colour_states(n_sites: int, n_colours: int) -> np.ndarray:
    """All N^n basis states as int8[N^n, n], state number = sum_i c_i N^i."""
    codes = np.arange(n_colours ** n_sites, dtype=np.int64)
    return np.stack([(codes // n_colours ** i) % n_colours for i in range(n_sites)], axis=1).astype(np.int8)


def open_square_bonds(Lx: int, Ly: int) -> tuple[list[Bond], list[Bond]]:
    """Bonds (x_bonds, y_bonds) of the Lx x Ly square lattice with open boundaries, site = y*Lx + x, each
    bond (site, site + unit vector)."""
    xb = [(y * Lx + x, y * Lx + x + 1) for y in range(Ly) for x in range(Lx - 1)]
    yb = [(y * Lx + x, (y + 1) * Lx + x) for y in range(Ly - 1) for x in range(Lx)]
    return xb, yb


def open_square_plaquette_pairs(Lx: int, Ly: int) -> list[list[Bond]]:
    """The two parallel bonds of every 2x2 plaquette of the open Lx x Ly square lattice, both orientations."""
    out = []
    for y in range(Ly - 1):
        for x in range(Lx - 1):
            s = y * Lx + x
            out.append([(s, s + 1), (s + Lx, s + Lx + 1)])  # two x-bonds
            out.append([(s, s + Lx), (s + 1, s + 1 + Lx)])  # two y-bonds
    return out


def chain_pair_products(L: int) -> list[list[Bond]]:
    """P_{x,x+1} P_{x+2,x+3} at every x of the periodic chain (the J-Q chain's product)."""
    return [[(x, (x + 1) % L), ((x + 2) % L, (x + 3) % L)] for x in range(L)]


class ColourSpectrum:
    """Eigen-decomposition of H by colour-charge sectors, and thermal averages.

    ``products``: list of (C_t, [(i, j), ...]) for the terms -C_t prod P_ij; ``phase``: phi_i (+1 on A,
    -1 on B); ``constant``: E_const.  ``displacement`` (optional): dict bond -> displacement along the
    twisted direction, used by :meth:`stiffness`.
    """

    def __init__(self, n_colours: int, phase: Sequence[int], products: Sequence[tuple[float, Sequence[Bond]]],
                 constant: float = 0.0, displacement: dict[Bond, float] | None = None) -> None:
        self.N = int(n_colours)
        self.phase = np.asarray(phase, dtype=np.int64)
        self.n = self.phase.size
        self.products = [(float(c), [tuple(b) for b in bonds]) for c, bonds in products]
        for _, bonds in self.products:
            for i, j in bonds:
                if self.phase[i] == self.phase[j]:
                    raise ValueError(f"bond ({i}, {j}) joins two sites of the same sublattice")
        self.constant = float(constant)
        self.displacement = dict(displacement or {})
        self.states = colour_states(self.n, self.N)
        charges = np.stack([(self.phase[None, :] * (self.states == c)).sum(axis=1) for c in range(self.N)], 1)
        _, label = np.unique(charges, axis=0, return_inverse=True)
        self.sectors = [np.flatnonzero(label.ravel() == s) for s in range(label.max() + 1)]
        self.weights_of_code = self.N ** np.arange(self.n, dtype=np.int64)
        self.E, self.V = [], []
        for sec in self.sectors:
            e, v = np.linalg.eigh(self._block(sec, 0.0))
            self.E.append(e)
            self.V.append(v)
        self.E0 = min(float(e.min()) for e in self.E)

    # ---------------------------------------------------------------- Hamiltonian
    def _block(self, sec: np.ndarray, theta: float) -> np.ndarray:
        """Dense H (with the twist theta of colour 0) in one charge sector (rows/columns = ``sec``)."""
        pos = np.full(self.N ** self.n, -1, dtype=np.int64)
        pos[sec] = np.arange(sec.size)
        H = np.zeros((sec.size, sec.size), dtype=complex if theta else float)
        H[np.arange(sec.size), np.arange(sec.size)] = self.constant
        st = self.states[sec]
        for coupling, bonds in self.products:
            ok = np.all([st[:, i] == st[:, j] for i, j in bonds], axis=0)
            cols = np.flatnonzero(ok)
            base = sec[cols] - sum(st[cols, i].astype(np.int64) * self.weights_of_code[i]
                                   + st[cols, j].astype(np.int64) * self.weights_of_code[j] for i, j in bonds)
            amp = coupling / self.N ** len(bonds)
            for new in itertools.product(range(self.N), repeat=len(bonds)):
                code = base.copy()
                phase = np.zeros(cols.size)
                for (i, j), c in zip(bonds, new, strict=True):
                    code += c * (self.weights_of_code[i] + self.weights_of_code[j])
                    moved = self.phase[i] * ((st[cols, i] == 0).astype(float) - float(c == 0))
                    phase += moved * self.displacement.get((i, j), 0.0)
                rows = pos[code]
                value = -amp * (np.exp(1j * theta * phase) if theta else 1.0)
                np.add.at(H, (rows, cols), value)
        return H

    # ---------------------------------------------------------------- thermal averages
    def _boltzmann(self, beta: float) -> tuple[list[np.ndarray], float]:
        w = [np.exp(-beta * (e - self.E0)) for e in self.E]
        return w, float(sum(x.sum() for x in w))

    def energy(self, beta: float) -> float:
        """<H> / n."""
        w, Z = self._boltzmann(beta)
        return float(sum((x * e).sum() for x, e in zip(w, self.E, strict=True)) / Z / self.n)

    def specific_heat(self, beta: float) -> float:
        """beta^2 (<H^2> - <H>^2) / n."""
        w, Z = self._boltzmann(beta)
        e1 = sum((x * e).sum() for x, e in zip(w, self.E, strict=True)) / Z
        e2 = sum((x * e * e).sum() for x, e in zip(w, self.E, strict=True)) / Z
        return float(beta**2 * (e2 - e1**2) / self.n)

    def diagonal(self, beta: float, values: np.ndarray) -> float:
        """<O> for O diagonal in the colour basis, ``values[state]`` for all N^n states."""
        w, Z = self._boltzmann(beta)
        total = 0.0
        for sec, v, x in zip(self.sectors, self.V, w, strict=True):
            total += float(((v * v) @ x) @ values[sec])
        return total / Z

    def kubo(self, beta: float, values: np.ndarray) -> float:
        """(1/n) int_0^beta dtau <O(tau) O(0)> for O diagonal in the colour basis (spectral sum with the
        Kubo kernel (e^{-beta E_n} - e^{-beta E_m}) / (E_m - E_n))."""
        _, Z = self._boltzmann(beta)
        total = 0.0
        for sec, v, e in zip(self.sectors, self.V, self.E, strict=True):
            m = v.T @ (values[sec][:, None] * v)
            total += float((m * m * kubo_kernel((e - self.E0)[:, None], (e - self.E0)[None, :], beta)).sum())
        return total / Z / self.n

    def free_energy(self, beta: float, theta: float = 0.0) -> float:
        """F(theta) = -(1/beta) ln Tr exp(-beta H(theta))."""
        logs = []
        for sec, e in zip(self.sectors, self.E, strict=True):
            if theta:
                e = np.linalg.eigvalsh(self._block(sec, theta))
            logs.append(-beta * (e - self.E0))
        big = np.concatenate(logs)
        return float(self.E0 - (np.log(np.exp(big - big.max()).sum()) + big.max()) / beta)

    def stiffness(self, beta: float, h: float = 2e-3) -> float:
        """rho = (1/n) d^2F/dtheta^2 at theta = 0 for the twist of colour 0 along the ``displacement``
        direction: 2 (F(h) - F(0)) / (n h^2) (even in theta), corrected to O(h^4) by Richardson extrapolation
        with step 2h."""
        f0 = self.free_energy(beta)
        d1 = 2.0 * (self.free_energy(beta, h) - f0) / h**2
        d2 = 2.0 * (self.free_energy(beta, 2 * h) - f0) / (2 * h) ** 2
        return float((4.0 * d1 - d2) / 3.0 / self.n)

    # ---------------------------------------------------------------- diagonal observables
    def staggered_order(self) -> np.ndarray:
        """m_s = (1/n) sum_i (delta(c_i, 0) - 1/N) for every state (M_s / n at N = 2)."""
        return ((self.states == 0) - 1.0 / self.N).sum(axis=1) / self.n

    def colour_charge(self) -> np.ndarray:
        """Q_0 = sum_i phi_i (delta(c_i, 0) - 1/N) for every state (sum_i S^z_i at N = 2)."""
        return (self.phase[None, :] * ((self.states == 0) - 1.0 / self.N)).sum(axis=1)

    def bond_variable(self, i: int, j: int) -> np.ndarray:
        """B_ij = delta(c_i, c_j) - 1/N for every state (-2 S^z_i S^z_j at N = 2)."""
        return (self.states[:, i] == self.states[:, j]) - 1.0 / self.N
