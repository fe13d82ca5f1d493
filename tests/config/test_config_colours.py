"""The configuration of SU(N) models: [model] colors (a number or a scan name), type = "projector", user
shapes with one offset entry per lattice direction on every lattice; bad input gives one located UserError.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from qmc.models.compiled import KIND_COLOUR, KIND_PROJECTOR

from qmc.config.parser import build_model, config_fingerprint, load_config, validate
from qmc.errors import UserError
from qmc.run.task_identity import task_fingerprint

RUN = '[run]\nseed = 3\noutput = "out"\n'
CHAIN = '[lattice]\nkind = "chain"\nsize = ["L"]\n'
SQUARE = '[lattice]\nkind = "square"\nsize = ["L", "L"]\n'
PROJ = '[[terms]]\ntype = "projector"\nbonds = "nn"\ncoupling = 1.0\n'
QCHAIN = '[[terms]]\ntype = "projector-product"\nshape = [[[0], [1]], [[2], [3]]]\ncoupling = "Q"\n'
SCAN = '[scan]\nL = [8]\nQ = [0.5, 1.0]\nbeta = 2\n'
SAMPLING = '[sampling]\nwarmup_steps = 10\nmeasure_steps = 100\nbins = 10\n'


def text(model='[model]\ncolors = 3\n', lattice=CHAIN, terms=PROJ + QCHAIN, scan=SCAN, extra=""):
    return "\n".join([RUN, model, lattice, terms, scan, SAMPLING, extra])


def _load(tmp_path: Path, content: str):
    path = tmp_path / "c.toml"
    path.write_text(content)
    config = load_config(path)
    validate(config)
    return config


BAD = [
    ("colors-one", text(model="[model]\ncolors = 1\n"), "model.colors", ["whole number from 2 to 100"]),
    ("colors-fraction", text(model="[model]\ncolors = 2.5\n"), "model.colors", ["whole number"]),
    ("colors-unknown-name", text(model='[model]\ncolors = "M"\n'), "model.colors",
     ["M", "define it in [scan]"]),
    ("colors-scanned-too-large", text(model='[model]\ncolors = "N"\n', scan=SCAN + "N = [3, 200]\n"),
     "model.colors", ["colors = 200", "N=200", "from 2 to 100"]),
    ("model-unknown-key", text(model="[model]\ncolours = 3\n"), "model.colours",
     ["unknown key", "did you mean 'colors'"]),
    ("colors-in-lattice", text(lattice=CHAIN + "colors = 3\n"), "lattice.colors", ["belongs in [model]"]),
    ("heisenberg-su3", text(terms='[[terms]]\ntype = "heisenberg"\nbonds = "nn"\ncoupling = 1.0\n' + QCHAIN),
     "terms[0].type", ["heisenberg", "colors = 2, not 3", 'type = "projector"']),
    ("heisenberg-scanned-colors", text(model='[model]\ncolors = "N"\n', scan=SCAN + "N = [2, 4]\n",
                                       terms='[[terms]]\ntype = "heisenberg"\nbonds = "nn"\ncoupling = 1.0\n'
                                             + QCHAIN),
     "terms[0].type", ["not 4", "N=4", "projector"]),
    ("xxz-su3", text(terms=QCHAIN + '[[terms]]\ntype = "xxz"\nbonds = "nn"\ncoupling = 1.0\ndelta = 0.5\n'),
     "terms[1].type", ["an xxz term", "colors = 2, not 3"]),
    ("field-scanned-colors", text(model='[model]\ncolors = "N"\n', scan=SCAN + "N = [2, 3]\n",
                                  terms=QCHAIN + '[[terms]]\ntype = "field"\ncoupling = 0.5\n'),
     "terms[1].type", ["a field term", "not 3", "N=3"]),
    ("projector-needs-bonds", text(terms='[[terms]]\ntype = "projector"\ncoupling = 1.0\n'), "terms[0].bonds",
     ["missing required key 'bonds'"]),
    ("projector-negative", text(terms=PROJ.replace("1.0", "-1.0")), "terms[0].coupling", ["negative"]),
    ("shape-too-many-entries", text(terms=PROJ + QCHAIN.replace("[[[0], [1]], [[2], [3]]]",
                                                                 "[[[0, 0, 0], [1, 0, 0]]]")),
     "terms[1].shape", ["3 entries", "chain lattice needs 1", "or 2 with the site of the unit cell"]),
    ("shape-mixed-lengths", text(terms=PROJ + QCHAIN.replace("[[[0], [1]], [[2], [3]]]",
                                                              "[[[0], [1]], [[2, 0], [3, 0]]]")),
     "terms[1].shape", ["offset", "same number of entries"]),
    ("shape-same-sublattice-chain", text(terms=PROJ + QCHAIN.replace("[[[0], [1]], [[2], [3]]]",
                                                                      "[[[0], [2]]]")),
     "terms[1].shape[0]", ["same sublattice", "sign problem"]),
    ("exchange-along-colors", text(model='[model]\ncolors = "N"\n', scan=SCAN + "N = [3, 4]\n",
                                   extra='[exchange]\nalong = "N"\n'), "exchange.along",
     ["not a scanned coupling"]),
    ("exchange-changes-colors", text(model='[model]\ncolors = "Q"\n',
                                     scan='[scan]\nL = [8]\nQ = [3, 4]\nbeta = 2\n',
                                     extra='[exchange]\nalong = "Q"\n'), "exchange.along",
     ["changes model.colors"]),
]


@pytest.mark.parametrize("content, key, problems", [c[1:] for c in BAD], ids=[c[0] for c in BAD])
def test_malformed_colour_config(tmp_path, content, key, problems):
    with pytest.raises(UserError) as info:
        _load(tmp_path, content)
    message = str(info.value)
    assert key in info.value.where, message
    for problem in problems:
        assert problem in message, message


def test_colors_scan_gives_tasks_and_models_of_each_n(tmp_path):
    config = _load(tmp_path, text(model='[model]\ncolors = "N"\n', scan=SCAN + "N = [2, 3, 4]\n"))
    tasks = config.tasks()
    assert [t.colors for t in tasks] == [2, 3, 4, 2, 3, 4]  # L, Q, N in file order, the last fastest
    for t in tasks:
        m = build_model(t)
        assert m.n_colours == t.colors and t.params["N"] == t.colors
        assert set(m.group_kind.tolist()) == {KIND_PROJECTOR if t.colors == 2 else KIND_COLOUR}
        assert m.group_names == ("nn", "q2") and m.max_bonds_per_term == 2
        assert m.n_terms == 16  # 8 bonds + 8 placements of P_{x,x+1} P_{x+2,x+3}


def test_fingerprints_of_two_colours_are_unchanged(tmp_path):
    scan = "[scan]\nL = [8]\nbeta = 2\n"
    a = _load(tmp_path, text(model="", terms=PROJ, scan=scan))
    b = _load(tmp_path, text(model="[model]\ncolors = 2\n", terms=PROJ, scan=scan))
    c = _load(tmp_path, text(model="[model]\ncolors = 3\n", terms=PROJ, scan=scan))
    assert config_fingerprint(a) == config_fingerprint(b) != config_fingerprint(c)
    ta, tb, tc = a.tasks()[0], b.tasks()[0], c.tasks()[0]
    assert task_fingerprint(ta) == task_fingerprint(tb) != task_fingerprint(tc)
    assert ta.seed_key == tc.seed_key  # the random stream depends on the scan values only


def test_projector_term_at_two_colours_is_heisenberg_minus_a_quarter(tmp_path):
    heis = '[[terms]]\ntype = "heisenberg"\nbonds = "nn"\ncoupling = 1.5\n'
    a = build_model(_load(tmp_path, text(model="", lattice=SQUARE, terms=heis,
                                         scan="[scan]\nL = [4]\nbeta = 2\n")).tasks()[0])
    b = build_model(_load(tmp_path, text(model="", lattice=SQUARE, terms=PROJ.replace("1.0", "1.5"),
                                         scan="[scan]\nL = [4]\nbeta = 2\n")).tasks()[0])
    assert np.array_equal(a.term_coupling, b.term_coupling) and np.array_equal(a.term_bonds, b.term_bonds)
    assert a.energy_constant - b.energy_constant == pytest.approx(1.5 / 4 * 32)  # J/4 per bond
    assert a.group_kind.tolist() == b.group_kind.tolist() == [KIND_PROJECTOR]


def test_user_shapes_on_other_lattices(tmp_path):
    cubic = '[lattice]\nkind = "cubic"\nsize = [4, 4, 4]\n'
    q = '[[terms]]\ntype = "projector-product"\nshape = [[[0, 0, 0], [1, 0, 0]], [[0, 1, 0], [1, 1, 0]]]\n' \
        'coupling = 1.0\n'
    one = "[scan]\nbeta = 2\n"
    m = build_model(_load(tmp_path, text(lattice=cubic, terms=PROJ + q, scan=one)).tasks()[0])
    assert m.n_colours == 3 and m.n_terms == 3 * 64 + 6 * 64  # nn bonds + six orientations of the pair
    honey = '[lattice]\nkind = "honeycomb"\nsize = [3, 3]\n'
    q = '[[terms]]\ntype = "projector-product"\nshape = [[[0, 0, 0], [0, 0, 1]]]\ncoupling = 1.0\n'
    m = build_model(_load(tmp_path, text(lattice=honey, terms=PROJ + q, scan=one)).tasks()[0])
    assert m.n_terms == 27 + 9  # nn bonds + one A-B bond per cell (the offsets name the site of the cell)
