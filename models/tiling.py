"""Repeat a :class:`~models.unit_cell.UnitCell` over a finite box of cells: the one lattice builder.

:func:`tile` turns a declaration, a size ``(L_0, ..., L_{d-1})`` and a boundary into the arrays of
:class:`models.lattice.Lattice` (all its fields except ``kind``, ``size``, ``boundary``, ``n_sites``).
Everything is vectorized over cells; the conventions are those of :mod:`models.unit_cell`:

* site ``cell*n + s`` (or ``s*n_cells + cell`` for a layered cell), cells numbered first axis fastest;
* sublattice ``(sublattice_s + sum_a flips_a r_a) mod 2``;
* ``coords[site]`` = the cell coordinates ``r_a`` along the winding axes (float64, for structure-factor
  phases ``exp(i 2 pi k r_a / L_a)``);
* bond ``(s0, s1, offset)`` placed at every cell r whose partner cell ``r + offset`` exists (wrapped on
  periodic axes), in cell order; displacement ``offset_a + position[s1]_a - position[s0]_a`` along the
  winding axes;
* class parts concatenated in declaration order; a rule keeps the bonds whose first site's cell has
  ``sum_{a in rule} r_a`` of the required parity;
* dimer pattern: the bonds of ``vbs[a]`` with direction a and phase ``(-1)^(r_a)`` of the first site's cell.
"""

from __future__ import annotations

import numpy as np

from .errors import ModelError
from .unit_cell import Bond, Rule, UnitCell

__all__ = ["tile", "cell_coords"]

#: placed bonds: sites int32[nb, 2], displacements float64[nb, D], first site's cell int64[nb, d]
_Placed = tuple[np.ndarray, np.ndarray, np.ndarray]


def cell_coords(size: tuple[int, ...]) -> np.ndarray:
    """int64[n_cells, d] integer cell coordinates, first coordinate fastest."""
    grids = np.indices(size[::-1], dtype=np.int64).reshape(len(size), -1)
    return np.ascontiguousarray(grids[::-1].T)


def axis_periodic(cell: UnitCell, periodic: bool) -> tuple[bool, ...]:
    """Per axis: does it wrap around (the boundary choice, except for the cell's always-open axes)?"""
    return tuple(periodic and name not in cell.open_axes for name in cell.axes)


def tile(cell: UnitCell, size: tuple[int, ...], periodic: bool) -> dict:
    """Lattice fields of ``cell`` repeated over ``size`` cells; see the module docstring.

    Raises ModelError if a declared bond spans more than half of a periodic length (its two images
    would be different bonds, or it would join a site to itself).
    """
    wraps = axis_periodic(cell, periodic)
    for s0, s1, offset in cell.bonds():
        for a, (o, length) in enumerate(zip(offset, size, strict=True)):
            if wraps[a] and 2 * abs(o) > length:
                raise ModelError(f"a bond ({s0}, {s1}) of this lattice spans {abs(o)} cells along "
                                 f"{cell.axes[a]}, more than half the periodic length {length}", f"size[{a}]")
    cells = cell_coords(size)
    n_cells, n_sub = cells.shape[0], len(cell.sites)
    win = list(cell.winding_axes)
    if n_sub == 1:
        cell_stride, sub_stride = 1, 0
    elif cell.layered:
        cell_stride, sub_stride = 1, n_cells
    else:
        cell_stride, sub_stride = n_sub, 1
    if cell.layered:
        cell_of, sub_of = np.tile(np.arange(n_cells), n_sub), np.repeat(np.arange(n_sub), n_cells)
    else:
        cell_of, sub_of = np.repeat(np.arange(n_cells), n_sub), np.tile(np.arange(n_sub), n_cells)
    parity = np.array([s.sublattice for s in cell.sites], dtype=np.int64)
    sublattice = ((parity[sub_of] + cells[cell_of] @ np.asarray(cell.flips, np.int64)) % 2).astype(np.int8)
    coords = np.ascontiguousarray(cells[cell_of][:, win].astype(np.float64))

    strides = np.concatenate(([1], np.cumprod(size[:-1]))).astype(np.int64)
    positions = np.array([s.position for s in cell.sites], dtype=np.float64)

    def place(bond: Bond) -> _Placed:
        s0, s1, offset = bond
        shift = np.asarray(offset, np.int64)
        target = cells + shift
        keep = np.ones(n_cells, dtype=bool)
        for a in range(cell.dim):
            if not wraps[a]:  # open axis: the partner cell must exist
                keep &= (target[:, a] >= 0) & (target[:, a] < size[a])
        start = cells[keep]
        end = (start + shift) % np.asarray(size, np.int64)
        i = (start @ strides) * cell_stride + s0 * sub_stride
        j = (end @ strides) * cell_stride + s1 * sub_stride
        sites = np.ascontiguousarray(np.stack([i, j], axis=1), dtype=np.int32)
        vector = shift[win].astype(np.float64) + positions[s1, win] - positions[s0, win]
        return sites, np.tile(vector, (sites.shape[0], 1)), start

    placed: dict[str, _Placed] = {}

    def resolve(name: str) -> _Placed:
        if name not in placed:
            placed[name] = _concat([_select(place(src) if not isinstance(src, str) else resolve(src), rule)
                                    for src, rule in cell.parts[name]])
        return placed[name]

    classes = {name: resolve(name)[:2] for name in cell.parts}
    out = dict(sublattice=sublattice, coords=coords, dir_names=tuple(cell.axes[a] for a in win),
               dir_lengths=np.asarray([size[a] for a in win], dtype=np.float64), bond_classes=classes,
               sites_per_cell=n_sub, cell_stride=cell_stride, sub_stride=sub_stride, periodic=wraps)
    out.update(_dimer_pattern([resolve(name) for name in cell.vbs]))
    return out


def _select(part: _Placed, rule: Rule | None) -> _Placed:
    """The bonds of ``part`` whose first site's cell satisfies ``rule`` (all bonds if rule is None)."""
    if rule is None:
        return part
    axes, odd = rule
    mask = part[2][:, list(axes)].sum(axis=1) % 2 == odd
    return part[0][mask], part[1][mask], part[2][mask]


def _concat(parts: list[_Placed]) -> _Placed:
    return tuple(np.ascontiguousarray(np.concatenate([p[k] for p in parts])) for k in range(3))


def _dimer_pattern(along: list[_Placed]) -> dict:
    """vbs_bonds/vbs_dir/vbs_phase: bonds of direction a with phase (-1)^(r_a) of the first site's cell."""
    if not along:
        return dict(vbs_bonds=np.zeros((0, 2), np.int32), vbs_dir=np.zeros(0, np.int8),
                    vbs_phase=np.zeros(0, np.int8), n_vbs_dirs=0)
    bonds = [sites for sites, _, _ in along]
    dirs = [np.full(sites.shape[0], a, np.int8) for a, (sites, _, _) in enumerate(along)]
    phases = [(1 - 2 * (cell0[:, a] % 2)).astype(np.int8) for a, (_, _, cell0) in enumerate(along)]
    return dict(vbs_bonds=np.ascontiguousarray(np.concatenate(bonds), dtype=np.int32),
                vbs_dir=np.concatenate(dirs), vbs_phase=np.concatenate(phases), n_vbs_dirs=len(along))
