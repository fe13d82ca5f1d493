"""Lattices: sites, sublattices, named bond classes with winding displacements, and the dimer pattern.

``build_lattice(kind, size, boundary)`` tiles the unit cell declared for ``kind`` in
:data:`models.catalog.LATTICES` (chain, square, bilayer, honeycomb, cubic, ladder; the table of kinds and
classes is there) over ``size`` cells with :func:`models.tiling.tile`; the declaration format is described
in :mod:`models.unit_cell`; ``tile_lattice(cell, size, boundary)`` tiles any declared cell.
``Lattice.from_bonds`` builds a lattice from an explicit bond list (no winding
directions, D = 0).

``coords`` holds the unit-cell coordinates of each site along the D winding directions in lattice-vector
units, ``bond_disps[c][b]`` the displacement site1 - site0 of bond b of class c in the same units.  Bonds
of every class join opposite sublattices.

Periodic boundaries need an even length along every axis where one cell step swaps the sublattice (chain,
square, bilayer, cubic, the legs of a ladder); otherwise the lattice is not bipartite.  The honeycomb
lattice is bipartite for any size.  A periodic length of 2 keeps both bonds ``(0, 1)`` and ``(1, 0)``,
each with displacement +1: that is the periodic lattice (the infinite lattice folded onto two cells), so
every site keeps its full coordination and the Heisenberg coupling across such a direction is effectively
doubled (common practice, no source).  Open boundaries drop every bond that would cross the boundary (in
all directions); the ladder is open across its legs for either boundary.  The boundary may also be given per
direction, one entry per size entry (e.g. ``("open", "periodic")``: a strip open along x and periodic along
y); ``Lattice.boundary`` is then that tuple, or the single word when all entries agree.  A lattice with any
open winding direction has ``open_boundaries`` (winding numbers are not measured on it).
"""

from __future__ import annotations

import numbers
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from .catalog import LATTICES
from .errors import ModelError, unknown_name
from .tiling import axis_periodic, cell_coords, tile
from .unit_cell import UnitCell

__all__ = ["Lattice", "build_lattice", "tile_lattice", "normalize_boundary", "LATTICE_KINDS", "BOUNDARIES"]

#: number of size entries of each built-in lattice kind
LATTICE_KINDS: dict[str, int] = {kind: cell.dim for kind, cell in LATTICES.items()}
BOUNDARIES = ("periodic", "open")
_MAX_SITES = 2**31 - 1


