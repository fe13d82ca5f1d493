"""Repeat a :class:`~models.unit_cell.UnitCell` over a finite box of cells: the one lattice builder.

:func:`tile` turns a declaration, a size ``(L_0, ..., L_{d-1})`` and a boundary into the arrays of
:class:`models.lattice.Lattice` (all its fields except ``kind``, ``size``, ``boundary``, ``n_sites``); the
boundary (``periodic``) is one choice for all axes or one per axis.  Everything is vectorized over cells;
the conventions are those of :mod:`models.unit_cell`:

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

from collections.abc import Sequence

import numpy as np

from .errors import ModelError
from .unit_cell import Bond, Rule, UnitCell

__all__ = ["tile", "cell_coords", "axis_periodic"]

#: placed bonds: sites int32[nb, 2] and displacements float64[nb, D]
_Placed = tuple[np.ndarray, np.ndarray]


def cell_coords(size: tuple[int, ...]) -> np.ndarray:
    """int64[n_cells, d] integer cell coordinates, first coordinate fastest."""
    grids = np.indices(size[::-1], dtype=np.int64).reshape(len(size), -1)
    return np.ascontiguousarray(grids[::-1].T)


def axis_periodic(cell: UnitCell, periodic: bool | Sequence[bool]) -> tuple[bool, ...]:
    """Per axis: does it wrap around (the boundary choice, one for all axes or one per axis, except for
    the cell's always-open axes)?"""
    per_axis = (periodic,) * cell.dim if isinstance(periodic, bool | np.bool_) else tuple(periodic)
    if len(per_axis) != cell.dim:
        raise ModelError(f"give one boundary per axis ({cell.dim}), got {len(per_axis)}", "boundary")
    return tuple(bool(p) and name not in cell.open_axes for p, name in zip(per_axis, cell.axes, strict=True))


def tile(cell: UnitCell, size: tuple[int, ...], periodic: bool | Sequence[bool]) -> dict:
    """Lattice fields of ``cell`` repeated over ``size`` cells; see the module docstring.

    Raises ModelError if a declared bond spans more than half of a periodic length (its two images
    would be different bonds, or it would join a site to itself).
    """
    return _Tiling(cell, size, axis_periodic(cell, periodic)).fields()


class _Tiling:
    """One tiling in progress: the cell grid, the site numbering, and the classes placed so far."""

    def __init__(self, cell: UnitCell, size: tuple[int, ...], wraps: tuple[bool, ...]) -> None:
        for s0, s1, offset in cell.bonds():
            for a, (o, length) in enumerate(zip(offset, size, strict=True)):
                if wraps[a] and 2 * abs(o) > length:
                    raise ModelError(f"a bond ({s0}, {s1}) of this lattice spans {abs(o)} cells along "
                                     f"{cell.axes[a]}, more than half the periodic length {length}",
                                     f"size[{a}]")
        self.cell, self.size, self.wraps = cell, size, wraps
        self.cells = cell_coords(size)
        self.n_cells, self.n_sub = self.cells.shape[0], len(cell.sites)
        self.win = list(cell.winding_axes)
        if self.n_sub == 1:
            self.cell_stride, self.sub_stride = 1, 0
        elif cell.layered:
            self.cell_stride, self.sub_stride = 1, self.n_cells
        else:
            self.cell_stride, self.sub_stride = self.n_sub, 1
        self.strides = np.concatenate(([1], np.cumprod(size[:-1]))).astype(np.int64)
        self.positions = np.array([s.position for s in cell.sites], dtype=np.float64)
        self.placed: dict[str, _Placed] = {}
        self.sums: dict[tuple[int, ...], np.ndarray] = {}

    def fields(self) -> dict:
        """Every Lattice field except kind, size, boundary and n_sites."""
        cell, n_sub = self.cell, self.n_sub
        parity = np.array([s.sublattice for s in cell.sites], dtype=np.int64)
        cell_parity = self.cells[:, [a for a, f in enumerate(cell.flips) if f]].sum(axis=1)
        per_cell = self.cells[:, self.win].astype(np.float64)
        if cell.layered:  # site = s*n_cells + cell
            sub_parity = np.repeat(parity, self.n_cells)
            cell_parity, per_cell = np.tile(cell_parity, n_sub), np.tile(per_cell, (n_sub, 1))
        else:  # site = cell*n_sub + s
            sub_parity = np.tile(parity, self.n_cells)
            cell_parity, per_cell = np.repeat(cell_parity, n_sub), np.repeat(per_cell, n_sub, axis=0)
        sublattice = ((sub_parity + cell_parity) % 2).astype(np.int8)
        coords = np.ascontiguousarray(per_cell)
        classes = {name: self.resolve(name) for name in cell.parts}
        out = dict(sublattice=sublattice, coords=coords, dir_names=tuple(cell.axes[a] for a in self.win),
                   dir_lengths=np.asarray([self.size[a] for a in self.win], dtype=np.float64),
                   bond_classes=classes, sites_per_cell=n_sub, cell_stride=self.cell_stride,
                   sub_stride=self.sub_stride, periodic=self.wraps)
        out.update(self.dimer_pattern())
        return out

    def first_cell_sum(self, sites: np.ndarray, axes: tuple[int, ...]) -> np.ndarray:
        """int64[nb], sum of the first site's cell coordinates r_a over ``axes``, for every bond."""
        if axes not in self.sums:
            self.sums[axes] = self.cells[:, list(axes)].sum(axis=1)
        return self.sums[axes][sites[:, 0] // self.cell_stride % self.n_cells]

    def place(self, bond: Bond) -> _Placed:
        """Bond (s0, s1, offset) at every cell whose partner cell exists, cells in order."""
        s0, s1, offset = bond
        shift = np.asarray(offset, np.int64)
        keep = np.ones(self.n_cells, dtype=bool)
        for a in range(self.cell.dim):
            if not self.wraps[a]:  # open axis: the partner cell must exist
                r = self.cells[:, a] + shift[a]
                keep &= (r >= 0) & (r < self.size[a])
        start = np.flatnonzero(keep)  # cells are numbered in order, so a row is its cell index
        end = start + int(shift @ self.strides)
        for a in np.flatnonzero(shift):
            r = self.cells[keep, a] + shift[a]
            end += (r % self.size[a] - r) * self.strides[a]  # wrap around a periodic axis
        i = start * self.cell_stride + s0 * self.sub_stride
        j = end * self.cell_stride + s1 * self.sub_stride
        sites = np.ascontiguousarray(np.stack([i, j], axis=1), dtype=np.int32)
        pos, win = self.positions, self.win
        vector = shift[win].astype(np.float64) + pos[s1, win] - pos[s0, win]
        return sites, np.tile(vector, (sites.shape[0], 1))

    def resolve(self, name: str) -> _Placed:
        """The bonds of class ``name``: its parts (rules applied) concatenated in order."""
        if name not in self.placed:
            parts = [self.select(self.resolve(src) if isinstance(src, str) else self.place(src), rule)
                     for src, rule in self.cell.parts[name]]
            self.placed[name] = parts[0] if len(parts) == 1 else tuple(
                np.ascontiguousarray(np.concatenate([p[k] for p in parts])) for k in range(2))
        return self.placed[name]

    def select(self, part: _Placed, rule: Rule | None) -> _Placed:
        """The bonds of ``part`` whose first site's cell satisfies ``rule`` (all bonds if rule is None)."""
        if rule is None:
            return part
        axes, odd = rule
        mask = self.first_cell_sum(part[0], axes) % 2 == odd
        return part[0][mask], part[1][mask]

    def dimer_pattern(self) -> dict:
        """vbs_bonds/vbs_dir/vbs_phase: bonds of class vbs[a] with direction a and phase (-1)^(r_a) of the
        first site's cell."""
        along = [self.resolve(name)[0] for name in self.cell.vbs]
        if not along:
            return dict(vbs_bonds=np.zeros((0, 2), np.int32), vbs_dir=np.zeros(0, np.int8),
                        vbs_phase=np.zeros(0, np.int8), n_vbs_dirs=0)
        dirs = [np.full(sites.shape[0], a, np.int8) for a, sites in enumerate(along)]
        phases = [(1 - 2 * (self.first_cell_sum(sites, (a,)) % 2)).astype(np.int8)
                  for a, sites in enumerate(along)]
        return dict(vbs_bonds=np.ascontiguousarray(np.concatenate(along), dtype=np.int32),
                    vbs_dir=np.concatenate(dirs), vbs_phase=np.concatenate(phases), n_vbs_dirs=len(along))
