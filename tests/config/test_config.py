"""Configuration loading: malformed files give one located UserError; tasks are as specified.

Every malformed case is a small TOML text written to tmp_path; the error text must name the file, the key
and the problem.  Positive checks compare with hand-counted task lists.
"""

from __future__ import annotations

import itertools
import re
from pathlib import Path

import pytest
from helpers.paths import REPO

from qmc.config.parser import build_model, config_fingerprint, load_config, validate
from qmc.config.templates import TEMPLATES, template
from qmc.errors import UserError
from qmc.run.task_identity import task_fingerprint

RUN = '[run]\nname = "t"\noutput = "out"\nseed = 7\n'
LATTICE = '[lattice]\nkind = "bilayer"\nsize = ["L", "L"]\n'
TERMS = ('[[terms]]\ntype = "heisenberg"\nbonds = "intra"\ncoupling = 1.0\n'
         '[[terms]]\ntype = "heisenberg"\nbonds = "inter"\ncoupling = "g"\n')
SCAN = '[scan]\nL = [4, 6]\ng = [2.4, 2.5, 2.6]\nbeta = "L"\n'
SAMPLING = '[sampling]\nwarmup_steps = 100\nmeasure_steps = 1000\nbins = 10\n'
JQ_TERMS = ('[[terms]]\ntype = "heisenberg"\nbonds = "nn"\ncoupling = 1.0\n'
            '[[terms]]\ntype = "projector-product"\nshape = "plaquette-pair"\ncoupling = "g"\n')


def text(run=RUN, lattice=LATTICE, terms=TERMS, scan=SCAN, sampling=SAMPLING, extra=""):
    return "\n".join([run, lattice, terms, scan, sampling, extra])


def write(tmp_path: Path, content: str, name: str = "case.toml") -> Path:
    path = tmp_path / name
    path.write_text(content)
    return path


def load_and_validate(path: Path):
    config = load_config(path)
    validate(config)
    return config


