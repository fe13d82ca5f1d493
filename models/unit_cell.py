"""Lattice declarations: a unit cell, its sites and its named bond classes, written as plain data.

A lattice kind is one :class:`UnitCell`; :func:`models.tiling.tile` repeats it over ``L_0 x ... x L_{d-1}``
cells.  Example, the square lattice with its x- and y-bonds and a columnar dimerization::

    UnitCell(axes=("x", "y"), vectors=((1, 0), (0, 1)), sites=(Site((0, 0)),), flips=(1, 1),
             classes={"x": [(0, 0, (1, 0))], "y": [(0, 0, (0, 1))], "nn": ["x", "y"],
                      "columnar-strong": [("x", "x even")], "columnar-weak": [("x", "x odd"), "y"]},
             vbs=("x", "y"))

Conventions (d axes, n sites per cell):

* **Cells** have integer coordinates ``r = (r_0, ..., r_{d-1})``, ``0 <= r_a < L_a``, numbered with the
  first axis fastest: ``cell = r_0 + L_0*(r_1 + L_1*(r_2 + ...))``.
* **Sites** ``s = 0..n-1`` of a cell get the index ``cell*n + s``, or ``s*n_cells + cell`` with
  ``layered=True`` (each site of the cell then forms a contiguous layer, as in the bilayer).
* **Sublattice** of site s in cell r: ``(Site.sublattice + sum_a flips[a]*r_a) mod 2``.  A periodic axis
  with ``flips[a] = 1`` therefore needs an even length.
* **Bond** ``(s0, s1, offset)``: joins site s0 of every cell r to site s1 of the cell ``r + offset``.  On a
  periodic axis ``r + offset`` wraps around; on an open axis the bond is dropped when ``r + offset`` lies
  outside.  Its displacement is ``offset + position[s1] - position[s0]`` in units of the lattice vectors
  (declared, not minimum image: on a periodic length 2 the bonds (0, 1) and (1, 0) both have +1).
* **Class** = list of parts, concatenated in order.  A part is a bond (all its placements, cells in order),
  the name of another class (its bonds in order), or a pair ``(bond or class name, rule)``.  The rule
  keeps the bonds whose *first* site lies in a cell with ``sum of r_a over the named axes`` even or odd:
  ``"x even"``, ``"x+y odd"``.  Classes may name classes declared later; class order is declaration
  order.  Every bond of every class must join opposite sublattices (checked here).
* **Open axes** (``open_axes``) are open for every boundary choice: they count a finite width (the legs of
  a ladder).  They are not winding directions: displacements and coordinates keep only the other axes.
* **Dimer pattern** (``vbs``): one class per dimer direction a = 0, 1 (axes in order), each bond with the
  phase ``(-1)^(r_a)`` of its first site's cell.
* ``vectors`` are the Cartesian primitive vectors (one per axis, any embedding dimension); together with
  ``Site.position`` (fractional, one entry per axis) they place the sites in space.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

from .errors import ModelError

__all__ = ["Site", "UnitCell", "Bond", "Rule", "Part"]

Bond = tuple[int, int, tuple[int, ...]]  # (site0, site1, cell offset of site1)
Rule = tuple[tuple[int, ...], int]  # (axis indices summed, required parity 0 = even / 1 = odd)
Part = tuple[Bond | str, Rule | None]  # normalized class part: bond or class name, optional rule


@dataclass(frozen=True)
class Site:
    """One site of the unit cell: fractional ``position`` (one entry per axis) and its ``sublattice``
    (0 = A, 1 = B) in the cell at the origin."""

    position: tuple[float, ...]
    sublattice: int = 0


@dataclass(frozen=True, eq=False)
class UnitCell:
    """The declaration of one lattice kind; see the module docstring for every convention."""

    axes: tuple[str, ...]
    vectors: tuple[tuple[float, ...], ...]
    sites: tuple[Site, ...]
    flips: tuple[int, ...]
    classes: Mapping[str, Sequence]
    vbs: tuple[str, ...] = ()
    open_axes: tuple[str, ...] = ()
    layered: bool = False
    parts: dict[str, tuple[Part, ...]] = field(init=False, repr=False)

    def __post_init__(self) -> None:
        d = len(self.axes)
        _require(d >= 1 and len(set(self.axes)) == d, f"axes must be distinct names, got {self.axes}")
        _require(len(self.vectors) == d and len({len(v) for v in self.vectors}) == 1,
                 "give one Cartesian vector per axis, all of the same dimension")
        _require(len(self.flips) == d and set(self.flips) <= {0, 1}, "flips: one 0 or 1 per axis")
        _require(len(self.sites) >= 1, "a unit cell needs at least one site")
        for s, site in enumerate(self.sites):
            _require(len(site.position) == d, f"site {s}: the position needs {d} entries")
            _require(site.sublattice in (0, 1), f"site {s}: sublattice must be 0 or 1")
        _require(set(self.open_axes) <= set(self.axes), f"open_axes {self.open_axes} are not all axes")
        _require(len(self.open_axes) < d, "at least one axis must be able to be periodic")
        parts = {_check_name(name): tuple(self._part(name, p) for p in _as_list(name, spec))
                 for name, spec in self.classes.items()}
        _require(len(parts) >= 1, "declare at least one bond class")
        object.__setattr__(self, "parts", parts)
        for name in parts:
            self._check_acyclic(name, ())
        for name in self.vbs:
            _require(name in parts, f"vbs class {name!r} is not declared")
        _require(len(self.vbs) <= len(self.winding_axes), "one vbs class per winding axis at most")

    @property
    def dim(self) -> int:
        """d, the number of axes (entries of ``size``)."""
        return len(self.axes)

    @property
    def winding_axes(self) -> tuple[int, ...]:
        """Indices of the axes that are not always open: the winding directions of the lattice."""
        return tuple(a for a, name in enumerate(self.axes) if name not in self.open_axes)

    def bonds(self) -> list[Bond]:
        """Every distinct bond declared in any class, in order of first appearance."""
        out: list[Bond] = []
        for parts in self.parts.values():
            out += [src for src, _ in parts if not isinstance(src, str) and src not in out]
        return out

    def _part(self, name: str, part) -> Part:
        where = f"class {name!r}"
        if isinstance(part, str):
            return self._source(where, part), None
        if len(part) == 2:  # (bond or class name, rule); a bare bond has three entries
            return self._source(where, part[0]), self._rule(where, part[1])
        return self._source(where, part), None

    def _source(self, where: str, src) -> Bond | str:
        if isinstance(src, str):
            _require(src in self.classes, f"{where}: unknown class {src!r}")
            return src
        _require(len(src) == 3, f"{where}: a bond is (site0, site1, offset), got {src!r}")
        s0, s1, offset = int(src[0]), int(src[1]), tuple(int(o) for o in src[2])
        n = len(self.sites)
        _require(0 <= s0 < n and 0 <= s1 < n, f"{where}: site index out of range 0..{n - 1} in {src!r}")
        _require(len(offset) == self.dim, f"{where}: the offset of {src!r} needs {self.dim} entries")
        _require(s0 != s1 or any(offset), f"{where}: bond {src!r} joins a site to itself")
        parity = (self.sites[s0].sublattice + self.sites[s1].sublattice
                  + sum(f * o for f, o in zip(self.flips, offset, strict=True))) % 2
        _require(parity == 1, f"{where}: bond {src!r} joins two sites of the same sublattice")
        return s0, s1, offset

    def _rule(self, where: str, rule: str | None) -> Rule | None:
        if rule is None:
            return None
        words = rule.split()
        _require(len(words) == 2 and words[1] in ("even", "odd"),
                  f"{where}: a rule reads '<axis>[+<axis>...] even|odd', got {rule!r}")
        names = words[0].split("+")
        _require(all(a in self.axes for a in names), f"{where}: rule {rule!r} names an unknown axis")
        return tuple(self.axes.index(a) for a in names), int(words[1] == "odd")

    def _check_acyclic(self, name: str, path: tuple[str, ...]) -> None:
        _require(name not in path, f"class {name!r} contains itself via {' -> '.join((*path, name))}")
        for src, _ in self.parts[name]:
            if isinstance(src, str):
                self._check_acyclic(src, (*path, name))


def _as_list(name: str, spec) -> list:
    _require(isinstance(spec, list | tuple) and len(spec) >= 1, f"class {name!r}: give a non-empty list")
    return list(spec)


def _check_name(name) -> str:
    _require(isinstance(name, str) and bool(name), f"a class name must be a non-empty string, got {name!r}")
    return name


def _require(ok: bool, message: str) -> None:
    """A declaration is developer input: a broken one raises ModelError where it is declared."""
    if not ok:
        raise ModelError(message, "unit cell")
