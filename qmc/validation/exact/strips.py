"""Exact thermal energies of J-Q3 strips with pinned edges (open along x, periodic along y).

Independent reference: imports only numpy and the sibling modules of this package, never the engine,
``models`` or any other part of ``qmc``; the geometry and the pinning rule are written out again here.

Cluster: Lx x Ly sites ``i = y*Lx + x``, open along x (no bond between x = Lx-1 and x = 0), periodic along y.

    H = sum_<ij> J_ij S_i.S_j - sum_t Q_t P P P,    P_ij = 1/4 - S_i.S_j,

with nearest-neighbour bonds (x, y)-(x+1, y) for x < Lx-1 and (x, y)-(x, y+1 mod Ly), and the J-Q3 terms:
three parallel x-bonds (x, y+d)-(x+1, y+d), d = 0, 1, 2 (x < Lx-1), and three parallel y-bonds
(x+d, y)-(x+d, y+1), d = 0, 1, 2 (x < Lx-2).  Without pinning J_ij = J and Q_t = Q.

Pinned edges: an edge pattern is a set of dimers, ``("y", p)``: the y-bonds whose lower site has y = p mod 2,
``("x", p)``: the x-bonds whose left site has x = p mod 2.  A term (a J bond or a Q3 triple) all of whose
bonds are dimers of the left edge's pattern and which has a site in column x = 0 gets its coupling times
``pin``; likewise for the right edge and column x = Lx-1.  The walls (left pattern, right pattern):

    none: (y, 0), (y, 0)    pi: (y, 0), (y, 1)    pi/2: (y, 0), (x, 0)    none-x: (x, 0), (x, 0)

The wall energy per unit length compared with the simulation is kappa = (E_wall - E_ref) / Ly with total
energies, E_ref = E_none for the pi wall and (E_none + E_none-x) / 2 for the pi/2 wall.
"""

from __future__ import annotations

import numpy as np

from .hamiltonian import basis_states, build_hamiltonian, popcount

__all__ = ["STRIP_WALLS", "strip_terms", "strip_energy", "strip_kappa"]

STRIP_WALLS = {"none": (("y", 0), ("y", 0)), "pi": (("y", 0), ("y", 1)), "pi/2": (("y", 0), ("x", 0)),
               "none-x": (("x", 0), ("x", 0))}
_REFERENCES = {"pi": ("none",), "pi/2": ("none", "none-x")}

Bond = tuple[int, int]


def _is_dimer(bond: Bond, pattern: tuple[str, int], Lx: int, Ly: int) -> bool:
    (x0, y0), (x1, y1) = divmod(bond[0], Lx)[::-1], divmod(bond[1], Lx)[::-1]
    direction, parity = pattern
    if direction == "x":
        return y0 == y1 and abs(x1 - x0) == 1 and min(x0, x1) % 2 == parity
    if x0 != x1:
        return False
    lower = y0 if (y0 + 1) % Ly == y1 else y1
    return lower % 2 == parity


def _factor(bonds: list[Bond], wall: str, pin: float, Lx: int, Ly: int) -> float:
    for pattern, column in zip(STRIP_WALLS[wall], (0, Lx - 1), strict=True):
        touches = any(site % Lx == column for b in bonds for site in b)
        if touches and all(_is_dimer(b, pattern, Lx, Ly) for b in bonds):
            return pin
    return 1.0


def strip_terms(Lx: int, Ly: int, J: float, Q: float, wall: str | None = None, pin: float = 1.0
                ) -> tuple[list[tuple[float, int, int]], list[tuple[float, list[Bond]]]]:
    """(Heisenberg triples (J_ij, i, j), Q3 terms (Q_t, [three bonds])) of the strip (module docstring)."""
    if Lx < 3 or Ly < 3:
        raise ValueError(f"strip_terms: need Lx, Ly >= 3, got {Lx}x{Ly}")

    def site(x: int, y: int) -> int:
        return (y % Ly) * Lx + x

    bonds = [(site(x, y), site(x + 1, y)) for y in range(Ly) for x in range(Lx - 1)]
    bonds += [(site(x, y), site(x, y + 1)) for y in range(Ly) for x in range(Lx)]
    triples = [[(site(x, y + d), site(x + 1, y + d)) for d in range(3)]
               for y in range(Ly) for x in range(Lx - 1)]
    triples += [[(site(x + d, y), site(x + d, y + 1)) for d in range(3)]
                for y in range(Ly) for x in range(Lx - 2)]

    def scale(b: list[Bond]) -> float:
        return 1.0 if wall is None else _factor(b, wall, pin, Lx, Ly)

    heis = [(J * scale([b]), b[0], b[1]) for b in bonds] if J else []
    q3 = [(Q * scale(t), t) for t in triples] if Q else []
    return heis, q3


def strip_energy(Lx: int, Ly: int, beta: float, J: float, Q: float, wall: str, pin: float,
                 levels: int = 8) -> tuple[float, float]:
    """Thermal total energy <H> of the pinned strip at inverse temperature beta, from the ``levels`` lowest
    eigenvalues of every total-S^z sector (Lanczos; sectors with S^z and -S^z share their spectrum).

    Returns ``(energy, neglected)``: ``neglected`` bounds the Boltzmann weight of the levels left out
    relative to Z (each sector's missing levels lie at or above its highest computed one), so the energy
    is exact to about ``neglected`` times the spread of the spectrum.  Low temperatures only: at
    ``beta * gap`` of order 10 and more a few levels per sector are plenty.
    """
    from scipy.sparse.linalg import eigsh

    heis, q3 = strip_terms(Lx, Ly, J, Q, wall, pin)
    n = Lx * Ly
    H = build_hamiltonian(n, heis, q3)
    states = basis_states(n)
    n_up = popcount(states, n)
    spectra, missing = [], []
    for m in range((n + 1) // 2, n + 1):
        S = np.flatnonzero(n_up == m)
        block = H[S][:, S]
        if S.size <= max(4 * levels, 64):
            E = np.linalg.eigvalsh(block.toarray())
        else:
            E = np.sort(eigsh(block, k=levels, which="SA", tol=1e-12, return_eigenvectors=False))
        copies = 1 if 2 * m == n else 2
        spectra.append((E, copies))
        missing.append((S.size - E.size, E[-1], copies))
    E0 = min(E.min() for E, _ in spectra)
    weights = [(E, c * np.exp(-beta * (E - E0))) for E, c in spectra]
    Z = sum(w.sum() for _, w in weights)
    energy = sum((E * w).sum() for E, w in weights) / Z
    neglected = sum(c * k * np.exp(-beta * (top - E0)) for k, top, c in missing) / Z
    return float(energy), float(neglected)


def strip_kappa(energies: dict[str, float], wall: str, Ly: int) -> float:
    """kappa = (E_wall - mean of its references' E) / Ly from total energies keyed by wall."""
    ref = np.mean([energies[r] for r in _REFERENCES[wall]])
    return (energies[wall] - ref) / Ly