# (id, toml text, key expected in the message, problem substrings)
BAD = [
    ("syntax", text(sampling="[sampling]\nwarmup_steps = 100\nmeasure_steps =\nbins = 10\n"),
     "line 26, column 16", ["invalid TOML", "measure_steps ="]),
    ("syntax-eof", text(extra='x = "unterminated'), "line", ["invalid TOML", "end of the file"]),
    ("duplicate-section", text(extra="[run]\nseed = 2\n"), "line", ["invalid TOML"]),
    ("unknown-section", text(extra="[sampler]\nbins = 2\n"), "sampler", ["unknown section", "'sampling'"]),
    ("top-level-key", "seed = 3\n" + text(), "seed", ["unknown", "belongs in [run]"]),
    ("unknown-run-key", text(run=RUN + "sed = 1\n"), "run.sed", ["unknown key", "did you mean 'seed'"]),
    ("key-in-wrong-section", text(sampling=SAMPLING + "beta = 4\n"), "sampling.beta", ["belongs in [scan]"]),
    ("bins-text", text(sampling=SAMPLING.replace("bins = 10", 'bins = "ten"')), "sampling.bins",
     ["must be an integer", "'ten'"]),
    ("missing-seed", text(run='[run]\nname = "t"\n'), "run.seed", ["missing required key 'seed'"]),
    ("missing-lattice", text(lattice=""), "lattice", ["missing section [lattice]"]),
    ("missing-measure", text(sampling="[sampling]\nwarmup_steps = 1\nbins = 10\n"), "sampling.measure_steps",
     ["missing required key"]),
    ("missing-terms", text(terms=""), "terms", ["no [[terms]]"]),
    ("terms-not-array", text(terms='[terms]\ntype = "heisenberg"\n'), "terms", ["[[terms]] blocks"]),
    ("unknown-kind", text(lattice='[lattice]\nkind = "bilayr"\nsize = ["L", "L"]\n'), "lattice.kind",
     ["unknown lattice kind", "did you mean 'bilayer'"]),
    ("unknown-boundary", text(lattice=LATTICE + 'boundary = "periodc"\n'), "lattice.boundary",
     ["unknown boundary", "did you mean 'periodic'"]),
    ("size-length", text(lattice='[lattice]\nkind = "bilayer"\nsize = ["L"]\n'), "lattice.size",
     ["needs 2 size entries"]),
    ("unknown-bond-class", text(terms=TERMS.replace('"intra"', '"intre"')), "terms[0].bonds",
     ["unknown bond class", "did you mean 'intra'"]),
    ("unknown-term-type", text(terms=TERMS.replace('"heisenberg"', '"heisenburg"', 1)), "terms[0].type",
     ["unknown term type", "did you mean 'heisenberg'"]),
    ("unknown-term-key", text(terms=TERMS.replace("coupling = 1.0", "couplng = 1.0")), "terms[0].couplng",
     ["unknown key", "did you mean 'coupling'"]),
    ("key-of-other-term-type", text(terms=TERMS.replace("coupling = 1.0", 'coupling = 1.0\nshape = "x"')),
     "terms[0].shape", ["does not apply to a heisenberg term"]),
    ("unknown-shape", text(lattice='[lattice]\nkind = "square"\nsize = ["L", "L"]\n',
                           terms=JQ_TERMS.replace("plaquette-pair", "plaquete-pair")), "terms[1].shape",
     ["unknown shape", "did you mean 'plaquette-pair'"]),
    ("shape-malformed", text(lattice='[lattice]\nkind = "square"\nsize = ["L", "L"]\n',
                             terms=JQ_TERMS.replace('"plaquette-pair"', "[[0, 0], [1, 0]]")),
     "terms[1].shape[0]", ["[[dx, dy], [dx, dy]]"]),
    ("shape-same-sublattice", text(lattice='[lattice]\nkind = "square"\nsize = ["L", "L"]\n',
                                   terms=JQ_TERMS.replace('"plaquette-pair"', "[[[0, 0], [2, 0]]]")),
     "terms[1].shape[0]", ["sign problem"]),
    ("beta-zero", text(scan='[scan]\nL = [4, 6]\ng = [2.4]\nbeta = 0\n'), "scan.beta", ["must be positive"]),
    ("beta-negative-expression", text(scan='[scan]\nL = [4, 6]\ng = [2.4]\nbeta = "-0.5*L"\n'), "scan.beta",
     ["must be positive", "L=4"]),
    ("beta-negative-in-list", text(scan='[scan]\nL = [4]\ng = [2.4]\nbeta = [1.0, -2.0]\n'), "scan.beta",
     ["beta = -2 (for L=4, g=2.4) must be positive"]),
    ("beta-missing", text(scan='[scan]\nL = [4]\ng = [2.4]\n'), "scan.beta",
     ["missing required key 'beta'"]),
    ("scan-missing", text(scan=""), "scan.beta", ["missing required key 'beta'"]),
    ("size-not-integer", text(scan='[scan]\nL = [4.5]\ng = [2.4]\nbeta = 2\n'), "lattice.size[0]",
     ["not an integer", "L=4.5"]),
    ("size-too-small", text(scan='[scan]\nL = [0]\ng = [2.4]\nbeta = 2\n'), "lattice.size[0]",
     ["at least 2"]),
    ("size-odd-periodic", text(scan='[scan]\nL = [4, 5]\ng = [2.4]\nbeta = 2\n'), "lattice.size[0]",
     ["odd", "bipartite"]),
    ("bins-not-dividing", text(sampling=SAMPLING.replace("bins = 10", "bins = 7")), "sampling.bins",
     ["does not divide measure_steps = 1000", "bins = 8"]),
    ("bins-one", text(sampling=SAMPLING.replace("bins = 10", "bins = 1")), "sampling.bins", ["at least 2"]),
    ("warmup-negative", text(sampling=SAMPLING.replace("warmup_steps = 100", "warmup_steps = -5")),
     "sampling.warmup_steps", ["at least 0"]),
    ("measure-negative", text(sampling=SAMPLING.replace("measure_steps = 1000", "measure_steps = -1000")),
     "sampling.measure_steps", ["at least 1"]),
    ("copies-zero", text(sampling=SAMPLING + "copies = 0\n"), "sampling.copies", ["at least 1"]),
    ("checkpoint-zero", text(sampling=SAMPLING + "checkpoint_seconds = 0\n"), "sampling.checkpoint_seconds",
     ["must be positive"]),
    ("unbound-size", text(lattice='[lattice]\nkind = "bilayer"\nsize = ["M", "M"]\n'), "lattice.size[0]",
     ["'M'", "not a scan name"]),
    ("unbound-coupling", text(terms=TERMS.replace('coupling = "g"', 'coupling = "h"')), "terms[1].coupling",
     ["'h'", "not a scan name"]),
    ("unbound-beta", text(scan='[scan]\nL = [4]\ng = [2.4]\nbeta = "2*K"\n'), "scan.beta",
     ["'K'", "not a scan name"]),
    ("unused-scan-name", text(scan=SCAN + "h = [1, 2]\n"), "scan.h", ["scan.h is never used"]),
    ("range-num-zero", text(scan='[scan]\nL = [4]\ng = {start = 2.4, stop = 2.6, num = 0}\nbeta = 2\n'),
     "scan.g.num", ["at least 1"]),
    ("range-missing-stop", text(scan='[scan]\nL = [4]\ng = {start = 2.4, num = 3}\nbeta = 2\n'),
     "scan.g.stop", ["missing required key"]),
    ("empty-list", text(scan='[scan]\nL = []\ng = [2.4]\nbeta = 2\n'), "scan.L", ["empty"]),
    ("duplicate-values", text(scan='[scan]\nL = [4, 4]\ng = [2.4]\nbeta = 2\n'), "scan.L", ["appears twice"]),
    ("reserved-name", text(scan=SCAN + "copy = [1]\n"), "scan.copy", ["reserved", "sampling.copies"]),
    ("reserved-old-name", text(scan=SCAN + "replica = [1]\n"), "scan.replica", ["reserved"]),
    ("bad-expression", text(terms=TERMS.replace('coupling = "g"', 'coupling = "2**g"')), "terms[1].coupling",
     ["cannot read '2**g'"]),
    ("injection", text(scan='[scan]\nL = [4]\ng = [2.4]\nbeta = "__import__(\'os\')"\n'), "scan.beta",
     ["cannot read", "__import__"]),
    ("negative-J-literal", text(terms=TERMS.replace("coupling = 1.0", "coupling = -1.0")),
     "terms[0].coupling", ["negative", "sign problem"]),
    ("negative-J-scanned", text(scan='[scan]\nL = [4]\ng = [-1.0, 1.0]\nbeta = 2\n'), "terms[1].coupling",
     ["negative", "sign problem", "g=-1"]),
    ("negative-Q", text(lattice='[lattice]\nkind = "square"\nsize = ["L", "L"]\n', terms=JQ_TERMS,
                        scan='[scan]\nL = [4]\ng = [-0.5]\nbeta = 2\n'), "terms[1].coupling",
     ["negative", "sign problem"]),
    ("exchange-not-coupling", text(extra='[exchange]\nalong = "L"\n'), "exchange.along",
     ["not a scanned coupling"]),
    ("exchange-one-value", text(scan='[scan]\nL = [4]\ng = [2.4]\nbeta = 2\n',
                                extra='[exchange]\nalong = "g"\n'), "exchange.along", ["at least 2"]),
    ("exchange-unknown", text(extra='[exchange]\nalong = "gg"\n'), "exchange.along",
     ["not a scan name", "did you mean 'g'"]),
    ("exchange-derived", text(scan=SCAN + 'h = "2*g"\n', extra='[exchange]\nalong = "h"\n',
                              terms=TERMS.replace('coupling = "g"', 'coupling = "h"')),
     "exchange.along", ["is an expression"]),
    ("exchange-changes-size", text(terms=TERMS.replace('coupling = "g"', 'coupling = "L"'),
                                   scan='[scan]\nL = [4, 6]\nbeta = 2\n', extra='[exchange]\nalong = "L"\n'),
     "exchange.along", ["changes lattice.size[0]", "same lattice"]),
    ("exchange-changes-beta", text(scan='[scan]\nL = [4]\ng = [2.4, 2.5]\nbeta = "g"\n',
                                   extra='[exchange]\nalong = "g"\n'), "exchange.along", ["changes beta"]),
    ("exchange-along-missing", text(extra="[exchange]\nevery = 5\n"), "exchange.along",
     ["missing required key 'along' in [exchange]"]),
    ("exchange-every-zero", text(extra='[exchange]\nalong = "g"\nevery = 0\n'),
     "exchange.every", ["at least 1"]),
    ("exchange-every-text", text(extra='[exchange]\nalong = "g"\nevery = "often"\n'),
     "exchange.every", ["must be an integer"]),
    ("exchange-ranks-zero", text(extra='[exchange]\nalong = "g"\nmax_ranks = 0\n'),
     "exchange.max_ranks", ["at least 1"]),
    ("exchange-unknown-key", text(extra='[exchange]\nalong = "g"\nevry = 5\n'), "exchange.evry",
     ["unknown key", "did you mean 'every'"]),
    ("exchange-key-in-sampling", text(sampling=SAMPLING + "along = 'g'\n"), "sampling.along",
     ["belongs in [exchange]"]),
    ("exchange-not-a-table", 'exchange = "g"\n' + text(), "exchange", ["must be a section"]),
    ("seed-text", text(run='[run]\nseed = "abc"\n'), "run.seed", ["must be an integer"]),
    ("seed-negative", text(run='[run]\nseed = -1\n'), "run.seed", ["at least 0"]),
    ("seed-float", text(run='[run]\nseed = 1.5\n'), "run.seed", ["must be an integer"]),
    ("explicit-out-of-range", text(lattice='[lattice]\nkind = "explicit"\nsites = 4\n'
                                           'bonds = [[0, 1], [1, 4]]\n',
                                   terms='[[terms]]\ntype = "heisenberg"\nbonds = "all"\ncoupling = 1.0\n',
                                   scan="[scan]\nbeta = 2\n"), "lattice.bonds[1]", ["out of range"]),
    ("explicit-odd-loop", text(lattice='[lattice]\nkind = "explicit"\nsites = 3\n'
                                       'bonds = [[0, 1], [1, 2], [2, 0]]\n',
                               terms='[[terms]]\ntype = "heisenberg"\nbonds = "all"\ncoupling = 1.0\n',
                               scan="[scan]\nbeta = 2\n"), "lattice.bonds", ["bipartite"]),
    ("explicit-size-key", text(lattice='[lattice]\nkind = "explicit"\nsites = 2\n'
                                       'bonds = [[0, 1]]\nsize = 4\n',
                               terms='[[terms]]\ntype = "heisenberg"\nbonds = "all"\ncoupling = 1.0\n',
                               scan="[scan]\nbeta = 2\n"), "lattice.size", ["unknown key"]),
    ("term-name-clash", text(terms=TERMS.replace("coupling = 1.0", 'coupling = 1.0\nname = "a"')
                             .replace('coupling = "g"', 'coupling = "g"\nname = "a"')), "terms[1].name",
     ["already the name of terms[0]"]),
]