@dataclass(frozen=True, eq=False)
class Lattice:
    """A finite lattice of S=1/2 sites; see the module docstring for numbering and conventions.

    Arrays: ``sublattice`` int8[N] (0/1), ``coords`` float64[N, D], ``dir_lengths`` float64[D],
    ``bond_classes[name]`` int32[nb, 2], ``bond_disps[name]`` float64[nb, D], ``vbs_bonds`` int32[nv, 2],
    ``vbs_dir`` int8[nv] (0 = x-bond, 1 = y-bond), ``vbs_phase`` int8[nv] ((-1)^x resp. (-1)^y of site 0).
    ``periodic`` tells per size entry whether that axis wraps around; ``cell`` is the declaration the
    lattice was tiled from (None for an explicit bond list).  ``boundary`` is ``"periodic"``, ``"open"``
    or, for mixed boundaries, one of these per size entry.
    """

    kind: str
    size: tuple[int, ...]
    boundary: str | tuple[str, ...]
    n_sites: int
    sublattice: np.ndarray
    coords: np.ndarray
    dir_names: tuple[str, ...]
    dir_lengths: np.ndarray
    bond_classes: dict[str, np.ndarray]
    bond_disps: dict[str, np.ndarray]
    vbs_bonds: np.ndarray
    vbs_dir: np.ndarray
    vbs_phase: np.ndarray
    n_vbs_dirs: int
    sites_per_cell: int = 1
    cell_stride: int = 1
    sub_stride: int = 0
    periodic: tuple[bool, ...] = ()
    cell: UnitCell | None = None

    @property
    def n_dirs(self) -> int:
        """D, the number of winding directions."""
        return len(self.dir_names)

    @property
    def open_boundaries(self) -> bool:
        """True when any winding direction is open (a ladder's width, always open, does not count)."""
        if self.cell is None or not self.periodic:
            return self.boundary != "periodic"
        return not all(self.periodic[a] for a in self.cell.winding_axes)

    @property
    def class_names(self) -> tuple[str, ...]:
        return tuple(self.bond_classes)

    def bonds(self, name: str) -> tuple[np.ndarray, np.ndarray]:
        """(sites int32[nb, 2], disp float64[nb, D]) of bond class ``name``; ModelError if unknown."""
        if name not in self.bond_classes:
            raise unknown_name(f"bond class on the {self.kind} lattice", name, self.bond_classes)
        return self.bond_classes[name], self.bond_disps[name]

    def coordination(self, name: str = "nn") -> np.ndarray:
        """int64[N], the number of bonds of class ``name`` touching each site."""
        return np.bincount(self.bonds(name)[0].ravel(), minlength=self.n_sites)

    def positions(self) -> np.ndarray:
        """float64[N, c], Cartesian position of every site: ``(r + position_s) @ vectors`` over all axes
        (open ones included), with the cell's primitive vectors; ModelError for an explicit lattice."""
        if self.cell is None:
            raise ModelError("an explicit lattice has no positions", "lattice")
        cells = cell_coords(self.size)
        site = np.arange(self.n_sites)
        sub = site // self.sub_stride % self.sites_per_cell if self.sub_stride else np.zeros_like(site)
        basis = np.array([s.position for s in self.cell.sites], dtype=np.float64)
        frac = cells[site // self.cell_stride % cells.shape[0]] + basis[sub]
        return frac @ np.array(self.cell.vectors, dtype=np.float64)

    def site_index(self, *cell, sub=0):
        """Site index of the unit cell ``cell`` (one integer or array per size entry), sub-site ``sub``.

        Periodic axes wrap around; on an open axis a cell outside the lattice gives -1.
        Arrays broadcast; scalars in give a Python int out.
        """
        if len(cell) != len(self.size):
            raise ModelError(f"the {self.kind} lattice needs {len(self.size)} cell coordinates, "
                             f"got {len(cell)}", "site_index")
        scalar = all(np.ndim(c) == 0 for c in (*cell, sub))
        cells = [np.asarray(c, dtype=np.int64) for c in cell]
        sub = np.asarray(sub, dtype=np.int64)
        if np.any((sub < 0) | (sub >= self.sites_per_cell)):
            raise ModelError(f"sub must be in 0..{self.sites_per_cell - 1}", "site_index")
        flat, stride = np.zeros(np.broadcast_shapes(*(c.shape for c in cells), sub.shape), np.int64), 1
        outside = np.zeros(flat.shape, bool)
        wraps = self.periodic or (self.boundary == "periodic",) * len(self.size)
        for c, length, wrap in zip(cells, self.size, wraps, strict=True):
            if not wrap:
                outside |= (c < 0) | (c >= length)
            flat = flat + (c % length) * stride
            stride *= length
        site = np.where(outside, -1, flat * self.cell_stride + sub * self.sub_stride)
        return int(site) if scalar else site

    @classmethod
    def from_bonds(cls, n_sites: int, bonds, classes: Sequence[str] | None = None) -> Lattice:
        """A lattice given by an explicit bond list.

        ``bonds`` is int[nb, 2] (then optional ``classes`` gives one class name per bond) or a mapping
        ``{class name: int[nb, 2]}``.  Class ``"all"`` always holds every (distinct) bond.  Sublattices come
        from a 2-colouring of the bond graph (each connected component starts with sublattice 0); a graph
        that is not bipartite raises ModelError.  There are no winding directions (D = 0) and no dimer
        pattern.
        """
        n = _positive_int(n_sites, "n_sites", minimum=2)
        if isinstance(bonds, Mapping):
            if classes is not None:
                raise ModelError("give class names either as a mapping of bonds or as `classes`, not both",
                                 "classes")
            named = {_class_name(k): _bond_array(v, n, f"bonds[{k!r}]") for k, v in bonds.items()}
            if not named:
                raise ModelError("no bonds given", "bonds")
            every = np.concatenate(list(named.values()))
            _, first = np.unique(np.sort(every, axis=1), axis=0, return_index=True)
            every = every[np.sort(first)]
        else:
            every = _bond_array(bonds, n, "bonds")
            named = {}
            if classes is not None:
                labels = [_class_name(c) for c in classes]
                if len(labels) != every.shape[0]:
                    raise ModelError(f"{len(labels)} class names for {every.shape[0]} bonds", "classes")
                labels_arr = np.array(labels, dtype=object)
                named = {c: every[labels_arr == c] for c in dict.fromkeys(labels)}
        if "all" in named:
            raise ModelError("the class name 'all' is reserved for the set of all bonds", "classes")
        named = {"all": every, **named}
        sublattice = _two_colour(n, every)
        return cls(kind="explicit", size=(n,), boundary="open", n_sites=n, sublattice=sublattice,
                   coords=np.zeros((n, 0)), dir_names=(), dir_lengths=np.zeros(0),
                   bond_classes={k: np.ascontiguousarray(v, np.int32) for k, v in named.items()},
                   bond_disps={k: np.zeros((v.shape[0], 0)) for k, v in named.items()},
                   vbs_bonds=np.zeros((0, 2), np.int32), vbs_dir=np.zeros(0, np.int8),
                   vbs_phase=np.zeros(0, np.int8), n_vbs_dirs=0, periodic=(False,))


def build_lattice(kind: str, size: int | Sequence[int], boundary: str | Sequence[str] = "periodic"
                  ) -> Lattice:
    """Tile the unit cell declared for ``kind``; ``size`` counts unit cells per axis (an int: all axes),
    ``boundary`` is one word for all axes or one per axis.

    Raises ModelError for an unknown kind or boundary, and as :func:`tile_lattice` for a bad size.
    """
    if kind not in LATTICE_KINDS:
        raise unknown_name("lattice kind", kind, LATTICE_KINDS, "kind")
    return tile_lattice(LATTICES[kind], size, boundary, kind)


def tile_lattice(cell: UnitCell, size: int | Sequence[int], boundary: str | Sequence[str] = "periodic",
                 kind: str = "custom") -> Lattice:
    """Tile any declared unit cell over ``size`` cells (an int means the same length along every axis);
    ``boundary`` as in :func:`normalize_boundary`.

    Raises ModelError for an unknown boundary, a wrong number of size or boundary entries, a length below
    2, or an odd periodic length along an axis where one cell step swaps the sublattice (the lattice would
    then not be bipartite).
    """
    dim = cell.dim
    boundary = normalize_boundary(boundary, dim)
    if isinstance(size, numbers.Integral) and not isinstance(size, bool):
        size = (size,) * dim
    if isinstance(size, str | bytes) or not isinstance(size, Sequence | np.ndarray):
        raise ModelError(f"size must be a list of {dim} integers, got {size!r}", "size")
    if len(size) != dim:
        raise ModelError(f"the {kind} lattice needs {dim} size entr{'y' if dim == 1 else 'ies'}, "
                         f"got {len(size)}: {list(size)}", "size")
    size = tuple(_positive_int(s, f"size[{a}]", minimum=2) for a, s in enumerate(size))
    words = boundary if isinstance(boundary, tuple) else (boundary,) * dim
    periodic = tuple(b == "periodic" for b in words)
    wraps = axis_periodic(cell, periodic)
    for a, length in enumerate(size):
        if length % 2 and cell.flips[a] and wraps[a]:
            raise ModelError(f"a periodic {kind} lattice needs an even length along {cell.axes[a]} (an odd "
                             f"length closes odd loops, so the lattice is not bipartite); got {length}",
                             f"size[{a}]")
    n_sites = len(cell.sites) * int(np.prod(size, dtype=object))
    if n_sites > _MAX_SITES:
        raise ModelError(f"{n_sites} sites is more than the {_MAX_SITES} that int32 indices allow", "size")
    fields = tile(cell, size, periodic)
    classes = fields.pop("bond_classes")
    return Lattice(kind=kind, size=size, boundary=boundary, n_sites=n_sites, cell=cell,
                   bond_classes={k: v[0] for k, v in classes.items()},
                   bond_disps={k: v[1] for k, v in classes.items()}, **fields)


def normalize_boundary(boundary: str | Sequence[str], dim: int) -> str | tuple[str, ...]:
    """``"periodic"`` or ``"open"`` for all axes, or one of them per axis (a tuple of ``dim`` words; a tuple
    whose entries all agree becomes that word).  ModelError for an unknown word or a wrong count."""
    if isinstance(boundary, str):
        if boundary not in BOUNDARIES:
            raise unknown_name("boundary", boundary, BOUNDARIES, "boundary")
        return boundary
    if not isinstance(boundary, Sequence) or len(boundary) != dim:
        raise ModelError(f"give one boundary for all directions or one per direction ({dim}), got "
                         f"{boundary!r}", "boundary")
    for a, word in enumerate(boundary):
        if word not in BOUNDARIES:
            raise unknown_name("boundary", word, BOUNDARIES, f"boundary[{a}]")
    words = tuple(boundary)
    return words[0] if len(set(words)) == 1 else words


def _positive_int(value, where: str, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise ModelError(f"must be an integer, got {value!r}", where)
    if value < minimum:
        raise ModelError(f"must be at least {minimum}, got {value}", where)
    return int(value)


def _class_name(name) -> str:
    if not isinstance(name, str) or not name:
        raise ModelError(f"a bond class name must be a non-empty string, got {name!r}", "classes")
    return name


def _bond_array(bonds, n_sites: int, where: str) -> np.ndarray:
    """Validate an explicit bond list: int[nb >= 1, 2], sites in range, no self-bonds, no repeats."""
    arr = np.asarray(bonds)
    if arr.ndim != 2 or arr.shape[1] != 2 or arr.shape[0] == 0:
        raise ModelError(f"expected a non-empty list of [site, site] pairs, got shape {arr.shape}", where)
    if not (np.issubdtype(arr.dtype, np.integer) or
            (np.issubdtype(arr.dtype, np.floating) and np.all(arr == np.round(arr)))):
        raise ModelError(f"site indices must be integers, got {arr.dtype}", where)
    arr = arr.astype(np.int64)
    bad = np.flatnonzero(np.any((arr < 0) | (arr >= n_sites), axis=1))
    if bad.size:
        b = bad[0]
        raise ModelError(f"site index out of range 0..{n_sites - 1}: {arr[b].tolist()}", f"{where}[{b}]")
    bad = np.flatnonzero(arr[:, 0] == arr[:, 1])
    if bad.size:
        b = bad[0]
        raise ModelError(f"a bond must join two different sites, got {arr[b].tolist()}", f"{where}[{b}]")
    _, first, inverse = np.unique(np.sort(arr, axis=1), axis=0, return_index=True, return_inverse=True)
    repeats = np.flatnonzero(first[inverse.ravel()] != np.arange(arr.shape[0]))
    if repeats.size:
        b = repeats[0]
        raise ModelError(f"bond {arr[b].tolist()} repeats bond {first[inverse.ravel()[b]]}; list each "
                         "bond once (a stronger bond takes a larger coupling)", f"{where}[{b}]")
    return arr.astype(np.int32)


def _two_colour(n_sites: int, bonds: np.ndarray) -> np.ndarray:
    """int8[N] sublattice labels from a depth-first 2-colouring; ModelError if an odd loop exists."""
    src = np.concatenate([bonds[:, 0], bonds[:, 1]])
    dst = np.concatenate([bonds[:, 1], bonds[:, 0]])
    order = np.argsort(src, kind="stable")
    start = np.searchsorted(src[order], np.arange(n_sites + 1)).tolist()
    nbrs = dst[order].tolist()
    colour = [-1] * n_sites
    for root in range(n_sites):
        if colour[root] >= 0:
            continue
        colour[root] = 0
        stack = [root]
        while stack:
            v = stack.pop()
            c = 1 - colour[v]
            for w in nbrs[start[v]:start[v + 1]]:
                if colour[w] < 0:
                    colour[w] = c
                    stack.append(w)
    sub = np.array(colour, dtype=np.int8)
    bad = np.flatnonzero(sub[bonds[:, 0]] == sub[bonds[:, 1]])
    if bad.size:
        i, j = bonds[bad[0]]
        raise ModelError(f"the bonds do not form a bipartite graph: bond ({i}, {j}) closes a loop of odd "
                         "length, so the model would have a sign problem", f"bonds[{bad[0]}]")
    return sub
