"""Geometry of the built-in lattices (private; :func:`models.lattice.build_lattice` is the public entry).

Each builder returns the keyword arguments of :class:`models.lattice.Lattice` except ``kind``, ``size``,
``boundary`` and ``n_sites``.  Everything is vectorized over unit cells.

Conventions shared by all builders:

* unit cells are numbered with the first coordinate running fastest, ``cell = x + Lx*(y + Ly*z)``;
* a bond along direction ``a`` goes from the cell at ``r`` to the cell at ``r + e_a``; its displacement is
  ``+e_a`` (minimum image; for a periodic length 2 the two images tie and ``+e_a`` is kept, so the bonds
  ``(0, 1)`` and ``(1, 0)`` are both present, each with displacement ``+1``, exactly as on the infinite
  lattice folded onto a ring of two cells);
* with open boundaries every bond that would cross the boundary is dropped, in every direction.
"""

from __future__ import annotations

import numpy as np

__all__ = ["hypercubic", "honeycomb", "cell_coords"]

_AXES = ("x", "y", "z")


def cell_coords(size: tuple[int, ...]) -> np.ndarray:
    """int64[n_cells, D] integer cell coordinates, first coordinate fastest."""
    grids = np.indices(size[::-1], dtype=np.int64).reshape(len(size), -1)
    return np.ascontiguousarray(grids[::-1].T)


def _strides(size: tuple[int, ...]) -> np.ndarray:
    return np.concatenate(([1], np.cumprod(size[:-1]))).astype(np.int64)


def _pairs(s0: np.ndarray, s1: np.ndarray) -> np.ndarray:
    return np.ascontiguousarray(np.stack([s0, s1], axis=1), dtype=np.int32)


def _with_disp(sites: np.ndarray, vector) -> tuple[np.ndarray, np.ndarray]:
    disp = np.tile(np.asarray(vector, dtype=np.float64), (sites.shape[0], 1))
    return sites, disp