@pytest.mark.parametrize("content, key, problems", [c[1:] for c in BAD], ids=[c[0] for c in BAD])
def test_malformed_config(tmp_path, content, key, problems):
    path = write(tmp_path, content)
    with pytest.raises(UserError) as info:
        load_and_validate(path)
    message = str(info.value)
    assert str(path) in message, message
    assert key in info.value.where or key in message, message
    for problem in problems:
        assert problem in message, message
    assert "\n" not in message


# keys of earlier releases: (line in [sampling], key named in the message, its replacement)
OLD_KEYS = [
    ("replicas = 2", "sampling.replicas", "[sampling] copies"),
    ('exchange = "g"', "sampling.exchange", "[exchange] along"),
    ("exchange_every = 5", "sampling.exchange_every", "[exchange] every"),
    ("exchange_ranks = 2", "sampling.exchange_ranks", "[exchange] max_ranks"),
]


@pytest.mark.parametrize("line, key, new", OLD_KEYS, ids=[k for _, k, _ in OLD_KEYS])
def test_old_keys_name_their_replacement(tmp_path, line, key, new):
    path = write(tmp_path, text(sampling=SAMPLING + line + "\n"))
    with pytest.raises(UserError) as info:
        load_config(path)
    assert info.value.where == f"{path}: {key}"
    assert info.value.message == f"'{key.split('.')[1]}' in [sampling] was renamed: use {new} instead"


