"""The per-term table of the diagonal sweep (qmc.engine.vertices.term_table) holds exactly the model's
terms: bond count, vertex kind, group, and each bond's sites and displacement class, read back against the
model's flat arrays through the same names the sweep uses (TT_META / meta_* and TT_BOND / TT_BOND_WIDTH;
common practice, no source: a layout check).  The displacement classes give every bond its displacement
back exactly."""

from __future__ import annotations

import numpy as np
import pytest
from qmc.models import HeisenbergTerm, ProjectorProductTerm, build_lattice, compile_model
from qmc.models.compiled import KIND_PROJECTOR

from qmc.engine.vertices import (
    MAX_KINDS,
    TT_BOND,
    TT_BOND_WIDTH,
    TT_META,
    displacement_classes,
    meta_bonds,
    meta_group,
    meta_kind,
    term_table,
)


def _table(m, group_kind=None):
    kind = m.group_kind if group_kind is None else group_kind
    _, cls = displacement_classes(m.bond_disp)
    return term_table(m.term_start, m.term_bonds, m.term_group, m.bond_sites, kind, cls)


@pytest.mark.parametrize("shape, width", [(None, 4), ("plaquette-pair", 8), ("column-of-three", 16)])
def test_rows_repeat_the_model(shape, width):
    terms = [HeisenbergTerm(bonds="nn", coupling=1.0)]
    if shape:
        terms.append(ProjectorProductTerm(shape=shape, coupling=2.0))
    m = compile_model(build_lattice("square", (6, 6)), terms)
    assert m.group_kind.tolist() == [KIND_PROJECTOR] * len(terms)
    table = _table(m)
    rows, cls = displacement_classes(m.bond_disp)
    assert table.dtype == np.int32 and table.shape == (m.n_terms, width)
    for t in range(m.n_terms):
        bonds = m.term_bonds[m.term_start[t]:m.term_start[t + 1]]
        meta = table[t, TT_META]
        assert meta_bonds(meta) == len(bonds) and meta_group(meta) == m.term_group[t]
        assert meta_kind(meta) == KIND_PROJECTOR
        for a, b in enumerate(bonds):
            col = TT_BOND + TT_BOND_WIDTH * a
            i, j, c = table[t, col:col + TT_BOND_WIDTH]
            assert (i, j) == (m.bond_sites[b, 0], m.bond_sites[b, 1])
            assert c == cls[b] and np.array_equal(rows[c], m.bond_disp[b])
        assert not table[t, TT_BOND + TT_BOND_WIDTH * len(bonds):].any()


def test_kind_and_group_fields_do_not_overlap():
    """Every kind code next to large group numbers reads back unchanged (the packed fields are disjoint)."""
    m = compile_model(build_lattice("square", (4, 4)),
                      [HeisenbergTerm(bonds="nn", coupling=1.0), ProjectorProductTerm("plaquette-pair", 1.0)])
    for kind in range(MAX_KINDS):
        table = _table(m, np.full(2, kind))
        meta = table[:, TT_META]
        assert [meta_kind(x) for x in meta] == [kind] * m.n_terms
        assert [meta_group(x) for x in meta] == m.term_group.tolist()
        assert [meta_bonds(x) for x in meta] == np.diff(m.term_start).tolist()
    many = term_table(np.array([0, 1]), np.array([0]), np.array([70000]), np.array([[0, 1]]),
                      np.full(70001, MAX_KINDS - 1), np.zeros(1))
    assert (meta_group(many[0, TT_META]), meta_kind(many[0, TT_META])) == (70000, MAX_KINDS - 1)


def test_more_than_three_bonds_are_refused():
    with pytest.raises(ValueError, match="1 to 3 bonds"):
        term_table(np.array([0, 4]), np.arange(4), np.zeros(1), np.zeros((4, 2)), np.zeros(1),
                   np.zeros(4))


def test_unknown_kind_codes_are_refused():
    with pytest.raises(ValueError, match="vertex-kind codes"):
        term_table(np.array([0, 1]), np.arange(1), np.zeros(1), np.zeros((1, 2)), np.array([MAX_KINDS]),
                   np.zeros(1))


@pytest.mark.parametrize("kind, size, n_classes", [("square", (6, 4), 2), ("honeycomb", (3, 3), 3),
                                                   ("bilayer", (4, 4), 3), ("cubic", (4, 4, 4), 3),
                                                   ("chain", (8,), 1)])
def test_displacement_classes_give_every_bond_its_displacement(kind, size, n_classes):
    """One class per distinct displacement (the unit cell's bond declarations: square x and y; honeycomb
    three fractional ones; bilayer x, y and the rung with displacement 0), and each bond's row is its
    displacement to the bit."""
    m = compile_model(build_lattice(kind, size), [HeisenbergTerm(bonds="nn", coupling=1.0)])
    disp = m.bond_disp.reshape(len(m.bond_sites), m.n_dirs)
    rows, cls = displacement_classes(disp)
    assert rows.shape == (n_classes, m.n_dirs) and cls.dtype == np.int32 and cls.shape == (len(disp),)
    assert np.array_equal(rows[cls], disp)
    assert len({tuple(r) for r in rows.tolist()}) == n_classes


def test_displacement_classes_without_winding_directions():
    rows, cls = displacement_classes(np.zeros((5, 0)))
    assert rows.shape == (1, 0) and cls.tolist() == [0] * 5
    with pytest.raises(ValueError, match="2-d array"):
        displacement_classes(np.zeros(5))
