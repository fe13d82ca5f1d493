"""Pinned edges that force a valence-bond-solid (VBS) domain wall into an open strip of the square lattice.

Geometry: the square lattice ``Lx x Ly``, open along x (columns x = 0 .. Lx-1) and periodic along y, Lx and
Ly even, both at least 4.  The columnar VBS has four patterns, labelled by the angle theta of its order
parameter (D_x, D_y) = |D| (cos theta, sin theta) (:mod:`models.lattice`, dimer pattern):

* ``y-dimers`` on the bonds (x, y)-(x, y+1) with y even, or with y odd (the pattern shifted by one row:
  D_y changes sign, theta -> theta + pi);
* ``x-dimers`` on the bonds (x, y)-(x+1, y) with x even, or with x odd (theta differs by pi/2 from the
  y-dimer patterns).

An edge *carries* a pattern (``EdgePattern``: the dimer direction and the parity of the dimers' first
coordinate) when every term of the Hamiltonian whose bonds are all dimers of that pattern and which touches
the edge column (x = 0 on the left, x = Lx-1 on the right) has its coupling multiplied by ``pin``.  Only
couplings that exist are scaled (J and Q stay positive on bipartite bonds), so the model stays sign-free.

The task of a wall (``wall``) fixes the patterns of both edges::

    wall      left edge            right edge           (D_x, D_y) from left to right
    "none"    y-dimers, y even     y-dimers, y even     (0, -) -> (0, -)   reference
    "pi"      y-dimers, y even     y-dimers, y odd      (0, -) -> (0, +)   theta turns by pi
    "pi/2"    y-dimers, y even     x-dimers, x even     (0, -) -> (-, 0)   theta turns by pi/2
    "none-x"  x-dimers, x even     x-dimers, x even     (-, 0) -> (-, 0)   second reference

The signs are those of D_a = (1/N) sum_b (-1)^(a_b) S^z_i S^z_j (:mod:`qmc.engine.equal_time`): a dimer is
a bond with S^z_i S^z_j < 0, so dimers at even coordinates give D_a < 0.  With Lx even the x-dimers at
x even include the edge bonds (0, 1) and (Lx-2, Lx-1) on both sides.

Why these edges: the wall energy is a difference of two total energies, and it measures the wall only if
the edges cost the same in both tasks.  The pi wall shifts the right edge by one row, a translation along
the periodic y axis, so both edges of ``"pi"`` are exact copies of those of ``"none"`` and
``E_pi - E_none`` holds nothing but the wall.  No symmetry of a straight edge turns x-dimers into
y-dimers, so a pi/2 wall necessarily has edges of two kinds; its reference is the mean of the two tasks
that carry each kind on both edges, ``(E_none + E_none-x) / 2``.  By the mirror x -> Lx-1-x each edge
energy appears with the same weight in the wall task and in that mean, so they cancel as well.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import ModelError
from .lattice import Lattice

__all__ = ["WALLS", "WALL_PATTERNS", "DomainWall", "EdgePattern", "edge_patterns", "wall_factors",
           "wall_references"]

WALL_PATTERNS = ("columnar",)
"""VBS patterns the edges can carry."""

WALLS = ("none", "pi/2", "pi", "none-x")
"""Values of a task's ``wall``: the references ``none`` and ``none-x`` and the walls ``pi/2`` and ``pi``."""


@dataclass(frozen=True)
class EdgePattern:
    """Columnar dimers along ``axis`` (0 = x-bonds, 1 = y-bonds) whose first site has that coordinate of
    the given ``parity`` (0 even, 1 odd)."""

    axis: int
    parity: int


@dataclass(frozen=True)
class DomainWall:
    """The pinned edges of one task: ``wall`` (one of :data:`WALLS`), the coupling factor ``pin`` (> 0) of the
    edge terms that carry the pattern, and the VBS ``pattern`` (``"columnar"``)."""

    wall: str
    pin: float
    pattern: str = "columnar"

    def __post_init__(self) -> None:
        if self.pattern not in WALL_PATTERNS:
            raise ModelError(f"unknown wall pattern {self.pattern!r}; known: {', '.join(WALL_PATTERNS)}",
                             "pattern")
        if self.wall not in WALLS:
            raise ModelError(f"unknown wall {self.wall!r}; known: {', '.join(WALLS)}", "wall")
        pin = self.pin
        if isinstance(pin, bool) or not isinstance(pin, int | float) or not math.isfinite(pin) or pin <= 0:
            raise ModelError(f"the pinning factor must be a finite number > 0, got {pin!r}", "pin")


def wall_references(wall: str) -> tuple[str, ...]:
    """The reference tasks whose mean energy is subtracted from that of ``wall`` (see module docstring)."""
    return {"pi": ("none",), "pi/2": ("none", "none-x")}.get(wall, ())


def edge_patterns(wall: str) -> tuple[EdgePattern, EdgePattern]:
    """(left, right) edge patterns of a task (table in the module docstring; Lx even)."""
    y_even, y_odd, x_even = EdgePattern(1, 0), EdgePattern(1, 1), EdgePattern(0, 0)
    return {"none": (y_even, y_even), "pi": (y_even, y_odd), "pi/2": (y_even, x_even),
            "none-x": (x_even, x_even)}[wall]


def check_strip(lattice: Lattice) -> tuple[int, int]:
    """(Lx, Ly) of a square lattice open along x and periodic along y; ModelError otherwise."""
    if lattice.kind != "square" or lattice.boundary != ("open", "periodic"):
        raise ModelError("domain walls are pinned on the square lattice with boundary = [\"open\", "
                         f"\"periodic\"], not on a {lattice.kind} lattice with boundary {lattice.boundary!r}",
                         "lattice")
    lx, ly = lattice.size
    if lx % 2 or lx < 4 or ly < 4:
        raise ModelError(f"domain walls need an even Lx >= 4 and Ly >= 4 (got {lx} x {ly}): both edges then "
                         "end on whole dimers of the reference pattern", "size")
    return lx, ly


def wall_factors(lattice: Lattice, sites: np.ndarray, wall: DomainWall) -> np.ndarray:
    """float64[P]: ``wall.pin`` for every placement (int[P, k, 2] sites) that an edge pins, else 1.

    A placement is pinned by an edge when all its k bonds are dimers of that edge's pattern and one of its
    sites lies in the edge column.  ModelError if the lattice is not an open-periodic square strip.
    """
    lx, ly = check_strip(lattice)
    sites = np.asarray(sites, dtype=np.int64)
    x = np.rint(lattice.coords[:, 0]).astype(np.int64)[sites]  # (P, k, 2)
    y = np.rint(lattice.coords[:, 1]).astype(np.int64)[sites]
    along_x = y[..., 0] == y[..., 1]
    up = (y[..., 1] - y[..., 0]) % ly == 1  # a y-bond whose second site lies one row above the first
    first_x = np.minimum(x[..., 0], x[..., 1])
    first_y = np.where(up, y[..., 0], y[..., 1])
    factor = np.ones(sites.shape[0], dtype=np.float64)
    for pattern, column in zip(edge_patterns(wall.wall), (0, lx - 1), strict=True):
        if pattern.axis == 0:
            dimer = along_x & (first_x % 2 == pattern.parity)
        else:
            dimer = ~along_x & (first_y % 2 == pattern.parity)
        pinned = np.all(dimer, axis=1) & np.any(x == column, axis=(1, 2))
        factor[pinned] = wall.pin
    return factor