def test_there_are_at_least_thirty_malformed_cases():
    assert len(BAD) >= 30


def test_syntax_error_position_is_the_offending_line():
    content = BAD[0][1]
    assert content.splitlines()[25] == "measure_steps ="  # line 26, the value starts in column 16


def test_error_string_form(tmp_path):
    path = write(tmp_path, text(sampling=SAMPLING.replace("bins = 10", 'bins = "ten"')))
    with pytest.raises(UserError) as info:
        load_config(path)
    assert info.value.where == f"{path}: sampling.bins"
    assert str(info.value) == f"{info.value.where}: {info.value.message}"


def test_missing_file(tmp_path):
    with pytest.raises(UserError, match="not found") as info:
        load_config(tmp_path / "nope.toml")
    assert "nope.toml" in str(info.value)


def test_output_path_that_is_a_file_is_refused(tmp_path):
    (tmp_path / "out").write_text("I am a file")
    path = write(tmp_path, text())
    with pytest.raises(UserError) as info:
        load_config(path)
    assert "run.output" in str(info.value) and "not a directory" in str(info.value)


def test_output_dir_is_relative_to_the_config_file(tmp_path):
    sub = tmp_path / "deep" / "er"
    sub.mkdir(parents=True)
    config = load_config(write(sub, text()))
    assert config.output_dir == (sub / "out").resolve()
    assert config.run.output == "out" and config.name == "t" and config.seed == 7


