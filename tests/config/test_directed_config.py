"""Configuration of xxz and field terms: parsing, located errors, the sign guard named by term, and no
replica exchange for directed loops."""

from __future__ import annotations

from pathlib import Path

import pytest
from qmc.models.compiled import KIND_DIRECTED

from qmc.config.build import build_model
from qmc.config.parser import load_config
from qmc.errors import UserError

HEAD = """
[run]
seed = 1
output = "run"
[lattice]
kind = "square"
size = [4, 4]
"""
TAIL = """
[sampling]
warmup_steps = 100
measure_steps = 1000
bins = 10
"""


def _load(tmp_path: Path, terms: str, scan: str = "beta = 1.0\n", extra: str = ""):
    path = tmp_path / "c.toml"
    path.write_text(HEAD + terms + "[scan]\n" + scan + TAIL + extra)
    return load_config(path)


def test_xxz_and_field_terms_build_a_directed_model(tmp_path):
    terms = ('[[terms]]\ntype = "xxz"\nbonds = "nn"\ncoupling = -1.0\ndelta = "D"\n'
             '[[terms]]\ntype = "field"\ncoupling = "h"\nstaggered = true\nname = "hs"\n')
    config = _load(tmp_path, terms, 'beta = 1.0\nD = [0.0, 0.5]\nh = 0.3\n')
    tasks = config.tasks()
    assert [t.terms[0]["delta"] for t in tasks] == [0.0, 0.5]
    assert tasks[0].terms[1] == {"type": "field", "coupling": 0.3, "staggered": True, "name": "hs"}
    model = build_model(tasks[1])
    assert set(model.group_kind.tolist()) == {KIND_DIRECTED}
    assert model.group_names == ("nn", "hs")
    assert model.term_xxz[0, 1] == 0.5 and model.term_xxz[0, 0] == -1.0


@pytest.mark.parametrize("terms, key, words", [
    ('[[terms]]\ntype = "xxz"\nbonds = "nn"\ncoupling = 1.0\n', "terms[0]", ["delta"]),
    ('[[terms]]\ntype = "field"\ncoupling = 1.0\nstaggered = "yes"\n', "terms[0].staggered",
     ["true or false"]),
    ('[[terms]]\ntype = "heisenberg"\nbonds = "nn"\ncoupling = 1.0\ndelta = 0.5\n', "terms[0].delta",
     ["does not apply to a heisenberg term"]),
])
def test_malformed_terms_are_located(tmp_path, terms, key, words):
    with pytest.raises(UserError) as err:
        _load(tmp_path, terms)
    assert key in err.value.where
    for w in words:
        assert w in err.value.message


def test_a_sign_problem_names_the_term(tmp_path):
    terms = ('[[terms]]\ntype = "xxz"\nbonds = "nn"\ncoupling = -1.0\ndelta = 0.0\n'
             '[[terms]]\ntype = "heisenberg"\nbonds = "x"\ncoupling = 1.0\n')
    task = _load(tmp_path, terms).tasks()[0]
    with pytest.raises(UserError) as err:
        build_model(task)
    assert err.value.where.endswith("terms[1].coupling") and "sign problem" in err.value.message


def test_replica_exchange_is_refused_for_directed_loops(tmp_path):
    terms = ('[[terms]]\ntype = "heisenberg"\nbonds = "nn"\ncoupling = "J"\n'
             '[[terms]]\ntype = "field"\ncoupling = 0.2\n')
    with pytest.raises(UserError, match="replica exchange is not available with field terms"):
        _load(tmp_path, terms, 'beta = 1.0\nJ = [1.0, 1.1]\n', '[exchange]\nalong = "J"\n')
