"""Refactors keep chains bit-identical: bins stored from an earlier commit are reproduced exactly.

``tests/data/stored_bins/bins_before_house.npz`` holds every bin (and the VBS histogram) of five short
runs made with commit ff097ea, before the house reshaping: square-lattice Heisenberg, J-Q2, J-Q3, a
bilayer and a three-chain exchange ladder along Q.  Keys are ``run|task|observable`` with the names of
that commit; ``RENAMED`` maps observables to today's names and :func:`_current_task` the task ids (copy
suffix ``_r0`` then, ``_c0`` now).  A change that alters the Markov chain (random numbers, operator order,
estimator arithmetic) fails here; one that only moves code or renames things does not.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import h5py
import numpy as np
import pytest
from click.testing import CliRunner
from helpers.paths import DATA

from qmc.cli.main import cli

STORED = DATA / "stored_bins"
RUNS = ("heisenberg", "jq2", "jq3", "bilayer", "ladder")
RENAMED = {"s_q_next": "s_q_shifted", "bond_energy": "term_energy"}


def _stored() -> dict[str, np.ndarray]:
    with np.load(STORED / "bins_before_house.npz") as z:
        return {k: z[k] for k in z.files}


def _current_name(old: str) -> str:
    for a, b in RENAMED.items():
        if old == a or old.startswith(a + ":"):
            return b + old[len(a):]
    return old


def _current_task(old: str) -> str:
    stem, _, copy = old.rpartition("_r")
    return f"{stem}_c{copy}"


@pytest.mark.parametrize("run", RUNS)
def test_bins_match_stored(run: str, tmp_path: Path) -> None:
    shutil.copy(STORED / f"{run}.toml", tmp_path / f"{run}.toml")
    result = CliRunner().invoke(cli, ["run", str(tmp_path / f"{run}.toml"), "--quiet"])
    assert result.exit_code == 0, result.output
    stored = {k: v for k, v in _stored().items() if k.startswith(run + "|")}
    tasks = sorted({k.split("|")[1] for k in stored})
    assert tasks, f"no stored bins for {run}"
    files = sorted(p.stem for p in (tmp_path / f"run-{run}" / "tasks").glob("*.h5"))
    assert len(files) == len(tasks)
    for task in tasks:
        with h5py.File(tmp_path / f"run-{run}" / "tasks" / f"{_current_task(task)}.h5") as f:
            for key, want in stored.items():
                r, t, name = key.split("|")
                if t != task:
                    continue
                data = f if name == "vbs_histogram" else f["bins"]
                got = data[_current_name(name)][()]
                np.testing.assert_array_equal(got, want, err_msg=f"{run} {task} {name}")