def test_defaults(tmp_path):
    config = load_config(write(tmp_path, text(run="[run]\nseed = 0\n"), name="my-run.toml"))
    assert config.name == "my-run"
    assert config.output_dir == (tmp_path / "runs" / "my-run").resolve()
    s = config.sampling
    assert (s.copies, s.checkpoint_seconds, s.exchange, s.steps_per_bin) == (1, 300.0, None, 100)
    assert config.lattice.boundary == "periodic"


def test_task_count_is_product_of_scan_lengths_times_copies(tmp_path):
    scan = '[scan]\nL = [4, 6, 8]\ng = {start = 2.0, stop = 3.0, num = 5}\nbeta = [1.0, 2.0]\n'
    config = load_config(write(tmp_path, text(scan=scan, sampling=SAMPLING + "copies = 3\n")))
    tasks = config.tasks()
    assert len(tasks) == 3 * 5 * 2 * 3
    assert {t.copy for t in tasks} == {0, 1, 2} == {t.params["copy"] for t in tasks}
    assert {t.params["g"] for t in tasks} == {2.0, 2.25, 2.5, 2.75, 3.0}


def test_beta_expression_resolves(tmp_path):
    scan = '[scan]\nL = [4, 6]\ng = [2.5]\nbeta = "2*L"\n'
    tasks = load_config(write(tmp_path, text(scan=scan))).tasks()
    assert [(t.size, t.beta, t.params["beta"]) for t in tasks] == [((4, 4), 8.0, 8), ((6, 6), 12.0, 12)]
    assert all(isinstance(t.beta, float) for t in tasks)


def test_a_list_of_expressions_runs_every_point_at_each(tmp_path):
    scan = '[scan]\nL = [4, 6]\ng = [2.5]\nbeta = ["L", "2*L", 3]\n'
    config = load_config(write(tmp_path, text(scan=scan)))
    tasks = config.tasks()
    assert [(t.task_id, t.beta) for t in tasks] == [
        ("L4_g2.5_beta4_c0", 4.0), ("L4_g2.5_beta8_c0", 8.0), ("L4_g2.5_beta3_c0", 3.0),
        ("L6_g2.5_beta6_c0", 6.0), ("L6_g2.5_beta12_c0", 12.0), ("L6_g2.5_beta3_c0", 3.0)]
    # the same tasks as written out by hand: same streams
    by_hand = load_config(write(tmp_path, text(scan='[scan]\nL = [4]\ng = [2.5]\nbeta = [4, 8, 3]\n'),
                                name="h.toml")).tasks()
    assert [t.seed_key for t in by_hand] == [t.seed_key for t in tasks[:3]]
    other = load_config(write(tmp_path, text(scan=scan.replace('"2*L"', '"3*L"')), name="o.toml"))
    assert config_fingerprint(other) != config_fingerprint(config)


@pytest.mark.parametrize("beta, problem", [
    ('["L", "2*h"]', "'2*h' uses 'h', which is not a scan name"),
    ('["L", "L"]', "the value 'L' appears twice"),
    ('["L", 4]', "'L' and '4' are both 4 (for L=4, g=2.5): one task would be run twice"),
    ('["L", "2*b2"]', "uses 'b2', which is itself an expression"),
])
def test_a_bad_list_of_expressions_is_refused(tmp_path, beta, problem):
    scan = f'[scan]\nL = [4, 6]\ng = [2.5]\nb2 = "2*L"\nbeta = {beta}\n'
    if "b2" not in beta:
        scan = scan.replace('b2 = "2*L"\n', "")
    with pytest.raises(UserError) as info:
        load_and_validate(write(tmp_path, text(scan=scan)))
    assert problem in str(info.value) and "scan.beta" in str(info.value)


