"""Shapes of projector-product terms ``-Q prod_{a=1..k} P_{i_a j_a}`` on square-type lattices.

A *shape* is a tuple of k = 1..3 bonds, each a pair of unit-cell offsets ``((dx0, dy0), (dx1, dy1))`` on
the square lattice.  Placing a shape at cell (x, y) gives the bonds ``(x + dx0, y + dy0) - (x + dx1,
y + dy1)``.  Named shapes (:data:`SHAPES`):

``bond``             one x-bond,                                ((0,0),(1,0))
``plaquette-pair``   two parallel x-bonds on a 2x2 plaquette,   ((0,0),(1,0)), ((0,1),(1,1))
``column-of-three``  three parallel x-bonds stacked at y=0,1,2, ((0,0),(1,0)), ((0,1),(1,1)), ((0,2),(1,2))

A valid shape has site-disjoint bonds and every bond joins opposite sublattices (|dx| + |dy| odd).
Shapes are stored in a canonical form: every bond points "forward" (its first non-zero offset component
is positive, so x- and y-bonds have the same orientation and displacement as the lattice's ``x``/``y``
classes), bonds are sorted and the shape is translated so its smallest endpoint is (0, 0).

:func:`rotations` gives the distinct copies under the 90-degree rotations of the square lattice (C4;
reflections are not added), so the x-oriented ``plaquette-pair`` gains exactly one y-oriented copy and the
term has 2N placements on an N-site torus; the same holds for ``column-of-three``.  :func:`translate_shape`
places a shape at every unit cell (and, on the bilayer, in each layer separately).  Every placement on a
torus is kept, even when two placements coincide as operators (possible for a periodic length 2), which
is the same torus convention as for the lattice bonds.  Along an open direction, placements that stick out
of the lattice are dropped.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from .errors import ModelError, unknown_name
from .lattice import Lattice

__all__ = ["Shape", "SHAPES", "SHAPE_LATTICES", "parse_shape", "rotations", "translate_shape", "place_shape"]

Shape = tuple[tuple[tuple[int, int], tuple[int, int]], ...]

SHAPES: dict[str, Shape] = {
    "bond": (((0, 0), (1, 0)),),
    "plaquette-pair": (((0, 0), (1, 0)), ((0, 1), (1, 1))),
    "column-of-three": (((0, 0), (1, 0)), ((0, 1), (1, 1)), ((0, 2), (1, 2))),
}
#: lattice kinds on which shapes can be placed (the bilayer places them inside each layer)
SHAPE_LATTICES = ("square", "bilayer")
MAX_BONDS = 3


def parse_shape(shape: str | Sequence) -> tuple[str | None, Shape]:
    """(name or None, canonical shape) of a named or user shape; ModelError if it is not valid."""
    if isinstance(shape, str):
        if shape not in SHAPES:
            raise unknown_name("shape", shape, SHAPES, "shape")
        return shape, canonical(SHAPES[shape])
    try:
        arr = np.asarray(shape)
    except ValueError:
        arr = np.zeros(0)
    if arr.ndim != 3 or arr.shape[1:] != (2, 2) or not 1 <= arr.shape[0] <= MAX_BONDS:
        raise ModelError(f"a shape is a shape name or a list of 1 to {MAX_BONDS} bonds "
                         f"[[dx0, dy0], [dx1, dy1]], got {shape!r}", "shape")
    if not (np.issubdtype(arr.dtype, np.integer) or
            (np.issubdtype(arr.dtype, np.floating) and np.all(arr == np.round(arr)))):
        raise ModelError(f"shape offsets must be integers, got {shape!r}", "shape")
    arr = arr.astype(np.int64)
    for b, ((x0, y0), (x1, y1)) in enumerate(arr.tolist()):
        if (abs(x1 - x0) + abs(y1 - y0)) % 2 == 0:
            raise ModelError(f"bond ({x0},{y0})-({x1},{y1}) joins two sites of the same sublattice (or a "
                             "site to itself); such a term has a sign problem", f"shape[{b}]")
    points = [tuple(p) for p in arr.reshape(-1, 2).tolist()]
    for n, p in enumerate(points):
        if p in points[:n]:
            raise ModelError(f"bonds {points.index(p) // 2} and {n // 2} share the site {p}; the bonds of a "
                             "projector product must be site-disjoint", f"shape[{n // 2}]")
    return None, canonical(tuple((tuple(b[0]), tuple(b[1])) for b in arr.tolist()))


def canonical(shape: Shape) -> Shape:
    """Forward-pointing bonds, sorted, translated so that the smallest endpoint is (0, 0)."""
    bonds = [tuple(sorted(b)) for b in shape]  # tuple order: first non-zero offset component positive
    origin = min(p for b in bonds for p in b)
    moved = [tuple((p[0] - origin[0], p[1] - origin[1]) for p in b) for b in bonds]
    return tuple(sorted(moved))


def _check_lattice(lattice: Lattice) -> None:
    if lattice.kind not in SHAPE_LATTICES:
        raise ModelError(f"projector-product shapes are defined on square-type lattices "
                         f"({', '.join(SHAPE_LATTICES)}), not on the {lattice.kind} lattice", "shape")


def rotations(lattice: Lattice, shape: Shape) -> list[Shape]:
    """The distinct canonical copies of ``shape`` under the lattice's 90-degree rotations (C4)."""
    _check_lattice(lattice)
    out: list[Shape] = []
    current = canonical(shape)
    for _ in range(4):
        if current not in out:
            out.append(current)
        current = canonical(tuple(tuple((-y, x) for x, y in b) for b in current))
    return out


