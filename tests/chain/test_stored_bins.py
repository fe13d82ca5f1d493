"""Refactors keep chains bit-identical: bins stored from an earlier commit are reproduced exactly.

``tests/data/stored_bins/bins_before_house.npz`` holds every bin (and the VBS histogram) of five short
runs made with commit ff097ea, before the house reshaping: square-lattice Heisenberg, J-Q2, J-Q3, a
bilayer and a three-chain exchange ladder along Q.  Keys are ``run|task|observable`` with the names of
that commit; ``RENAMED`` maps observables to today's names and :func:`_current_task` the task ids (copy
suffix ``_r0`` then, ``_c0`` now).  A change that alters the Markov chain (random numbers, operator order,
estimator arithmetic) fails here; one that only moves code or renames things does not.

The stored bins were measured with the plain estimators, so :func:`test_bins_match_stored` asks for them
explicitly (``[sampling] estimators = "plain"``).  With the default loop estimators
(:func:`test_loop_estimators_keep_the_chain`) the six observables they replace differ, and every other
column must still be bit-identical: the loop estimators change no random number and no step of the chain.
"""

from __future__ import annotations

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


LOOP_OBSERVABLES = {"chi_uniform", "m_stag2", "m_stag4", "chi_stag", "s_q", "s_q_shifted"}
"""The observables that the loop estimators measure differently."""


def _run(run: str, tmp_path: Path, estimators: str) -> None:
    text = (STORED / f"{run}.toml").read_text()
    assert "[sampling]\n" in text
    text = text.replace("[sampling]\n", f'[sampling]\nestimators = "{estimators}"\n', 1)
    (tmp_path / f"{run}.toml").write_text(text)
    result = CliRunner().invoke(cli, ["run", str(tmp_path / f"{run}.toml"), "--quiet"])
    assert result.exit_code == 0, result.output


@pytest.mark.parametrize("run", RUNS)
def test_bins_match_stored(run: str, tmp_path: Path) -> None:
    _run(run, tmp_path, "plain")
    _compare(run, tmp_path, set())


@pytest.mark.parametrize("run", ["heisenberg", "jq3"])
def test_loop_estimators_keep_the_chain(run: str, tmp_path: Path) -> None:
    """Default estimators: the loop-estimated columns differ from the stored ones (so the selection works),
    every other column is bit-identical (so the chain is the same)."""
    _run(run, tmp_path, "improved")
    _compare(run, tmp_path, LOOP_OBSERVABLES)


def _compare(run: str, tmp_path: Path, differ: set[str]) -> None:
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
                if _current_name(name) in differ:
                    assert not np.array_equal(got, want), f"{run} {task} {name}: plain bins"
                else:
                    np.testing.assert_array_equal(got, want, err_msg=f"{run} {task} {name}")