def test_task_contents(tmp_path):
    tasks = load_config(write(tmp_path, text())).tasks()
    t = tasks[4]  # L = 6 (slowest), g = 2.5, copy 0
    assert t.task_id == "L6_g2.5_c0"
    assert t.params == {"L": 6, "g": 2.5, "beta": 6, "copy": 0}
    assert (t.lattice_kind, t.size, t.boundary, t.beta, t.copy, t.exchange) == ("bilayer", (6, 6),
                                                                                  "periodic", 6.0, 0, None)
    assert t.terms == [{"type": "heisenberg", "bonds": "intra", "coupling": 1.0},
                       {"type": "heisenberg", "bonds": "inter", "coupling": 2.5}]
    assert t.sampling.bins == 10 and t.seed == 7
    # the seed key keeps the text of earlier releases ("replica" = copy index): streams stay the same
    assert t.seed_key == "L=6.0;beta=6.0;g=2.5;replica=0"
    assert t.exchange_group is None and t.exchange_seed_key is None


def test_ids_unique_readable_and_stable(tmp_path):
    config = load_config(write(tmp_path, text(sampling=SAMPLING + "copies = 2\n")))
    ids = [t.task_id for t in config.tasks()]
    assert ids == [f"L{L}_g{g}_c{c}" for L in (4, 6) for g in ("2.4", "2.5", "2.6") for c in (0, 1)]
    assert ids == [t.task_id for t in load_config(write(tmp_path, text(sampling=SAMPLING + "copies = 2\n"),
                                                        name="again.toml")).tasks()]
    assert all(all(c.isalnum() or c in "._-+" for c in i) for i in ids)


def test_range_values_are_clean_and_ids_unique(tmp_path):
    scan = '[scan]\nL = {start = 4, stop = 8, num = 3}\ng = {start = 2.40, stop = 2.60, num = 11}\nbeta = 2\n'
    tasks = load_config(write(tmp_path, text(scan=scan))).tasks()
    assert sorted({t.params["L"] for t in tasks}) == [4, 6, 8]
    assert all(isinstance(t.params["L"], int) for t in tasks)
    gs = sorted({t.params["g"] for t in tasks})
    assert gs == [2.4, 2.42, 2.44, 2.46, 2.48, 2.5, 2.52, 2.54, 2.56, 2.58, 2.6]
    ids = [t.task_id for t in tasks]
    assert len(set(ids)) == len(ids) == 33 and "L6_g2.42_beta2_c0" in ids


def test_close_values_get_distinct_ids(tmp_path):
    scan = '[scan]\nL = [4]\ng = [2.5, 2.500001, 2.5000000001]\nbeta = 2\n'
    ids = [t.task_id for t in load_config(write(tmp_path, text(scan=scan))).tasks()]
    assert len(set(ids)) == 3


def test_seed_key_independent_of_order_and_count(tmp_path):
    a = load_config(write(tmp_path, text(), name="a.toml")).tasks()
    scan_b = '[scan]\nbeta = "L"\ng = [2.6, 2.5, 2.4, 2.7]\nL = [6, 4]\n'
    b = load_config(write(tmp_path, text(scan=scan_b), name="b.toml")).tasks()
    key_a = {(t.params["L"], t.params["g"], t.copy): t.seed_key for t in a}
    key_b = {(t.params["L"], t.params["g"], t.copy): t.seed_key for t in b}
    assert all(key_b[k] == v for k, v in key_a.items())
    assert len(set(key_b.values())) == len(key_b)


def test_seed_key_is_type_blind(tmp_path):
    a = load_config(write(tmp_path, text(), name="a.toml")).tasks()
    b = load_config(write(tmp_path, text(scan=SCAN.replace("[4, 6]", "[4.0, 6.0]")), name="b.toml")).tasks()
    assert [t.seed_key for t in a] == [t.seed_key for t in b]


def test_fingerprint(tmp_path):
    base = config_fingerprint(load_config(write(tmp_path, text(), name="a.toml")))
    relaid = text().replace("coupling = 1.0", "coupling = 1   # same value, other spelling")
    relaid = relaid.replace('name = "t"', 'name = "other name"').replace("[run]", "# comment\n[run]")
    assert config_fingerprint(load_config(write(tmp_path, relaid, name="b.toml"))) == base
    changed = text(scan=SCAN.replace("2.6]", "2.7]"))
    assert config_fingerprint(load_config(write(tmp_path, changed, name="c.toml"))) != base
    reordered = text(scan='[scan]\ng = [2.4, 2.5, 2.6]\nL = [4, 6]\nbeta = "L"\n')
    assert config_fingerprint(load_config(write(tmp_path, reordered, name="d.toml"))) != base  # ids change
    assert re.fullmatch("[0-9a-f]{64}", base), base  # a SHA-256 hex digest


