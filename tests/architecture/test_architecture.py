"""The architecture of the installed ``qmc`` package, read from its source (ast, nothing is imported but
``qmc`` itself to find where it lives):

* no import cycle among its modules -- counting every import statement, also those inside functions
  and under ``if`` (a cycle through a function-level import still ties the modules together);
* lower layers never import higher ones, in the order documented in :data:`LAYERS`;
* the modules of the run machinery (``run``, ``exchange``, ``mpi``, ``storage``) stay under about 400 lines.

Each test can fail: ``test_the_checks_see_a_cycle_and_a_layer_violation`` feeds them a made-up graph.
"""

from __future__ import annotations

import ast
import importlib.util
from pathlib import Path

import pytest

import qmc

# Layers, lowest first, as the code has them (derived from the import graph when qmc/ was cut into
# subpackages).  A module may import modules of its own layer and of lower ranks only; layers of the same
# rank are siblings and do not import each other.
#
#   0  errors       user-facing error type
#   1  models       lattices, terms, the compiled flat-array model (installed as qmc.models)
#   2  config       input: the TOML schema and parser, scan expansion (builds models)
#   2  engine       numba kernels (may read the compiled model)
#   3  chain        one Markov chain: simulation state, observables
#   4  storage      task files, run index, atomic writes, provenance
#   4  exchange     replica exchange in memory: swap rule, ladder, team, meetings, ladder records
#   5  run          running tasks and ladders with their files, plans, the serial runner
#   6  mpi          the MPI farm
#   7  analysis     error analysis and finite-size scaling of stored bins
#   8  validation   reference checks (may use anything below cli)
#   9  cli          the command line
#   9  api          the Python interface (qmc/api.py), beside the command line
#  10  qmc, __main__  the package itself and ``python -m qmc``
LAYERS = {
    "errors": 0, "models": 1, "config": 2, "engine": 2, "chain": 3, "storage": 4, "exchange": 4, "run": 5,
    "mpi": 6, "analysis": 7, "validation": 8, "cli": 9, "api": 9, "qmc": 10, "__main__": 10,
}
SIZE_CHECKED = ("run", "exchange", "mpi", "storage")
MAX_LINES = 400


def _module_files() -> dict[str, Path]:
    """Every module of the installed package: dotted name -> source file."""
    roots = [("qmc", Path(qmc.__file__).parent)]
    spec = importlib.util.find_spec("qmc.models")
    if spec is not None and spec.submodule_search_locations:
        roots.append(("qmc.models", Path(list(spec.submodule_search_locations)[0])))
    out: dict[str, Path] = {}
    for prefix, base in roots:
        for path in sorted(base.rglob("*.py")):
            parts = list(path.relative_to(base).with_suffix("").parts)
            if prefix == "qmc" and parts[0] == "models":
                continue  # a source tree where models/ sits inside qmc/: found under its own root
            if parts[-1] == "__init__":
                parts = parts[:-1]
            out[".".join([prefix, *parts])] = path
    return out


def import_graph(files: dict[str, Path]) -> dict[str, set[str]]:
    """module -> the package's modules it imports (anywhere in its code)."""
    graph: dict[str, set[str]] = {m: set() for m in files}
    for mod, path in files.items():
        package = mod if path.name == "__init__.py" else mod.rpartition(".")[0]
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"), str(path))):
            if isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                if node.level:
                    base = package.split(".")[:len(package.split(".")) - (node.level - 1)]
                    source = ".".join(base + ([node.module] if node.module else []))
                else:
                    source = node.module or ""
                subs = [f"{source}.{a.name}" for a in node.names]
                # ``from pkg import name``: the submodule if there is one, else pkg itself
                targets = [s for s in subs if s in files] + ([source] if not all(s in files for s in subs)
                                                             else [])
            else:
                continue
            graph[mod].update(t for t in targets if t in files and t != mod)
    return graph


