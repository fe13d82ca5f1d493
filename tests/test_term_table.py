"""The per-term table of the diagonal sweep (qmc.engine.vertices.term_table) holds exactly the model's
terms: bond count, group, and each bond's sites and index, read back against the model's flat arrays
(common practice, no source: a layout check)."""

from __future__ import annotations

import numpy as np
import pytest
from qmc.models import HeisenbergTerm, ProjectorProductTerm, build_lattice, compile_model

from qmc.engine.vertices import TT_BOND, TT_META, term_table


@pytest.mark.parametrize("shape, width", [(None, 4), ("plaquette-pair", 8), ("column-of-three", 16)])
def test_rows_repeat_the_model(shape, width):
    terms = [HeisenbergTerm(bonds="nn", coupling=1.0)]
    if shape:
        terms.append(ProjectorProductTerm(shape=shape, coupling=2.0))
    m = compile_model(build_lattice("square", (6, 6)), terms)
    table = term_table(m.term_start, m.term_bonds, m.term_group, m.bond_sites)
    assert table.dtype == np.int32 and table.shape == (m.n_terms, width)
    for t in range(m.n_terms):
        bonds = m.term_bonds[m.term_start[t]:m.term_start[t + 1]]
        assert table[t, TT_META] & 3 == len(bonds) and table[t, TT_META] >> 2 == m.term_group[t]
        for a, b in enumerate(bonds):
            i, j, bb = table[t, TT_BOND + 3 * a:TT_BOND + 3 * a + 3]
            assert (i, j, bb) == (m.bond_sites[b, 0], m.bond_sites[b, 1], b)
        assert not table[t, TT_BOND + 3 * len(bonds):].any()


def test_more_than_three_bonds_are_refused():
    with pytest.raises(ValueError, match="1 to 3 bonds"):
        term_table(np.array([0, 4]), np.arange(4), np.zeros(1), np.zeros((4, 2)))