def test_exchange_groups(tmp_path):
    config = load_config(write(tmp_path, text(sampling=SAMPLING + "copies = 2\n",
                                              extra='[exchange]\nalong = "g"\n')))
    groups: dict[str, list[float]] = {}
    keys: dict[str, set[str]] = {}
    for t in config.tasks():
        assert t.exchange == "g"
        groups.setdefault(t.exchange_group, []).append(t.params["g"])
        keys.setdefault(t.exchange_group, set()).add(t.exchange_seed_key)
    assert groups == {f"L{L}_c{c}": [2.4, 2.5, 2.6] for L in (4, 6) for c in (0, 1)}
    # one swap stream per ladder, keyed by the text of earlier releases so that swaps stay the same
    assert keys == {f"L{L}_c{c}": {f"exchange:L{L}_r{c}"} for L in (4, 6) for c in (0, 1)}


def test_exchange_every_default_value_and_fingerprint(tmp_path):
    base = load_config(write(tmp_path, text(extra='[exchange]\nalong = "g"\n'), name="a.toml"))
    assert base.sampling.exchange_every == 10
    assert all(t.sampling.exchange_every == 10 for t in base.tasks())
    same = load_config(write(tmp_path, text(extra='[exchange]\nalong = "g"\nevery = 10\n'), name="b.toml"))
    other = load_config(write(tmp_path, text(extra='[exchange]\nalong = "g"\nevery = 3\n'), name="c.toml"))
    assert other.sampling.exchange_every == 3
    assert config_fingerprint(same) == config_fingerprint(base) != config_fingerprint(other)
    # without exchange the fingerprint does not depend on the (unused) default
    plain = load_config(write(tmp_path, text(), name="d.toml"))
    assert plain.sampling.exchange_every == 10 and plain.sampling.exchange is None
    # max_ranks says where chains run, not what they compute: no new fingerprint
    capped = load_config(write(tmp_path, text(extra='[exchange]\nalong = "g"\nmax_ranks = 1\n'),
                               name="e.toml"))
    assert capped.sampling.exchange_ranks == 1 and base.sampling.exchange_ranks is None
    assert config_fingerprint(capped) == config_fingerprint(base)
    assert [task_fingerprint(t) for t in capped.tasks()] == [task_fingerprint(t) for t in base.tasks()]


def test_scalar_size_and_derived_entries(tmp_path):
    lattice = '[lattice]\nkind = "cubic"\nsize = "L"\nboundary = "open"\n'
    terms = '[[terms]]\ntype = "heisenberg"\nbonds = "nn"\ncoupling = "J"\n'
    scan = '[scan]\nL = [3]\ng = [1.0, 2.0]\nJ = "0.5*g"\nbeta = "L*2"\n'
    tasks = load_config(write(tmp_path, text(lattice=lattice, terms=terms, scan=scan))).tasks()
    assert [t.size for t in tasks] == [(3, 3, 3)] * 2  # odd size allowed with open boundaries
    assert [t.terms[0]["coupling"] for t in tasks] == [0.5, 1.0]
    assert [t.task_id for t in tasks] == ["L3_g1_c0", "L3_g2_c0"]
    assert tasks[0].params == {"L": 3, "g": 1.0, "J": 0.5, "beta": 6, "copy": 0}


def test_scalar_size_error_names_lattice_size(tmp_path):
    lattice = '[lattice]\nkind = "square"\nsize = "L"\n'
    with pytest.raises(UserError) as info:
        load_config(write(tmp_path, text(lattice=lattice, terms=JQ_TERMS, scan=SCAN.replace("6]", "7]"))))
    assert info.value.where.endswith(": lattice.size") and "odd" in info.value.message


def test_explicit_lattice_with_classes_builds(tmp_path):
    lattice = ('[lattice]\nkind = "explicit"\nsites = 4\nbonds = [[0, 1], [1, 2], [2, 3], [3, 0]]\n'
               "classes = { strong = [[0, 1], [2, 3]], weak = [[1, 2], [3, 0]] }\n")
    terms = ('[[terms]]\ntype = "heisenberg"\nbonds = "strong"\ncoupling = "g"\n'
             '[[terms]]\ntype = "heisenberg"\nbonds = "weak"\ncoupling = 1.0\n')
    scan = "[scan]\ng = [1, 2]\nbeta = 3\n"
    config = load_config(write(tmp_path, text(lattice=lattice, terms=terms, scan=scan)))
    assert validate(config) == 2
    task = config.tasks()[1]
    assert task.size == (4,) and task.lattice_kind == "explicit"
    model = build_model(task)
    assert model.n_sites == 4 and model.group_names == ("strong", "weak")
    assert sorted(model.term_coupling.tolist()) == [1.0, 1.0, 2.0, 2.0]