def find_cycle(graph: dict[str, set[str]]) -> list[str] | None:
    """One import cycle ``[a, b, ..., a]`` if there is any (depth-first search), else None."""
    state: dict[str, int] = {}  # 1 on the current path, 2 finished
    path: list[str] = []

    def visit(node: str) -> list[str] | None:
        state[node] = 1
        path.append(node)
        for nxt in sorted(graph.get(node, ())):
            if state.get(nxt) == 1:
                return path[path.index(nxt):] + [nxt]
            if nxt not in state:
                found = visit(nxt)
                if found:
                    return found
        path.pop()
        state[node] = 2
        return None

    for start in sorted(graph):
        if start not in state:
            found = visit(start)
            if found:
                return found
    return None


def layer_of(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else parts[0]


def layer_violations(graph: dict[str, set[str]]) -> list[str]:
    """Imports that go up the layer order, or sideways between sibling layers."""
    bad = []
    for a, targets in sorted(graph.items()):
        la = layer_of(a)
        for b in sorted(targets):
            lb = layer_of(b)
            if la != lb and LAYERS[lb] >= LAYERS[la]:
                bad.append(f"{a} ({la}, rank {LAYERS[la]}) imports {b} ({lb}, rank {LAYERS[lb]})")
    return bad


# ----------------------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def graph() -> dict[str, set[str]]:
    return import_graph(_module_files())


def test_the_package_is_found_whole(graph):
    layers = {layer_of(m) for m in graph}
    assert {"models", "engine", "chain", "storage", "run", "exchange", "mpi", "cli"} <= layers
    assert "qmc.run.task_run" in graph and "qmc.mpi.protocol" in graph
    assert "qmc.run.task_book" in graph["qmc.run.task_run"]  # edges are seen


def test_no_import_cycles(graph):
    cycle = find_cycle(graph)
    assert cycle is None, "import cycle: " + " -> ".join(cycle)


def test_every_layer_is_known(graph):
    unknown = sorted({layer_of(m) for m in graph} - set(LAYERS))
    assert not unknown, f"modules outside the documented layers: {unknown}; add them to LAYERS"


def test_lower_layers_do_not_import_higher_ones(graph):
    bad = layer_violations(graph)
    assert not bad, "imports against the layer order:\n" + "\n".join(bad)


def test_run_machinery_modules_are_short():
    sizes = {m: len(p.read_text(encoding="utf-8").splitlines()) for m, p in _module_files().items()
             if layer_of(m) in SIZE_CHECKED}
    long = [f"{m}: {n} lines" for m, n in sorted(sizes.items()) if n > MAX_LINES]
    assert not long, f"modules over {MAX_LINES} lines: {long}"


def test_the_checks_see_a_cycle_and_a_layer_violation(tmp_path):
    pkg = tmp_path / "pkg"
    pkg.mkdir()
    (pkg / "a.py").write_text("def f():\n    from pkg import b\n")  # a cycle hidden inside a function
    (pkg / "b.py").write_text("from . import c\n")
    (pkg / "c.py").write_text("import pkg.a\n")
    (pkg / "d.py").write_text("from .c import x\n")
    files = {f"pkg.{n}": pkg / f"{n}.py" for n in "abcd"}
    g = import_graph(files)
    assert g == {"pkg.a": {"pkg.b"}, "pkg.b": {"pkg.c"}, "pkg.c": {"pkg.a"}, "pkg.d": {"pkg.c"}}
    assert find_cycle(g) == ["pkg.a", "pkg.b", "pkg.c", "pkg.a"]
    assert find_cycle({"pkg.a": {"pkg.b"}, "pkg.b": set()}) is None
    assert layer_violations({"qmc.storage.x": {"qmc.run.y"}, "qmc.run.y": {"qmc.storage.x"}}) == [
        "qmc.storage.x (storage, rank 4) imports qmc.run.y (run, rank 5)"]
    assert layer_violations({"qmc.exchange.x": {"qmc.storage.y"}})  # siblings do not import each other
