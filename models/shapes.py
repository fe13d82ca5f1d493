"""Shapes of projector-product terms ``-Q prod_{a=1..k} P_{i_a j_a}`` on every tiled lattice.

A *shape* is a tuple of k = 1..3 bonds, each a pair of points; a point is a unit-cell offset with one integer
per lattice direction (``(dx,)`` on the chain, ``(dx, dy)`` on the square lattice, ``(dx, dy, dz)`` on the
cubic one), optionally followed by the site of the unit cell (``(dx, dy, s)``, for lattices with several
sites per cell such as the honeycomb one).  Placing a shape at cell r gives the bonds between the sites at
``r + offset``.  Points without a site index are placed on every site of the cell in turn (on the bilayer:
in each layer separately); all points of a shape use the same form.  Named shapes (:data:`SHAPES`), defined
on the square-type lattices :data:`SHAPE_LATTICES`:

``bond``             one x-bond,                                ((0,0),(1,0))
``plaquette-pair``   two parallel x-bonds on a 2x2 plaquette,   ((0,0),(1,0)), ((0,1),(1,1))
``column-of-three``  three parallel x-bonds stacked at y=0,1,2, ((0,0),(1,0)), ((0,1),(1,1)), ((0,2),(1,2))

On a chain ``((0,), (1,)), ((2,), (3,))`` gives P_{i,i+1} P_{i+2,i+3} at every i (the J-Q chain).

A valid shape has site-disjoint bonds and every bond joins opposite sublattices (on the square lattice:
|dx| + |dy| odd).  Shapes are stored in a canonical form: every bond points "forward" (its first non-zero
offset component is positive, so x- and y-bonds have the same orientation and displacement as the lattice's
``x``/``y`` classes), bonds are sorted and the shape is translated so its smallest endpoint is at offset 0.

:func:`rotations` gives the distinct copies under the 90-degree rotations of the lattice (C4 on the square
and bilayer lattices, the 24 rotations of the cube on the cubic one; reflections are not added; the other
lattices have none, so a shape is placed as given), so the x-oriented ``plaquette-pair`` gains exactly one
y-oriented copy and the term has 2N placements on an N-site torus; the same holds for ``column-of-three``.
:func:`translate_shape` places a shape at every unit cell.  Every placement on a torus is kept, even when
two placements coincide as operators (possible for a periodic length 2), which is the same torus convention
as for the lattice bonds.  With open boundaries (and across the legs of a ladder), placements that stick out
of the lattice are dropped.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from .errors import ModelError, unknown_name
from .lattice import Lattice
from .tiling import cell_coords

__all__ = ["Shape", "SHAPES", "SHAPE_LATTICES", "parse_shape", "rotations", "translate_shape", "place_shape"]

Shape = tuple[tuple[tuple[int, ...], tuple[int, ...]], ...]

SHAPES: dict[str, Shape] = {
    "bond": (((0, 0), (1, 0)),),
    "plaquette-pair": (((0, 0), (1, 0)), ((0, 1), (1, 1))),
    "column-of-three": (((0, 0), (1, 0)), ((0, 1), (1, 1)), ((0, 2), (1, 2))),
}
#: lattice kinds on which the named shapes can be placed (the bilayer places them inside each layer)
SHAPE_LATTICES = ("square", "bilayer")
MAX_BONDS = 3
_ROTATION_AXES = {"square": (0, 1), "bilayer": (0, 1), "cubic": (0, 1, 2)}
"""Axes among which 90-degree rotations map the lattice onto itself (other kinds: none)."""


def parse_shape(shape: str | Sequence) -> tuple[str | None, Shape]:
    """(name or None, canonical shape) of a named or user shape; ModelError if it is not valid.

    Checks the form (1 to 3 bonds of two integer points of one common length) and that the bonds are
    site-disjoint; the sublattices are checked against the lattice by :func:`translate_shape`.  A user
    shape comes back with forward-pointing, sorted bonds; :func:`rotations` translates it (it needs the
    lattice to tell offsets from site indices)."""
    if isinstance(shape, str):
        if shape not in SHAPES:
            raise unknown_name("shape", shape, SHAPES, "shape")
        return shape, canonical(SHAPES[shape])
    form = (f"a shape is a shape name or a list of 1 to {MAX_BONDS} bonds [[offset], [offset]] with one "
            "integer per lattice direction in each offset, e.g. [[[0, 0], [1, 0]]] on a square lattice")
    try:
        arr = np.asarray(shape)
    except ValueError:
        arr = np.zeros(0)
    if arr.ndim != 3 or arr.shape[1] != 2 or not 1 <= arr.shape[0] <= MAX_BONDS or not 1 <= arr.shape[2] <= 4:
        raise ModelError(f"{form}, got {shape!r}", "shape")
    if not (np.issubdtype(arr.dtype, np.integer) or
            (np.issubdtype(arr.dtype, np.floating) and np.all(arr == np.round(arr)))):
        raise ModelError(f"shape offsets must be integers, got {shape!r}", "shape")
    arr = arr.astype(np.int64)
    points = [tuple(p) for p in arr.reshape(-1, arr.shape[2]).tolist()]
    for b in range(arr.shape[0]):
        if points[2 * b] == points[2 * b + 1]:
            raise ModelError(f"bond {b} joins the point {list(points[2 * b])} to itself; such a term has a "
                             "sign problem", f"shape[{b}]")
    for n, p in enumerate(points):
        if p in points[:n]:
            raise ModelError(f"bonds {points.index(p) // 2} and {n // 2} share the site {p}; the bonds of a "
                             "projector product must be site-disjoint", f"shape[{n // 2}]")
    return None, tuple(sorted(tuple(sorted((tuple(b[0]), tuple(b[1])))) for b in arr.tolist()))


def canonical(shape: Shape, n_axes: int | None = None) -> Shape:
    """Forward-pointing bonds, sorted, translated so that the smallest endpoint is at offset 0.  Only the
    first ``n_axes`` entries of a point are offsets (default: all); a site index after them is kept."""
    bonds = sorted(tuple(sorted(b)) for b in shape)  # tuple order: first non-zero offset component positive
    n = len(bonds[0][0]) if n_axes is None else n_axes
    origin = min(p for b in bonds for p in b)[:n]
    return tuple(sorted(tuple(tuple(c - o for c, o in zip(p[:n], origin, strict=True)) + tuple(p[n:])
                              for p in b) for b in bonds))


def _with_sites(lattice: Lattice, shape: Shape, where: str = "shape") -> bool:
    """Whether the shape's points carry a site index (d + 1 entries) or not (d entries, one per axis)."""
    if lattice.cell is None:
        raise ModelError("projector-product shapes need a lattice kind with unit cells, not an explicit "
                         "bond list", where)
    d, n = lattice.cell.dim, len(shape[0][0])
    if n not in (d, d + 1):
        axes = ", ".join(lattice.cell.axes)
        raise ModelError(f"the offsets of the shape have {n} entr{'y' if n == 1 else 'ies'}; the "
                         f"{lattice.kind} lattice needs {d} (one per direction: {axes}), or {d + 1} with the "
                         f"site of the unit cell last", where)
    if n == d + 1:
        bad = [p for b in shape for p in b if not 0 <= p[-1] < lattice.sites_per_cell]
        if bad:
            raise ModelError(f"the site index {bad[0][-1]} of the point {list(bad[0])} is outside the "
                             f"{lattice.sites_per_cell} site(s) of the {lattice.kind} unit cell", where)
    return n == d + 1