def _cat(*parts: tuple[np.ndarray, np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
    return (np.ascontiguousarray(np.concatenate([p[0] for p in parts])),
            np.ascontiguousarray(np.concatenate([p[1] for p in parts])))


def _take(part: tuple[np.ndarray, np.ndarray], mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    return np.ascontiguousarray(part[0][mask]), np.ascontiguousarray(part[1][mask])


def _no_vbs() -> dict:
    return dict(vbs_bonds=np.zeros((0, 2), np.int32), vbs_dir=np.zeros(0, np.int8),
                vbs_phase=np.zeros(0, np.int8), n_vbs_dirs=0)


def hypercubic(size: tuple[int, ...], periodic: bool, layers: int = 1) -> dict:
    """Chain (D=1), square (D=2), cubic (D=3) or, with ``layers=2``, the square bilayer.

    Site index ``layer*n_cells + cell``; sublattice ``(x + y + z + layer) % 2``; a rung joins the same cell
    in the two layers and has zero displacement.
    """
    dim = len(size)
    cells = cell_coords(size)
    n_cells = cells.shape[0]
    strides = _strides(size)
    coords = np.ascontiguousarray(np.tile(cells, (layers, 1)).astype(np.float64))
    layer = np.repeat(np.arange(layers, dtype=np.int64), n_cells)
    sublattice = ((np.tile(cells.sum(axis=1), layers) + layer) % 2).astype(np.int8)

    along: list[tuple[np.ndarray, np.ndarray]] = []
    for a in range(dim):
        start = cells if periodic else cells[cells[:, a] < size[a] - 1]
        end = start.copy()
        end[:, a] = (end[:, a] + 1) % size[a]
        s0, s1 = start @ strides, end @ strides
        s0 = np.concatenate([s0 + k * n_cells for k in range(layers)])
        s1 = np.concatenate([s1 + k * n_cells for k in range(layers)])
        along.append(_with_disp(_pairs(s0, s1), np.eye(dim)[a]))

    classes = {_AXES[a]: along[a] for a in range(dim)}
    if dim == 1:
        x0 = coords[along[0][0][:, 0], 0].astype(np.int64)
        classes = {"nn": along[0], "even": _take(along[0], x0 % 2 == 0), "odd": _take(along[0], x0 % 2 == 1)}
    elif layers == 2:
        rungs = _with_disp(_pairs(np.arange(n_cells), np.arange(n_cells) + n_cells), np.zeros(dim))
        classes["intra"] = _cat(*along)
        classes["inter"] = rungs
        classes["nn"] = _cat(*along, rungs)
    else:
        classes["nn"] = _cat(*along)
    if dim == 2 and layers == 1:
        classes.update(_square_patterns(coords, along[0], along[1]))

    out = dict(sublattice=sublattice, coords=coords, dir_names=_AXES[:dim],
               dir_lengths=np.asarray(size, dtype=np.float64), bond_classes=classes,
               sites_per_cell=layers, cell_stride=1, sub_stride=n_cells if layers > 1 else 0)
    if dim > 2:
        out.update(_no_vbs())
    else:
        out.update(_vbs(coords, along))
    return out


def _square_patterns(coords: np.ndarray, xb, yb) -> dict:
    """Strong/weak splits of the square-lattice nearest-neighbour bonds (x, y of site 0 decide).

    columnar:  strong = x-bonds starting at even x;
    staggered: strong = x-bonds starting at even x on even rows and at odd x on odd rows, i.e. x + y even;
    plaquette: strong = the four bonds of every 2x2 plaquette whose lower-left corner has x and y even,
               i.e. x-bonds at even x and y-bonds at even y.
    In each pattern "weak" is every other nearest-neighbour bond.
    """
    xx, xy = coords[xb[0][:, 0]].T.astype(np.int64)
    yx, yy = coords[yb[0][:, 0]].T.astype(np.int64)
    col, stag = xx % 2 == 0, (xx + xy) % 2 == 0
    pl_x, pl_y = xx % 2 == 0, yy % 2 == 0
    return {
        "columnar-strong": _take(xb, col),
        "columnar-weak": _cat(_take(xb, ~col), yb),
        "staggered-strong": _take(xb, stag),
        "staggered-weak": _cat(_take(xb, ~stag), yb),
        "plaquette-strong": _cat(_take(xb, pl_x), _take(yb, pl_y)),
        "plaquette-weak": _cat(_take(xb, ~pl_x), _take(yb, ~pl_y)),
    }


def _vbs(coords: np.ndarray, along: list) -> dict:
    """Columnar dimer pattern: bonds along x (dir 0) and y (dir 1), phase (-1)^x resp. (-1)^y of site 0."""
    bonds, dirs, phases = [], [], []
    for a, (sites, _) in enumerate(along):
        r = coords[sites[:, 0], a].astype(np.int64)
        bonds.append(sites)
        dirs.append(np.full(sites.shape[0], a, np.int8))
        phases.append((1 - 2 * (r % 2)).astype(np.int8))
    return dict(vbs_bonds=np.ascontiguousarray(np.concatenate(bonds), dtype=np.int32),
                vbs_dir=np.concatenate(dirs), vbs_phase=np.concatenate(phases), n_vbs_dirs=len(along))


def honeycomb(size: tuple[int, int], periodic: bool) -> dict:
    """Honeycomb lattice: Bravais vectors a1, a2, sites A (offset 0) and B (offset (a1 + a2)/3) per cell.

    Site index ``2*cell + s`` (s = 0 for A, 1 for B); sublattice s.  Every bond runs from an A site to one
    of its three B neighbours, with fractional displacements
    ``nn0``: B in the same cell, (1/3, 1/3); ``nn1``: B in the cell at -a1, (-2/3, 1/3);
    ``nn2``: B in the cell at -a2, (1/3, -2/3).
    """
    cells = cell_coords(size)
    strides = _strides(size)
    coords = np.ascontiguousarray(np.repeat(cells, 2, axis=0).astype(np.float64))
    sublattice = np.tile(np.array([0, 1], np.int8), cells.shape[0])
    third = 1.0 / 3.0
    shifts = {"nn0": ((0, 0), (third, third)), "nn1": ((-1, 0), (third - 1.0, third)),
              "nn2": ((0, -1), (third, third - 1.0))}
    classes = {}
    for name, (shift, disp) in shifts.items():
        start = cells
        if not periodic:
            start = cells[np.all((cells + shift >= 0) & (cells + shift < size), axis=1)]
        end = (start + shift) % np.asarray(size)
        classes[name] = _with_disp(_pairs(2 * (start @ strides), 2 * (end @ strides) + 1), disp)
    classes = {"nn": _cat(*classes.values()), **classes}
    out = dict(sublattice=sublattice, coords=coords, dir_names=("a1", "a2"),
               dir_lengths=np.asarray(size, dtype=np.float64), bond_classes=classes,
               sites_per_cell=2, cell_stride=2, sub_stride=1)
    out.update(_no_vbs())
    return out
