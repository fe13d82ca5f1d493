"""The built-in lattice kinds, each declared once as a :class:`~models.unit_cell.UnitCell`.

===========  ==========  ========  ====================================================  ================
kind         size        sites N   bond classes                                          dimer pattern
===========  ==========  ========  ====================================================  ================
chain        (L,)        L         nn, even, odd                                         nn along x
square       (Lx, Ly)    Lx*Ly     x, y, nn, {columnar,staggered,plaquette}-{strong,     x, y
                                   weak}
bilayer      (Lx, Ly)    2*Lx*Ly   x, y, intra (= x + y), inter, nn (= intra + inter)    x, y
honeycomb    (L1, L2)    2*L1*L2   nn (= nn0 + nn1 + nn2), nn0, nn1, nn2                 none
cubic        (Lx,Ly,Lz)  Lx*Ly*Lz  x, y, z, nn                                           none
ladder       (L, W)      L*W       leg, rung, nn (= leg + rung)                          leg along x
===========  ==========  ========  ====================================================  ================

Site numbering (see :mod:`models.unit_cell`): ``x + Lx*(y + Ly*z)`` on the chain, square and cubic lattices
and the ladder (y = leg index); ``layer*Lx*Ly + y*Lx + x`` on the bilayer; ``2*cell + s`` on the honeycomb
lattice (s = 0 for A, 1 for B).  The square-lattice dimerizations (strong bonds; "weak" = the other
nearest-neighbour bonds) are: columnar, x-bonds starting at even x; staggered, x-bonds starting at even x+y;
plaquette, the four bonds of every 2x2 plaquette with even lower-left corner (x-bonds at even x, y-bonds at
even y).  Honeycomb: Bravais vectors a1 = (1, 0), a2 = (1/2, sqrt(3)/2), B at (a1 + a2)/3; ``nn0`` joins A
to the B of the same cell, ``nn1`` to the B of the cell at -a1, ``nn2`` at -a2.  Ladder: W legs along x,
periodic along them with boundary = "periodic" (then L must be even) and always open across them (any W of
at least 2): y counts the legs and is no winding direction, so coordinates, displacements and the stiffness
refer to x only; ``rung`` bonds join neighbouring legs (W - 1 rungs per x).

Adding a lattice kind is one more entry in :data:`LATTICES`.
"""

from __future__ import annotations

import math

from .unit_cell import Site, UnitCell

__all__ = ["LATTICES"]

_SQUARE = ((1.0, 0.0), (0.0, 1.0))

LATTICES: dict[str, UnitCell] = {
    "chain": UnitCell(
        axes=("x",), vectors=((1.0,),), sites=(Site((0.0,)),), flips=(1,),
        classes={"nn": [(0, 0, (1,))], "even": [("nn", "x even")], "odd": [("nn", "x odd")]},
        vbs=("nn",)),
    "square": UnitCell(
        axes=("x", "y"), vectors=_SQUARE, sites=(Site((0.0, 0.0)),), flips=(1, 1),
        classes={"x": [(0, 0, (1, 0))], "y": [(0, 0, (0, 1))], "nn": ["x", "y"],
                 "columnar-strong": [("x", "x even")], "columnar-weak": [("x", "x odd"), "y"],
                 "staggered-strong": [("x", "x+y even")], "staggered-weak": [("x", "x+y odd"), "y"],
                 "plaquette-strong": [("x", "x even"), ("y", "y even")],
                 "plaquette-weak": [("x", "x odd"), ("y", "y odd")]},
        vbs=("x", "y")),
    "bilayer": UnitCell(
        axes=("x", "y"), vectors=_SQUARE, sites=(Site((0.0, 0.0), 0), Site((0.0, 0.0), 1)), flips=(1, 1),
        classes={"x": [(0, 0, (1, 0)), (1, 1, (1, 0))], "y": [(0, 0, (0, 1)), (1, 1, (0, 1))],
                 "intra": ["x", "y"], "inter": [(0, 1, (0, 0))], "nn": ["x", "y", "inter"]},
        vbs=("x", "y"), layered=True),
    "honeycomb": UnitCell(
        axes=("a1", "a2"), vectors=((1.0, 0.0), (0.5, math.sqrt(3.0) / 2.0)),
        sites=(Site((0.0, 0.0), 0), Site((1.0 / 3.0, 1.0 / 3.0), 1)), flips=(0, 0),
        classes={"nn": ["nn0", "nn1", "nn2"], "nn0": [(0, 1, (0, 0))], "nn1": [(0, 1, (-1, 0))],
                 "nn2": [(0, 1, (0, -1))]}),
    "cubic": UnitCell(
        axes=("x", "y", "z"), vectors=((1.0, 0.0, 0.0), (0.0, 1.0, 0.0), (0.0, 0.0, 1.0)),
        sites=(Site((0.0, 0.0, 0.0)),), flips=(1, 1, 1),
        classes={"x": [(0, 0, (1, 0, 0))], "y": [(0, 0, (0, 1, 0))], "z": [(0, 0, (0, 0, 1))],
                 "nn": ["x", "y", "z"]}),
    "ladder": UnitCell(
        axes=("x", "y"), vectors=_SQUARE, sites=(Site((0.0, 0.0)),), flips=(1, 1), open_axes=("y",),
        classes={"leg": [(0, 0, (1, 0))], "rung": [(0, 0, (0, 1))], "nn": ["leg", "rung"]},
        vbs=("leg",)),
}