def rotations(lattice: Lattice, shape: Shape) -> list[Shape]:
    """The distinct canonical copies of ``shape`` under the lattice's 90-degree rotations (the shape
    itself first; only the shape on lattices without such rotations)."""
    _with_sites(lattice, shape)
    d = lattice.cell.dim
    axes = _ROTATION_AXES.get(lattice.kind, ())
    out = [canonical(shape, d)]
    for current in out:  # closure under a 90-degree rotation in each plane of two rotation axes
        for n, a in enumerate(axes):
            for b in axes[n + 1:]:
                copy = current
                for _ in range(3):
                    copy = canonical(tuple(tuple(_rotate(p, a, b) for p in bond) for bond in copy), d)
                    if copy not in out:
                        out.append(copy)
    return out


def _rotate(point: tuple[int, ...], a: int, b: int) -> tuple[int, ...]:
    """The point rotated by 90 degrees in the plane of axes a, b: (x_a, x_b) -> (-x_b, x_a)."""
    p = list(point)
    p[a], p[b] = -point[b], point[a]
    return tuple(p)


def translate_shape(lattice: Lattice, shape: Shape) -> tuple[np.ndarray, np.ndarray]:
    """All placements of ``shape``: sites int32[P, k, 2] and displacements float64[P, k, D].

    Placements run over every unit cell (first axis fastest), then, for points without a site index, over
    the sites of the cell (the layers of a bilayer).  ModelError if a bond joins two sites of the same
    sublattice, is longer than half a periodic length (its minimum image would be ambiguous), or if on this
    lattice a placement wraps onto itself (bonds no longer site-disjoint).
    """
    cell = lattice.cell
    with_sites = _with_sites(lattice, shape)
    d = cell.dim
    pts = np.asarray(shape, dtype=np.int64)  # (k, end, entry)
    offsets = pts[:, :, :d]
    subs = ([pts[:, :, d]] if with_sites
            else [np.full(pts.shape[:2], s) for s in range(lattice.sites_per_cell)])
    vec = offsets[:, 1, :] - offsets[:, 0, :]
    parity = np.array([s.sublattice for s in cell.sites])
    for b in range(pts.shape[0]):
        for sub in subs:
            if (parity[sub[b, 0]] + parity[sub[b, 1]] + int(np.dot(cell.flips, vec[b]))) % 2 == 0:
                ends = " - ".join(str(list(p)) for p in pts[b].tolist())
                raise ModelError(f"bond {ends} joins two sites of the same sublattice of the {lattice.kind} "
                                 "lattice; such a term has a sign problem", f"shape[{b}]")
    for a, length in enumerate(lattice.size):
        if lattice.periodic[a] and np.any(2 * np.abs(vec[:, a]) > length):
            raise ModelError(f"a bond of the shape spans {np.abs(vec[:, a]).max()} cells along "
                             f"{cell.axes[a]}, more than half the periodic length {length}", "shape")
    cells = cell_coords(lattice.size)  # (n_cells, d), first axis fastest
    coord = [cells[:, None, None, a] + offsets[None, :, :, a] for a in range(d)]
    win = list(cell.winding_axes)
    pos = np.array([s.position for s in cell.sites], dtype=np.float64)
    parts, disps = [], []
    for sub in subs:
        placed = lattice.site_index(*coord, sub=sub[None])
        placed = placed[np.all(placed >= 0, axis=(1, 2))]  # open axes: drop what sticks out
        parts.append(placed)
        vector = vec[:, win] + pos[sub[:, 1]][:, win] - pos[sub[:, 0]][:, win]
        disps.append(np.broadcast_to(vector, (placed.shape[0], *vector.shape)))
    sites = np.concatenate(parts)
    flat = np.sort(sites.reshape(sites.shape[0], -1), axis=1)
    clash = np.flatnonzero(np.any(flat[:, 1:] == flat[:, :-1], axis=1))
    if clash.size:
        size = "x".join(map(str, lattice.size))
        raise ModelError(f"the shape {[list(map(list, b)) for b in shape]} wraps onto itself on the {size} "
                         f"{lattice.kind} lattice (a placement uses a site twice, e.g. sites "
                         f"{sites[clash[0]].tolist()}); use a larger lattice", "shape")
    disp = np.concatenate(disps).astype(np.float64)
    return np.ascontiguousarray(sites, dtype=np.int32), np.ascontiguousarray(disp)


def place_shape(lattice: Lattice, shape: str | Sequence, symmetrize: bool = True
                ) -> tuple[np.ndarray, np.ndarray]:
    """Placements of a named or user shape, over all rotations if ``symmetrize``; see translate_shape."""
    name, canon = parse_shape(shape)
    if name is not None and lattice.kind not in SHAPE_LATTICES:
        raise ModelError(f"the named shape {name!r} is defined on square-type lattices "
                         f"({', '.join(SHAPE_LATTICES)}), not on the {lattice.kind} lattice; give the bonds "
                         "as unit-cell offsets instead", "shape")
    copies = rotations(lattice, canon) if symmetrize else [canon]
    placed = [translate_shape(lattice, s) for s in copies]
    return (np.ascontiguousarray(np.concatenate([p[0] for p in placed])),
            np.ascontiguousarray(np.concatenate([p[1] for p in placed])))