def translate_shape(lattice: Lattice, shape: Shape) -> tuple[np.ndarray, np.ndarray]:
    """All placements of ``shape``: sites int32[P, k, 2] and displacements float64[P, k, D].

    Placements run over every unit cell (x fastest), then over the layers of a bilayer.  ModelError if a
    bond is longer than half a periodic length (its minimum image would be ambiguous), or if on this
    lattice a placement wraps onto itself (bonds no longer site-disjoint).
    """
    _check_lattice(lattice)
    pts = np.asarray(shape, dtype=np.int64)  # (k, end, axis)
    vec = pts[:, 1, :] - pts[:, 0, :]
    wraps = lattice.periodic or (lattice.boundary == "periodic",) * len(lattice.size)
    for a, length in enumerate(lattice.size):
        if wraps[a] and np.any(2 * np.abs(vec[:, a]) > length):
            raise ModelError(f"a bond of the shape spans {np.abs(vec[:, a]).max()} cells along "
                             f"{lattice.dir_names[a]}, more than half the periodic length {length}", "shape")
    lx, ly = lattice.size
    cx, cy = np.arange(lx * ly) % lx, np.arange(lx * ly) // lx
    xs = cx[:, None, None] + pts[None, :, :, 0]
    ys = cy[:, None, None] + pts[None, :, :, 1]
    sites = np.concatenate([lattice.site_index(xs, ys, sub=layer) for layer in range(lattice.sites_per_cell)])
    sites = sites[np.all(sites >= 0, axis=(1, 2))]
    flat = np.sort(sites.reshape(sites.shape[0], -1), axis=1)
    clash = np.flatnonzero(np.any(flat[:, 1:] == flat[:, :-1], axis=1))
    if clash.size:
        raise ModelError(f"the shape {list(shape)} wraps onto itself on the {lx}x{ly} {lattice.kind} "
                         f"lattice (a placement uses a site twice, e.g. sites {sites[clash[0]].tolist()}); "
                         "use a larger lattice", "shape")
    sub = lattice.sublattice
    same = np.flatnonzero(np.any(sub[sites[..., 0]] == sub[sites[..., 1]], axis=1))
    if same.size:  # cannot happen for a valid shape on a bipartite lattice; kept as a guard
        raise ModelError(f"a placement joins two sites of the same sublattice: {sites[same[0]].tolist()}",
                         "shape")
    disp = np.broadcast_to(vec.astype(np.float64), (sites.shape[0], *vec.shape))
    return np.ascontiguousarray(sites, dtype=np.int32), np.ascontiguousarray(disp)


def place_shape(lattice: Lattice, shape: str | Sequence, symmetrize: bool = True
                ) -> tuple[np.ndarray, np.ndarray]:
    """Placements of a named or user shape, over all rotations if ``symmetrize``; see translate_shape."""
    _check_lattice(lattice)
    _, canon = parse_shape(shape)
    copies = rotations(lattice, canon) if symmetrize else [canon]
    placed = [translate_shape(lattice, s) for s in copies]
    return (np.ascontiguousarray(np.concatenate([p[0] for p in placed])),
            np.ascontiguousarray(np.concatenate([p[1] for p in placed])))
