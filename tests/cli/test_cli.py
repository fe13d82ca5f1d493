"""The command line: run/resume/--only/--force, summary, inspect, new, analyze, validate, bad input."""

from __future__ import annotations

import json
import subprocess
import sys
import types
from pathlib import Path

import h5py
import numpy as np
import pytest
from helpers.cli import assert_user_error, invoke
from helpers.configs import config_text, heisenberg_nn
from helpers.paths import REPO

from qmc.config.parser import load_config
from qmc.config.templates import TEMPLATES
from qmc.run.outcome import StopFlag
from qmc.run.single import run_task
from qmc.storage.task_file import load_index, read_task, task_path

J_TERMS = (heisenberg_nn("J"),)


def cli_config(*, J=1.0, measure=1000, sizes=(4, 6), beta=1.0, seed=5, terms=J_TERMS, **kw) -> str:
    """The text of this module's small run: square-lattice Heisenberg model with coupling J (scanned)."""
    return config_text(seed=seed, terms=terms, scan={"L": sizes, "J": J, "beta": beta},
                       warmup_steps=50, measure_steps=measure, bins=20, **kw)


def write_config(tmp: Path, *, J=1.0, measure=1000, name="config.toml") -> Path:
    path = tmp / name
    path.write_text(cli_config(J=J, measure=measure))
    return path




@pytest.fixture(scope="module")
def done_run(tmp_path_factory) -> Path:
    tmp = tmp_path_factory.mktemp("done")
    result = invoke("run", write_config(tmp), "--quiet")
    assert result.exit_code == 0, result.output
    return tmp / "run"


# ------------------------------------------------------------------------------------------------ run


def test_run_then_rerun_does_not_duplicate(done_run):
    index = load_index(done_run)
    assert all(e["status"] == "done" and e["bins_done"] == 20 for e in index["tasks"].values())
    before = {p.name: p.read_bytes() for p in (done_run / "tasks").iterdir()}
    result = invoke("run", done_run.parent / "config.toml")
    assert result.exit_code == 0 and "done: all 2 task(s) finished" in result.stderr
    assert {p.name: p.read_bytes() for p in (done_run / "tasks").iterdir()} == before
    for p in (done_run / "tasks").iterdir():
        assert all(len(v) == 20 for v in read_task(p).bins.values())
    log = (done_run / "run.log").read_text()
    assert "task L6_J1_beta1_c0: done" in log and "0 task(s) to run, 2 done already" in log


def test_resumed_run_completes_without_duplicating_bins(tmp_path):
    config = write_config(tmp_path, measure=4000)
    cfg = load_config(config)
    task = cfg.tasks()[0]
    flag = StopFlag()
    flag.set("test")
    run_task(task, tmp_path / "run", stop_flag=flag)  # a file with a checkpoint at step 0
    result = invoke("run", config, "--quiet")
    assert result.exit_code == 0, result.output
    reference = tmp_path / "ref"
    assert run_task(task, reference).status == "done"
    a, b = read_task(task_path(tmp_path / "run", task.task_id)), read_task(task_path(reference, task.task_id))
    assert a.bins_done == 20 and all(np.array_equal(a.bins[n], b.bins[n]) for n in b.bins)
    assert [s["ended"] for s in a.provenance["sessions"]] == ["stopped", "done"]


def test_only_runs_the_named_tasks(tmp_path):
    config = write_config(tmp_path)
    result = invoke("run", config, "--quiet", "--only", "L4_J1_beta1_c0")
    assert result.exit_code == 0, result.output
    index = load_index(tmp_path / "run")
    assert index["tasks"]["L4_J1_beta1_c0"]["status"] == "done"
    assert index["tasks"]["L6_J1_beta1_c0"]["status"] == "pending"
    assert not task_path(tmp_path / "run", "L6_J1_beta1_c0").exists()


def test_unknown_only_id(tmp_path):
    config = write_config(tmp_path)
    result = invoke("run", config, "--only", "L5_J1_beta1_c0")
    assert_user_error(result, "error: --only: no task 'L5_J1_beta1_c0'", "did you mean")
    assert not (tmp_path / "run").exists()


@pytest.mark.parametrize("line, new", [("replicas = 2", "[sampling] copies"),
                                       ('exchange = "J"', "[exchange] along"),
                                       ("exchange_every = 5", "[exchange] every"),
                                       ("exchange_ranks = 2", "[exchange] max_ranks")])
def test_keys_of_earlier_releases_are_refused_naming_the_new_key(tmp_path, line, new):
    config = tmp_path / "old.toml"
    config.write_text(cli_config(J=[0.5, 1.0]) + line + "\n")
    result = invoke("run", config)
    old = line.split()[0]
    assert_user_error(result, f"error: {config}: sampling.{old}: '{old}' in [sampling] was renamed: "
                              f"use {new} instead")
    assert not (tmp_path / "run").exists()


