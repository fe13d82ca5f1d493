"""The lattice declaration format (models/unit_cell.py) and its one builder (models/tiling.py).

The built-in kinds are compared bit for bit with stored arrays in test_lattice_frozen.py and against
brute-force neighbour lists in test_models.py; here new declarations written in the test are tiled and
checked against hand counts and explicit loops, and broken declarations must be refused.
"""

from __future__ import annotations

from collections import Counter

import numpy as np
import pytest
from qmc.models import LATTICES, ModelError, Site, UnitCell, build_lattice, tile_lattice


def edges(bonds: np.ndarray) -> Counter:
    return Counter(tuple(sorted(map(int, b))) for b in bonds)


def test_two_site_chain_cell_reproduces_the_chain_dimerization():
    """A chain written with a two-site cell (sites at 0 and 1/2 of a cell of length 2) has the bonds of the
    one-site chain: `strong` inside a cell are the chain's `even` bonds, `weak` across cells its `odd` ones,
    each with displacement 1/2 of the doubled cell."""
    cell = UnitCell(axes=("x",), vectors=((2.0,),), sites=(Site((0.0,), 0), Site((0.5,), 1)), flips=(0,),
                    classes={"strong": [(0, 1, (0,))], "weak": [(1, 0, (1,))], "all": ["strong", "weak"]})
    for boundary in ("periodic", "open"):
        dimer = tile_lattice(cell, 4, boundary, kind="dimerized")
        chain = build_lattice("chain", 8, boundary)
        assert dimer.n_sites == 8 and dimer.kind == "dimerized"
        assert np.array_equal(dimer.sublattice, chain.sublattice)
        assert edges(dimer.bond_classes["strong"]) == edges(chain.bond_classes["even"])
        assert edges(dimer.bond_classes["weak"]) == edges(chain.bond_classes["odd"])
        assert np.all(dimer.bond_disps["all"] == 0.5)
        # site = 2*cell + s, and Cartesian positions are the chain positions x = 0, 1, 2, ...
        assert np.allclose(dimer.positions()[:, 0], np.arange(8))
    assert dimer.site_index(3, sub=1) == 7 and dimer.site_index(4, sub=0) == -1  # open: outside


def test_rules_select_by_the_first_sites_cell():
    """Hand count on a 4 x 4 torus: x-bonds whose first site has even x, and y-bonds on odd rows."""
    cell = UnitCell(axes=("x", "y"), vectors=((1.0, 0.0), (0.0, 1.0)), sites=(Site((0.0, 0.0)),),
                    flips=(1, 1), classes={"a": [((0, 0, (1, 0)), "x even"), ((0, 0, (0, 1)), "y odd")],
                                           "b": [("a", "x+y even")]})
    lat = tile_lattice(cell, (4, 4))
    x, y = lat.coords.T.astype(int)
    expect = [(s, s + 1 - 4 * (x[s] == 3)) for s in range(16) if x[s] % 2 == 0]
    expect += [(s, (s + 4) % 16) for s in range(16) if y[s] % 2 == 1]
    assert lat.bond_classes["a"].tolist() == [list(p) for p in expect]
    first = lat.bond_classes["b"][:, 0]
    assert len(first) == 8 and np.all((x[first] + y[first]) % 2 == 0)


def test_long_bonds_and_declared_displacements():
    """A bond three cells long: allowed on a periodic length 6 (displacement +3 as declared), refused on
    a periodic length 4 (it would be shorter the other way round), dropped near an open edge."""
    cell = UnitCell(axes=("x",), vectors=((1.0,),), sites=(Site((0.0,)),), flips=(1,),
                    classes={"third": [(0, 0, (3,))]})
    ring = tile_lattice(cell, 6)
    assert ring.bond_classes["third"].tolist() == [[s, (s + 3) % 6] for s in range(6)]
    assert np.all(ring.bond_disps["third"] == 3.0)
    with pytest.raises(ModelError, match="more than half the periodic length 4") as err:
        tile_lattice(cell, 4)
    assert err.value.where == "size[0]"
    assert tile_lattice(cell, 5, "open").bond_classes["third"].tolist() == [[0, 3], [1, 4]]


def test_positions_use_the_declared_vectors():
    """Handbook honeycomb geometry: every nearest neighbour at distance |a1|/sqrt(3) (open lattice, so no
    bond wraps)."""
    lat = build_lattice("honeycomb", (3, 4), "open")
    pos = lat.positions()
    for name in ("nn0", "nn1", "nn2"):
        b = lat.bond_classes[name]
        assert np.allclose(np.linalg.norm(pos[b[:, 1]] - pos[b[:, 0]], axis=1), 1 / np.sqrt(3))
    square = build_lattice("square", (3, 2), "open").positions()
    assert square.tolist() == [[x, y] for y in range(2) for x in range(3)]


@pytest.mark.parametrize(
    "change, text",
    [
        ({"classes": {"bad": [(0, 0, (1, 1))]}}, "same sublattice"),
        ({"classes": {"a": ["b"], "b": ["a"]}}, "contains itself"),
        ({"classes": {"a": ["nope"]}}, "unknown class 'nope'"),
        ({"classes": {"a": [((0, 0, (1, 0)), "x evn")]}}, "even|odd"),
        ({"classes": {"a": [((0, 0, (1, 0)), "z even")]}}, "unknown axis"),
        ({"classes": {"a": [(0, 0, (1,))]}}, "needs 2 entries"),
        ({"classes": {"a": [(0, 1, (1, 0))]}}, "out of range"),
        ({"classes": {"a": []}}, "non-empty list"),
        ({"vbs": ("x", "z")}, "vbs class 'z'"),
        ({"flips": (1,)}, "one 0 or 1 per axis"),
        ({"open_axes": ("x", "y")}, "periodic"),
    ],
)
def test_broken_declarations_are_refused(change, text):
    base = dict(axes=("x", "y"), vectors=((1.0, 0.0), (0.0, 1.0)), sites=(Site((0.0, 0.0)),), flips=(1, 1),
                classes={"x": [(0, 0, (1, 0))], "y": [(0, 0, (0, 1))]})
    with pytest.raises(ModelError, match=text):
        UnitCell(**{**base, **change})


def test_every_builtin_kind_is_a_declaration():
    for kind, cell in LATTICES.items():
        lat = build_lattice(kind, 2 if kind != "honeycomb" else 3)
        assert lat.cell is cell and tuple(lat.bond_classes) == tuple(cell.parts)
        assert lat.n_sites == len(cell.sites) * int(np.prod(lat.size))
