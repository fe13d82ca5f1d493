"""The Python interface (``import qmc``): the README's notebook example runs as written, ``load_run`` gives
the tidy table whose numbers follow from the raw bins (plain mean of the bins; binning error =
sqrt(2 tau_int) times the naive error, the definition in qmc/analysis/binning.py), ``import qmc`` stays light,
and bad input is one UserError."""

from __future__ import annotations

import importlib.metadata
import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from helpers.paths import REPO as ROOT

import qmc
from qmc.errors import UserError


def readme_example() -> str:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    marker = r"<!-- README example: tests/cli/test_api.py runs exactly this block -->"
    m = re.search(marker + r"\n```python\n(.*?)```", text, re.S)
    assert m, "the README's Python example (with its marker line) is missing"
    return m.group(1)


@pytest.fixture(scope="module")
def example(tmp_path_factory) -> dict:
    """Run the README example in a fresh directory holding configs/quickstart.toml; its namespace."""
    tmp = tmp_path_factory.mktemp("readme")
    (tmp / "configs").mkdir()
    shutil.copy(ROOT / "configs" / "quickstart.toml", tmp / "configs")
    namespace: dict = {}
    with pytest.MonkeyPatch.context() as mp:
        mp.chdir(tmp)
        exec(compile(readme_example(), "README.md example", "exec"), namespace)
    namespace["tmp"] = tmp
    return namespace


def test_the_readme_example_runs_and_gives_the_documented_table(example):
    df, run_dir = example["df"], example["run_dir"]
    assert Path(run_dir) == example["tmp"] / "runs" / "quickstart"
    assert list(df.columns) == ["task", "L", "beta", "copy", "observable", "mean", "error", "tau_int",
                                "tau_int_bins", "n_bins", "steps_per_bin", "derived", "status"]
    assert sorted(df.task.unique()) == ["L4_c0", "L8_c0"]
    assert set(df[df.task == "L8_c0"].beta) == {16}  # beta = 2 L
    m2 = df[df.observable == "m_stag2"]
    assert len(m2) == 2 and (m2["error"] > 0).all() and (m2["n_bins"] == 100).all()
    assert set(example["wide"].columns) >= {"energy", "binder_stag", "stiffness_L"}
    assert bool(df[df.observable == "binder_stag"]["derived"].all())
    assert not bool(df[df.observable == "energy"]["derived"].any())


def test_load_run_numbers_follow_from_the_raw_bins(example):
    df, run_dir, e = example["df"], example["run_dir"], example["e"]
    row = df[(df.task == "L8_c0") & (df.observable == "energy")].iloc[0]
    assert len(e) == row["n_bins"] == 100
    assert row["mean"] == pytest.approx(np.mean(e), rel=1e-12)
    naive = np.std(e, ddof=1) / np.sqrt(len(e))
    assert row["error"] == pytest.approx(np.sqrt(2 * row["tau_int_bins"]) * naive, rel=1e-9)
    assert row["tau_int"] == pytest.approx(row["tau_int_bins"] * row["steps_per_bin"])
    assert row["steps_per_bin"] == 200  # measure_steps / bins of the quickstart
    bins = qmc.load_bins(run_dir / "tasks" / "L4_c0.h5")  # a task file alone works too
    assert set(bins) == set(df[(df.task == "L4_c0") & ~df.derived].observable)
    task = qmc.load_task(run_dir, "L4_c0")
    assert task.params["L"] == 4 and task.steps_per_bin == 200


def test_merged_copies_and_a_single_task_file(example):
    run_dir = example["run_dir"]
    merged = qmc.load_run(run_dir, merge_copies=True)
    assert "copy" not in merged.columns and len(merged) == len(example["df"])
    one = qmc.load_run(run_dir / "tasks" / "L4_c0.h5")
    assert set(one.task) == {"L4_c0"}


def test_a_second_call_resumes_nothing_and_keeps_the_bins(example):
    run_dir = example["run_dir"]
    before = qmc.load_bins(run_dir, "L4_c0")["energy"]
    with pytest.MonkeyPatch.context() as mp:
        mp.chdir(example["tmp"])
        assert qmc.run_config("configs/quickstart.toml", progress=False) == run_dir
    assert np.array_equal(qmc.load_bins(run_dir, "L4_c0")["energy"], before)


def test_bad_input_is_one_user_error(example, tmp_path):
    with pytest.raises(UserError, match="no task 'L5_c0'.*L4_c0, L8_c0"):
        qmc.load_bins(example["run_dir"], "L5_c0")
    with pytest.raises(UserError, match="name the task"):
        qmc.load_task(example["run_dir"])
    with pytest.raises(UserError, match="no such run directory"):
        qmc.load_run(tmp_path / "nothing")
    with pytest.raises(UserError):
        qmc.load_config(tmp_path / "missing.toml")


def test_version_and_a_light_import():
    assert qmc.__version__ == importlib.metadata.version("seriesloop")
    code = ("import sys, qmc; qmc.__version__; "
            "print(sorted(m for m in sys.modules if m.startswith(('numba', 'qmc.', 'pandas', 'h5py'))))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"
    assert set(qmc.__all__) <= set(dir(qmc))
    with pytest.raises(AttributeError):
        qmc.no_such_name  # noqa: B018


def test_the_report_from_python(example, tmp_path):
    path = qmc.report(example["run_dir"], tmp_path / "page.html")
    text = path.read_text(encoding="utf-8")
    assert path == tmp_path / "page.html" and text.startswith("<!DOCTYPE html>")
    assert "<h1>quickstart: simulation report</h1>" in text and "No coupling varies" in text