def test_new_scan_points_grow_the_run(tmp_path, done_run):
    import shutil

    run = tmp_path / "run"
    shutil.copytree(done_run, run)
    before = {p.name: p.read_bytes() for p in (run / "tasks").iterdir()}
    more = write_config(tmp_path, J=[0.5, 1.0], name="more.toml")
    result = invoke("run", more, "--out", run)
    assert result.exit_code == 0, result.output
    assert "done: all 4 task(s) finished" in result.stderr and "[2/4 done]" in result.stderr
    assert set(load_index(run)["tasks"]) == {"L4_J0.5_beta1_c0", "L4_J1_beta1_c0", "L6_J0.5_beta1_c0",
                                             "L6_J1_beta1_c0"}
    # the J = 1 tasks are kept as they were, nothing was renamed aside
    assert all((run / "tasks" / name).read_bytes() == data for name, data in before.items())
    assert not [p for p in run.rglob("*.old")]
    # back to the first configuration: the J = 0.5 tasks stay in the run, noted as not configured
    result = invoke("run", done_run.parent / "config.toml", "--out", run)
    assert result.exit_code == 0 and "2 task(s) of this run are not in the configuration" in result.stderr
    assert load_index(run)["tasks"]["L4_J0.5_beta1_c0"]["note"].startswith("not in the current configuration")


def test_other_physics_refused_then_forced(tmp_path, done_run):
    import shutil

    run = tmp_path / "run"
    shutil.copytree(done_run, run)
    other = tmp_path / "other.toml"  # another master seed, and J = 0.5 added
    other.write_text(cli_config(J=[0.5, 1.0], seed=6))
    before = sorted(p.name for p in run.rglob("*"))
    result = invoke("run", other, "--out", run)
    assert_user_error(result, str(run), "other physics", "master seed, lattice or terms", "--force")
    assert sorted(p.name for p in run.rglob("*")) == before
    result = invoke("run", other, "--out", run, "--quiet", "--force")
    assert result.exit_code == 0, result.output
    names = [p.name for p in run.rglob("*")]
    assert any(n.startswith("index.json.") and n.endswith(".old") for n in names)
    assert sum(n.startswith("L4_J1_beta1_c0.h5.") and n.endswith(".old") for n in names) == 1
    notes = [line for line in result.stderr.splitlines() if line.startswith("note: --force")]
    assert len(notes) == 1, result.stderr  # even with --quiet: what was set aside, and why
    assert "renamed aside (never deleted) 4 file(s), because the master seed, lattice or terms differ" \
        in notes[0]
    assert "L4_J1_beta1_c0.h5 -> L4_J1_beta1_c0.h5." in notes[0] and "index.json -> index.json." in notes[0]
    index = load_index(run)
    assert set(index["tasks"]) == {"L4_J0.5_beta1_c0", "L4_J1_beta1_c0", "L6_J0.5_beta1_c0", "L6_J1_beta1_c0"}
    assert len(read_task(task_path(run, "L4_J1_beta1_c0")).provenance["sessions"]) == 1


def test_force_says_what_it_keeps(tmp_path):
    first = tmp_path / "first.toml"  # beta = L/4: 1 at L = 4, 1.5 at L = 6
    first.write_text(cli_config(beta="L/4"))
    assert invoke("run", first, "--quiet").exit_code == 0
    run = tmp_path / "run"
    other = tmp_path / "other.toml"  # beta = L*L/16: still 1 at L = 4, now 2.25 at L = 6
    other.write_text(cli_config(beta="L*L/16"))
    result = invoke("run", other, "--out", run)
    assert_user_error(result, "1 task file(s) cannot continue (L6_J1_c0)", "different model, lattice, beta",
                      "--force", "the other 1 task file(s) would be kept")
    kept = task_path(run, "L4_J1_c0")
    result = invoke("run", other, "--out", run, "--force")
    assert result.exit_code == 0, result.output
    assert "note: --force: renamed aside (never deleted) 1 file(s), because written for another" \
        in result.stderr
    assert "L6_J1_c0.h5 -> L6_J1_c0.h5." in result.stderr
    assert "note: --force: kept 1 task file(s) whose chains are unchanged: L4_J1_c0" in result.stderr
    assert read_task(kept).status == "done" and len(read_task(kept).provenance["sessions"]) == 1
    assert read_task(task_path(run, "L6_J1_c0")).beta == 2.25


