"""Lattice helpers for the exact-diagonalization reference.

Independent of ``models`` and of the engine (imports only numpy): the geometry is written twice, once here
and once in ``models``, and the two are compared through the physics.

Conventions (all lattices periodic):

* chain: site = x, bonds (x, x+1 mod L);
* square lattice Lx x Ly: site = y*Lx + x;
* bilayer of two Lx x Ly layers: site = layer*Lx*Ly + y*Lx + x.

Every in-plane bond ``(a, b)`` is oriented so that ``b`` is ``a`` displaced by +1 along the bond's lattice
direction; a twist angle ``phi`` along that direction is then applied as ``{bond: +phi}``.  For a
periodic length of 2 the two bonds (a, b) and (b, a) both exist (doubled bond), as on any periodic lattice.

Symmetry groups are returned as :class:`SymmetryGroup`: ``perms[g, i]`` is the image of site ``i`` under
group element ``g``; ``chars[k, g]`` is the character of irreducible representation (momentum sector)
``k`` at element ``g``, ``chars[k, g] = exp(-i k.t_g)`` (times the layer parity for the bilayer swap);
``labels[k]`` names the sector, e.g. ``(kx, ky)`` in radians.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

__all__ = [
    "SymmetryGroup",
    "chain_bonds",
    "square_bonds",
    "bilayer_bonds",
    "staggered_signs_chain",
    "staggered_signs_square",
    "staggered_signs_bilayer",
    "q2_plaquette_pairs",
    "q3_columns",
    "chain_translations",
    "square_translations",
    "bilayer_translations",
]

Bond = tuple[int, int]


class SymmetryGroup(NamedTuple):
    """Finite abelian site-permutation group with its full character table."""

    perms: np.ndarray  # (G, N) int: perms[g, i] = image of site i
    chars: np.ndarray  # (G, G) complex: chars[k, g]
    labels: list  # length G: a label per irreducible representation


def _site(x: int, y: int, Lx: int, Ly: int, layer: int = 0) -> int:
    return layer * Lx * Ly + (y % Ly) * Lx + (x % Lx)


def chain_bonds(L: int) -> list[Bond]:
    """Periodic chain bonds ``(x, x+1 mod L)``, L >= 2."""
    if L < 2:
        raise ValueError(f"chain_bonds: need L >= 2, got {L}")
    return [(x, (x + 1) % L) for x in range(L)]


def square_bonds(Lx: int, Ly: int) -> tuple[list[Bond], list[Bond]]:
    """Periodic square-lattice bonds ``(x_bonds, y_bonds)``; each bond is (site, site + unit vector)."""
    if Lx < 2 or Ly < 2:
        raise ValueError(f"square_bonds: need Lx, Ly >= 2, got {Lx}x{Ly}")
    xb = [(_site(x, y, Lx, Ly), _site(x + 1, y, Lx, Ly)) for y in range(Ly) for x in range(Lx)]
    yb = [(_site(x, y, Lx, Ly), _site(x, y + 1, Lx, Ly)) for y in range(Ly) for x in range(Lx)]
    return xb, yb


def bilayer_bonds(Lx: int, Ly: int) -> tuple[list[Bond], list[Bond], list[Bond]]:
    """Bilayer bonds ``(x_bonds, y_bonds, rungs)``; in-plane bonds of both layers, rungs (i, i + Lx*Ly)."""
    xb, yb = square_bonds(Lx, Ly)
    n = Lx * Ly
    xb2 = xb + [(a + n, b + n) for a, b in xb]
    yb2 = yb + [(a + n, b + n) for a, b in yb]
    rungs = [(i, i + n) for i in range(n)]
    return xb2, yb2, rungs


def staggered_signs_chain(L: int) -> np.ndarray:
    """phi_x = (-1)^x (meaningful for even L)."""
    return np.array([(-1) ** x for x in range(L)], dtype=float)


def staggered_signs_square(Lx: int, Ly: int) -> np.ndarray:
    """phi_i = (-1)^(x+y) for site i = y*Lx + x (meaningful for even Lx, Ly)."""
    return np.array([(-1) ** (x + y) for y in range(Ly) for x in range(Lx)], dtype=float)


def staggered_signs_bilayer(Lx: int, Ly: int) -> np.ndarray:
    """phi_i = (-1)^(x+y+layer) for site i = layer*Lx*Ly + y*Lx + x."""
    s = staggered_signs_square(Lx, Ly)
    return np.concatenate([s, -s])


def q2_plaquette_pairs(Lx: int, Ly: int) -> list[list[Bond]]:
    """J-Q2 placements: for every plaquette with lower-left corner (x, y), the two horizontal bonds
    {(x,y)-(x+1,y), (x,y+1)-(x+1,y+1)} and the two vertical bonds {(x,y)-(x,y+1), (x+1,y)-(x+1,y+1)}.
    Returns 2*Lx*Ly bond pairs (horizontal ones first)."""
    if Lx < 2 or Ly < 2:
        raise ValueError(f"q2_plaquette_pairs: need Lx, Ly >= 2, got {Lx}x{Ly}")
    out: list[list[Bond]] = []
    for y in range(Ly):
        for x in range(Lx):
            out.append([(_site(x, y, Lx, Ly), _site(x + 1, y, Lx, Ly)),
                        (_site(x, y + 1, Lx, Ly), _site(x + 1, y + 1, Lx, Ly))])
    for y in range(Ly):
        for x in range(Lx):
            out.append([(_site(x, y, Lx, Ly), _site(x, y + 1, Lx, Ly)),
                        (_site(x + 1, y, Lx, Ly), _site(x + 1, y + 1, Lx, Ly))])
    return out


def q3_columns(Lx: int, Ly: int) -> list[list[Bond]]:
    """J-Q3 placements: three parallel bonds stacked in a column.  For each (x, y): horizontal bonds
    (x,y+d)-(x+1,y+d), d = 0, 1, 2, and vertical bonds (x+d,y)-(x+d,y+1), d = 0, 1, 2.
    Returns 2*Lx*Ly bond triples (horizontal ones first).  Needs Lx, Ly >= 3 for site-disjoint bonds."""
    if Lx < 3 or Ly < 3:
        raise ValueError(f"q3_columns: need Lx, Ly >= 3, got {Lx}x{Ly}")
    out: list[list[Bond]] = []
    for y in range(Ly):
        for x in range(Lx):
            out.append([(_site(x, y + d, Lx, Ly), _site(x + 1, y + d, Lx, Ly)) for d in range(3)])
    for y in range(Ly):
        for x in range(Lx):
            out.append([(_site(x + d, y, Lx, Ly), _site(x + d, y + 1, Lx, Ly)) for d in range(3)])
    return out


def _torus_group(Lx: int, Ly: int, n_layers: int, layer_swap: bool) -> SymmetryGroup:
    n_plane = Lx * Ly
    swaps = (0, 1) if layer_swap else (0,)
    elements = [(tx, ty, s) for s in swaps for ty in range(Ly) for tx in range(Lx)]
    perms = np.empty((len(elements), n_layers * n_plane), dtype=np.int64)
    for g, (tx, ty, s) in enumerate(elements):
        for layer in range(n_layers):
            new_layer = (n_layers - 1 - layer) if s else layer
            for y in range(Ly):
                for x in range(Lx):
                    perms[g, _site(x, y, Lx, Ly, layer)] = _site(x + tx, y + ty, Lx, Ly, new_layer)
    irreps = [(m, n, p) for p in swaps for n in range(Ly) for m in range(Lx)]
    chars = np.empty((len(irreps), len(elements)), dtype=complex)
    labels = []
    for k, (m, n, p) in enumerate(irreps):
        kx, ky = 2 * np.pi * m / Lx, 2 * np.pi * n / Ly
        for g, (tx, ty, s) in enumerate(elements):
            chars[k, g] = np.exp(-1j * (kx * tx + ky * ty)) * (-1) ** (p * s)
        labels.append((kx, ky, 1 - 2 * p) if layer_swap else (kx, ky))
    return SymmetryGroup(perms, chars, labels)


def chain_translations(L: int) -> SymmetryGroup:
    """All L translations x -> x + t of a periodic chain; labels are momenta k = 2 pi m / L."""
    grp = _torus_group(L, 1, 1, False)
    return SymmetryGroup(grp.perms, grp.chars, [lab[0] for lab in grp.labels])


def square_translations(Lx: int, Ly: int) -> SymmetryGroup:
    """All Lx*Ly translations of the periodic square lattice; labels (kx, ky)."""
    return _torus_group(Lx, Ly, 1, False)


def bilayer_translations(Lx: int, Ly: int, layer_swap: bool = False) -> SymmetryGroup:
    """Translations acting on both layers, optionally times the layer exchange (labels (kx, ky, parity))."""
    return _torus_group(Lx, Ly, 2, layer_swap)
