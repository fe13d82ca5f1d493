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

Ground-state profiles per column c (``strip_ground_state``), with B_b = <S^z_i S^z_j> of bond b:

    D_x(c) = (1/Ly) sum over the x-bonds b touching column c of (1/2) (-1)^(x of the left site) B_b
    D_y(c) = (1/Ly) sum over the y-bonds b of column c of (-1)^(y of the lower site) B_b
    e(c)   = (1/Ly) sum_t f_tc <h_t>,  h_t = J_t S_i.S_j or -Q_t P P P, f_tc = (sites of t in column c) / (2k)
"""

from __future__ import annotations

import numpy as np

from .hamiltonian import basis_states, build_hamiltonian, popcount

__all__ = ["STRIP_WALLS", "strip_terms", "strip_kappa", "strip_ground_state"]

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


def strip_ground_state(Lx: int, Ly: int, J: float, Q: float, wall: str, pin: float) -> dict:
    """Ground state of the pinned strip (a singlet, in the S^z = 0 sector): ``energy`` (total), ``gap`` to
    the next level (lowest of the second S^z = 0 level and the lowest S^z = 1 level), and the column
    profiles ``D_x``, ``D_y``, ``e`` (float64[Lx], formulas in the module docstring)."""
    from scipy.sparse.linalg import eigsh

    heis, q3 = strip_terms(Lx, Ly, J, Q, wall, pin)
    n = Lx * Ly
    H = build_hamiltonian(n, heis, q3)
    states = basis_states(n)
    n_up = popcount(states, n)
    S0, S1 = np.flatnonzero(n_up == n // 2), np.flatnonzero(n_up == n // 2 + 1)
    E, V = eigsh(H[S0][:, S0], k=2, which="SA", tol=1e-12)
    order = np.argsort(E)
    E, psi = E[order], V[:, order[0]]
    E1 = eigsh(H[S1][:, S1], k=1, which="SA", tol=1e-12, return_eigenvectors=False)[0]
    prob = psi**2
    sz = ((states[S0, None] >> np.arange(n)) & 1) - 0.5  # (D, n)

    def corr(i: int, j: int) -> float:
        return float(prob @ (sz[:, i] * sz[:, j]))

    dx, dy, e = np.zeros(Lx), np.zeros(Lx), np.zeros(Lx)
    for y in range(Ly):
        for x in range(Lx):
            i = y * Lx + x
            dy[x] += (-1) ** y * corr(i, ((y + 1) % Ly) * Lx + x)
            if x + 1 < Lx:
                half = 0.5 * (-1) ** x * corr(i, i + 1)
                dx[x] += half
                dx[x + 1] += half
    terms = [([(c, i, j)], [], [(i, j)]) for c, i, j in heis] + [([], [(c, b)], b) for c, b in q3]
    for h_heis, h_q3, bonds in terms:
        h = build_hamiltonian(n, h_heis, h_q3)[S0][:, S0]
        value = float(psi @ (h @ psi))
        sites = [s for b in bonds for s in b]
        for s in sites:
            e[s % Lx] += value / len(sites)
    return {"energy": float(E[0]), "gap": float(min(E[1], E1) - E[0]), "D_x": dx / Ly, "D_y": dy / Ly,
            "e": e / Ly}


def strip_kappa(energies: dict[str, float], wall: str, Ly: int) -> float:
    """kappa = (E_wall - mean of its references' E) / Ly from total energies keyed by wall."""
    ref = np.mean([energies[r] for r in _REFERENCES[wall]])
    return (energies[wall] - ref) / Ly