@pytest.mark.parametrize("text,fragments", [
    ("[run\nseed = 1\n", ("invalid TOML", "line 1")),
    (cli_config(lattice="hexagonal"),
     ("lattice.kind", "unknown lattice kind 'hexagonal'")),
    (cli_config(J=-1.0), ("terms[0].coupling", "sign problem")),
    (cli_config(terms=[{"type": "heisenberg", "bonds": "diagonal", "coupling": "J"}]), ("terms[0]",)),
])
def test_bad_config_is_one_clear_error(tmp_path, text, fragments):
    path = tmp_path / "bad.toml"
    path.write_text(text)
    result = invoke("run", path)
    assert_user_error(result, str(path), *fragments)
    assert not (tmp_path / "run").exists()


def test_missing_config_and_output_that_is_a_file(tmp_path):
    assert_user_error(invoke("run", tmp_path / "nope.toml"), "nope.toml", "not found")
    config = write_config(tmp_path)
    (tmp_path / "taken").write_text("keep me")
    assert_user_error(invoke("run", config, "--out", tmp_path / "taken"), "--out", "not a directory")
    assert (tmp_path / "taken").read_text() == "keep me"


def test_usage_errors_are_one_line(tmp_path):
    assert_user_error(invoke("run"), "error: qmc run:", "Missing argument")
    config = write_config(tmp_path)
    assert_user_error(invoke("run", config, "--max-time", "soon"), "--max-time")
    assert_user_error(invoke("run", config, "--max-time", "0"), "--max-time")


def test_task_failure_exit_code_and_message(tmp_path, monkeypatch):
    import qmc.run.single as runner

    def broken(task):
        raise RuntimeError("boom")

    monkeypatch.setattr(runner, "build_model", broken)
    result = invoke("run", write_config(tmp_path), "--quiet")
    assert result.exit_code == 1
    assert "error: task L6_J1_beta1_c0 failed: RuntimeError: boom" in result.stderr
    assert "error: task L4_J1_beta1_c0 failed" in result.stderr  # the second task was still tried
    assert "Traceback" in (tmp_path / "run" / "run.log").read_text()


# ------------------------------------------------------------------------------------------------ summary


def test_summary_table_and_json(done_run):
    result = invoke("summary", done_run)
    assert result.exit_code == 0, result.output
    out = result.stdout
    assert "task L4_J1_beta1_c0" in out and "task L6_J1_beta1_c0" in out
    assert "observable" in out and "tau_int[bins]" in out and "binder_stag" in out
    assert "(done, 20 bins of 50 Monte Carlo steps, 16 sites)" in out
    result = invoke("summary", done_run, "--json")
    data = json.loads(result.stdout)
    assert [d["task"] for d in data] == ["L4_J1_beta1_c0", "L6_J1_beta1_c0"]
    assert data[0]["params"]["L"] == 4 and data[0]["params"]["J"] == 1.0
    obs = data[0]["observables"]
    for name in ("energy", "m_stag2", "stiffness/x", "binder_stag", "specific_heat", "corr_length"):
        assert set(obs[name]) >= {"mean", "error", "tau_int"}
    energies = read_task(task_path(done_run, "L4_J1_beta1_c0")).bins["energy"]
    assert obs["energy"]["mean"] == pytest.approx(float(np.mean(energies)), rel=1e-12)


