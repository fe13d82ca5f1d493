"""The test suite is a map of the package (DEVELOPERS.md, "Where a test goes"): every test module sits in
the folder of the layer it checks, base names are unique (pytest imports test modules by base name), and
no test module imports another one (shared code lives in tests/helpers)."""

from __future__ import annotations

import ast
from pathlib import Path

from helpers.paths import REPO, TESTS

LAYER_FOLDERS = {"models", "engine", "chain", "config", "storage", "run", "exchange", "mpi", "analysis",
                 "validation", "cli", "architecture"}


def all_test_modules() -> list[Path]:
    return sorted(TESTS.rglob("test_*.py"))


def imported_test_modules(path: Path) -> list[str]:
    """Names of test modules (``test_*``) that ``path`` imports, at any depth of its code."""
    names = []
    for node in ast.walk(ast.parse(path.read_text(), str(path))):
        if isinstance(node, ast.Import):
            names += [a.name for a in node.names if a.name.split(".")[-1].startswith("test_")]
        elif isinstance(node, ast.ImportFrom) and node.module:
            if node.module.split(".")[-1].startswith("test_"):
                names.append(node.module)
    return names


def test_every_test_module_sits_in_a_layer_folder():
    misplaced = [str(p.relative_to(REPO)) for p in all_test_modules() if p.parent.name not in LAYER_FOLDERS
                 or p.parent.parent != TESTS]
    assert not misplaced, f"test modules outside the layer folders of tests/: {misplaced}"
    assert {p.parent.name for p in all_test_modules()} == LAYER_FOLDERS  # and no folder is empty


def test_base_names_are_unique():
    names = [p.name for p in all_test_modules()]
    assert len(names) == len(set(names)), sorted(n for n in names if names.count(n) > 1)


def test_no_test_module_imports_another():
    offenders = {str(p.relative_to(REPO)): imported_test_modules(p) for p in all_test_modules()}
    assert not {k: v for k, v in offenders.items() if v}


def test_the_import_check_sees_an_import_of_a_test_module(tmp_path):
    probe = tmp_path / "test_probe.py"
    probe.write_text("from test_exchange import JQ2\nimport helpers.configs\n\n"
                     "def f():\n    import test_mpi\n")
    assert imported_test_modules(probe) == ["test_exchange", "test_mpi"]
