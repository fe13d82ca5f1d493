"""The five short runs whose bins are stored in tests/data/stored_bins (tests/chain/test_stored_bins.py).

Each run is ``tests/data/stored_bins/<run>.toml`` (square-lattice Heisenberg, J-Q2, J-Q3, a bilayer and a
three-chain exchange ladder along Q), run in-process by ``qmc run`` with the ``[sampling] estimators``
choice given.  Stored bins are keyed ``run|task|observable`` (``vbs_histogram`` for the histogram).

Writing a new reference file (only when the Markov chain is changed on purpose; say why in the test's
docstring and the CHANGELOG)::

    cd tests && python -m helpers.stored_bins data/stored_bins/<name>.npz
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

import h5py
import numpy as np
from click.testing import CliRunner

from helpers.paths import DATA
from qmc.cli.main import cli

__all__ = ["STORED", "RUNS", "run_stored", "read_bins", "write_reference"]

STORED = DATA / "stored_bins"
RUNS = ("heisenberg", "jq2", "jq3", "bilayer", "ladder")


def run_stored(run: str, tmp_path: Path, estimators: str) -> Path:
    """Runs ``<run>.toml`` in ``tmp_path`` with the estimators chosen; returns the run's directory."""
    text = (STORED / f"{run}.toml").read_text()
    assert "[sampling]\n" in text
    text = text.replace("[sampling]\n", f'[sampling]\nestimators = "{estimators}"\n', 1)
    (tmp_path / f"{run}.toml").write_text(text)
    result = CliRunner().invoke(cli, ["run", str(tmp_path / f"{run}.toml"), "--quiet"])
    assert result.exit_code == 0, result.output
    return tmp_path / f"run-{run}"


def read_bins(run: str, run_dir: Path) -> dict[str, np.ndarray]:
    """Every bin column and the VBS histogram of every task file of a run, keyed ``run|task|observable``."""
    out = {}
    for path in sorted((run_dir / "tasks").glob("*.h5")):
        with h5py.File(path) as f:
            for name, data in f["bins"].items():
                out[f"{run}|{path.stem}|{name}"] = data[()]
            out[f"{run}|{path.stem}|vbs_histogram"] = f["vbs_histogram"][()]
    return out


def write_reference(target: Path) -> None:
    """Runs the five stored configurations with the plain estimators and saves all their bins to
    ``target`` (npz)."""
    bins: dict[str, np.ndarray] = {}
    with tempfile.TemporaryDirectory() as tmp:
        for run in RUNS:
            bins.update(read_bins(run, run_stored(run, Path(tmp), "plain")))
    np.savez_compressed(target, **bins)


if __name__ == "__main__":
    write_reference(Path(sys.argv[1]))