@pytest.fixture()
def bad_files(tmp_path, done_run) -> dict[str, Path]:
    foreign = tmp_path / "foreign.h5"
    with h5py.File(foreign, "w") as f:
        f["x"] = np.arange(4)
    good = task_path(done_run, "L4_J1_beta1_c0").read_bytes()
    truncated = tmp_path / "truncated.h5"
    truncated.write_bytes(good[: len(good) // 2])
    text = tmp_path / "notes.h5"
    text.write_text("these are my notes\n")
    return {"foreign": foreign, "truncated": truncated, "text": text}


@pytest.mark.parametrize("kind,fragment", [("foreign", "foreign HDF5 file"),
                                           ("truncated", "damaged or truncated"),
                                           ("text", "not an HDF5 file")])
def test_bad_hdf5_for_inspect_and_summary(tmp_path, bad_files, done_run, kind, fragment):
    path = bad_files[kind]
    before = path.read_bytes()
    assert_user_error(invoke("inspect", path), f"error: {path}: ", fragment)
    assert_user_error(invoke("summary", path), f"error: {path}: ", fragment)
    run = tmp_path / "run_with_bad"  # the same file inside a run directory
    (run / "tasks").mkdir(parents=True)
    target = run / "tasks" / path.name
    target.write_bytes(before)
    assert_user_error(invoke("summary", run), str(target), fragment)
    assert path.read_bytes() == before and target.read_bytes() == before


def test_summary_of_a_missing_directory(tmp_path):
    assert_user_error(invoke("summary", tmp_path / "nothing"), "no such run directory")


# ------------------------------------------------------------------------------------------------ inspect


def test_inspect(done_run):
    result = invoke("inspect", task_path(done_run, "L6_J1_beta1_c0"))
    assert result.exit_code == 0, result.output
    out = result.stdout
    for fragment in ("task           L6_J1_beta1_c0", "status         done", "bins           20 of 20 done",
                     "steps          1050 of 1050", "checkpoint", "numba_version", "git_revision",
                     "master_seed      5", "sessions (1)", "[sampling]", "L = 6",
                     "format         seriesloop/task, version"):
        assert fragment in out, fragment


# ------------------------------------------------------------------------------------------------ new


@pytest.mark.parametrize("kind", sorted(TEMPLATES))
def test_new_writes_a_loadable_config(tmp_path, kind):
    out = tmp_path / f"{kind}.toml"
    result = invoke("new", kind, "--out", out)
    assert result.exit_code == 0, result.output
    cfg = load_config(out)
    assert cfg.tasks()
    out.write_text("mine")
    assert_user_error(invoke("new", kind, "--out", out), str(out), "exists", "--force")
    assert out.read_text() == "mine"
    assert invoke("new", kind, "--out", out, "--force").exit_code == 0
    assert out.read_text() == TEMPLATES[kind]


def test_new_to_stdout_and_unknown_kind(tmp_path):
    result = invoke("new", "jq2", "--out", "-")
    assert result.exit_code == 0 and result.stdout == TEMPLATES["jq2"]
    assert_user_error(invoke("new", "jq4", "--out", tmp_path / "x.toml"), "unknown template 'jq4'")
    assert not (tmp_path / "x.toml").exists()


# ------------------------------------------------------------------------------------------------ analyze


def test_analyze_prints_crossings_table(tmp_path):
    config = write_config(tmp_path, J=[0.5, 0.8, 1.1, 1.4], measure=400)
    assert invoke("run", config, "--quiet").exit_code == 0
    result = invoke("analyze", tmp_path / "run")
    assert result.exit_code == 0, result.output
    assert "coupling: J" in result.stdout and "sizes: 4, 6" in result.stdout
    assert (tmp_path / "run" / "analysis" / "analysis.json").exists()
    result = invoke("analyze", tmp_path / "run", "--quantity", "no_such_thing")
    assert_user_error(result, "quantity", "no_such_thing")


# ------------------------------------------------------------------------------------------------ validate


def test_validate_hook(monkeypatch):
    seen = {}

    def run_validation(mode, echo):
        seen["mode"] = mode
        echo("checked")
        return 3

    fake = types.SimpleNamespace(run_validation=run_validation)
    monkeypatch.setitem(sys.modules, "qmc.validation.suite", fake)
    result = invoke("validate", "--thorough")
    assert result.exit_code == 3 and seen["mode"] == "thorough" and "checked" in result.stdout
    assert invoke("validate").exit_code == 3 and seen["mode"] == "quick"


def test_entry_point_in_a_subprocess(tmp_path):
    path = tmp_path / "notes.h5"
    path.write_text("text")
    proc = subprocess.run([sys.executable, "-m", "qmc", "inspect", str(path)], capture_output=True, text=True,
                          timeout=120)
    assert proc.returncode == 2 and proc.stdout == ""
    assert proc.stderr.strip() == f"error: {path}: not an HDF5 file; a task file is written by 'qmc run' " \
                                  "(format seriesloop/task)"


def test_serial_run_of_an_exchange_ladder(tmp_path):
    path = tmp_path / "ex.toml"
    path.write_text(cli_config(J=[0.8, 1.0], measure=400, sizes=[4], exchange={"along": "J"}))
    result = invoke("run", path, "--quiet")
    assert result.exit_code == 0, result.output
    for tid in ("L4_J0.8_beta1_c0", "L4_J1_beta1_c0"):
        d = read_task(task_path(tmp_path / "run", tid))
        assert d.status == "done" and d.exchange is not None and d.exchange["parameter"] == "J"
    result = invoke("inspect", task_path(tmp_path / "run", "L4_J1_beta1_c0"))
    assert result.exit_code == 0 and "exchange" in result.stdout
    assert invoke("summary", tmp_path / "run").exit_code == 0


def test_run_help_documents_the_exit_status():
    from qmc.cli.run import EXIT_UNFINISHED

    text = invoke("run", "--help").stdout
    assert f"{EXIT_UNFINISHED}  stopped before the end (SIGTERM, Ctrl-C, --max-time)" in text
    assert "run the same command again to continue" in text and "2   bad input" in text
    assert "74  the machine refused a write" in text
    assert f"exit status {EXIT_UNFINISHED}" in " ".join(text.split())  # --max-time
    readme = (REPO / "README.md").read_text()
    assert f"**{EXIT_UNFINISHED} when it stopped before the end**" in readme