def test_explicit_classes_must_split_bonds(tmp_path):
    lattice = ('[lattice]\nkind = "explicit"\nsites = 4\nbonds = [[0, 1], [1, 2], [2, 3], [3, 0]]\n'
               "classes = { strong = [[0, 1], [2, 3]] }\n")
    terms = '[[terms]]\ntype = "heisenberg"\nbonds = "strong"\ncoupling = 1.0\n'
    with pytest.raises(UserError) as info:
        load_config(write(tmp_path, text(lattice=lattice, terms=terms, scan="[scan]\nbeta = 3\n")))
    assert "lattice.bonds[1]" in str(info.value) and "in no class" in str(info.value)


def test_build_model_matches_config(tmp_path):
    config = load_config(write(tmp_path, text(scan='[scan]\nL = [4]\ng = [2.5]\nbeta = 2\n')))
    model = build_model(config.tasks()[0])
    assert model.n_sites == 2 * 4 * 4
    assert model.group_names == ("intra", "inter")
    # +J S.S = J/4 - J P: constants J/4 per bond; 2*2*16 intra bonds with J = 1, 16 rungs with J = 2.5
    assert model.group_constant.tolist() == pytest.approx([0.25 * 64, 0.25 * 2.5 * 16])


def test_validate_counts_distinct_models(tmp_path):
    config = load_config(write(tmp_path, text(sampling=SAMPLING + "copies = 3\n")))
    assert len(config.tasks()) == 18
    assert validate(config) == 6


SHIPPED = sorted((REPO / "configs").glob("*.toml"))


def test_the_demo_configs_are_shipped():
    names = {p.name for p in SHIPPED}
    assert {"quickstart.toml", "bilayer-sweep.toml", "columnar-dimer-sweep.toml", "jq2-sweep.toml",
            "jq3-sweep.toml"} <= names


@pytest.mark.parametrize("path", SHIPPED, ids=[p.name for p in SHIPPED])
def test_shipped_configs_load_and_validate(path):
    config = load_and_validate(path)
    ids = [t.task_id for t in config.tasks()]
    assert len(ids) == len(set(ids)) > 0


def test_quickstart_is_small():
    config = load_config(REPO / "configs" / "quickstart.toml")
    tasks = config.tasks()
    assert len(tasks) <= 4
    for t in tasks:
        n_sites = 1
        for length in t.size:
            n_sites *= length
        # about 2e-8 s per site*beta*step: this bound keeps the demo well under a minute
        assert n_sites * t.beta * (t.sampling.warmup_steps + t.sampling.measure_steps) <= 3e7


def test_quickstart_comment_names_its_sizes():
    config = load_config(REPO / "configs" / "quickstart.toml")
    first = config.text.splitlines()[0]
    sizes = sorted({t.size for t in config.tasks()})
    assert " and ".join(f"{a}x{b}" for a, b in sizes) in first, first


def test_user_texts_explain_physics_without_authoring_notes():
    texts = {f"template {k}": v for k, v in TEMPLATES.items()}
    texts.update({p.name: p.read_text() for p in [*SHIPPED, REPO / "configs" / "cluster-batch.sh"]})
    for name, body in texts.items():
        for phrase in ("demo scenario", "invented", "from memory", "qmc.", "replicas"):
            assert phrase not in body.lower(), (name, phrase)


@pytest.mark.parametrize("kind", sorted(TEMPLATES))
def test_templates_load_and_validate(tmp_path, kind):
    config = load_and_validate(write(tmp_path, template(kind), name=f"{kind}.toml"))
    assert config.tasks()
    body = [line for line in template(kind).splitlines() if "=" in line and not line.startswith("#")]
    assert len(body) >= 10
    commented = template(kind).count("\n#")
    assert commented >= 20


def test_template_kinds():
    assert set(TEMPLATES) == {"heisenberg", "bilayer", "columnar-dimer", "jq2", "jq3", "jq3-walls", "su3-jq2",
                              "bilayer-field"}
    with pytest.raises(UserError, match="did you mean 'bilayer'"):
        template("bilayr")


def test_cartesian_order_is_file_order(tmp_path):
    tasks = load_config(write(tmp_path, text())).tasks()
    assert [(t.params["L"], t.params["g"]) for t in tasks] == list(itertools.product([4, 6], [2.4, 2.5, 2.6]))
