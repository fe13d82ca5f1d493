"""``qmc status``: every task's state, steps and bins, last checkpoint, failures, and the time left."""

from __future__ import annotations

import math
import time
from pathlib import Path

import h5py
import pytest
from helpers.cli import invoke
from helpers.configs import heisenberg_nn, write_config
from helpers.stopping import StopAfter

from qmc.cli.status import status_text
from qmc.config.parser import load_config
from qmc.run.outcome import StopFlag
from qmc.run.single import run_task
from qmc.run.status import run_status
from qmc.run.task_identity import task_weight
from qmc.storage.task_file import task_path


@pytest.fixture(scope="module")
def mixed_run(tmp_path_factory) -> Path:
    """A run with one task done, one stopped half-way, one failed and one never started."""
    tmp = tmp_path_factory.mktemp("status")
    config = write_config(tmp, "c.toml", seed=3, terms=[heisenberg_nn("J")],
                          scan={"L": [4, 6], "J": [0.5, 1.0], "beta": 1.0},
                          warmup_steps=50, measure_steps=2000, bins=20)
    assert invoke("run", config, "--quiet", "--only", "L4_J1_beta1_c0").exit_code == 0
    cfg = load_config(config)
    task = next(t for t in cfg.tasks() if t.task_id == "L6_J1_beta1_c0")
    flag = StopFlag()
    run_task(task, tmp / "run", stop_flag=flag, progress=StopAfter(flag, bins=10))
    mp = pytest.MonkeyPatch()
    import qmc.run.single as single

    def broken(task):
        raise RuntimeError("no model today")

    mp.setattr(single, "build_model", broken)
    try:
        assert invoke("run", config, "--quiet", "--only", "L4_J0.5_beta1_c0").exit_code == 1
    finally:
        mp.undo()
    return tmp / "run"


def test_states_steps_bins_and_failures(mixed_run):
    st = run_status(mixed_run)
    by_id = {t.task_id: t for t in st.tasks}
    assert {k: v.state for k, v in by_id.items()} == {
        "L4_J0.5_beta1_c0": "failed", "L4_J1_beta1_c0": "done", "L6_J0.5_beta1_c0": "pending",
        "L6_J1_beta1_c0": "stopped"}
    done, stopped = by_id["L4_J1_beta1_c0"], by_id["L6_J1_beta1_c0"]
    assert (done.steps_done, done.steps_total, done.bins_done, done.bins_total) == (2050, 2050, 20, 20)
    assert stopped.bins_done >= 10 and 50 + 100 * stopped.bins_done <= stopped.steps_done < 2050
    assert stopped.checkpoint_time is not None and abs(time.time() - stopped.checkpoint_time) < 600
    assert "no model today" in by_id["L4_J0.5_beta1_c0"].message
    result = invoke("status", mixed_run)
    assert result.exit_code == 0, result.output
    out = result.stdout
    assert "4 task(s): 1 done, 1 stopped, 1 failed, 1 pending" in out
    assert out.index("L4_J0.5_beta1_c0") < out.index("L6_J1_beta1_c0") < out.index("L6_J0.5_beta1_c0") \
        < out.index("L4_J1_beta1_c0")  # failed, stopped, pending, then done
    assert f"{stopped.steps_done}/2050" in out and f"{stopped.bins_done}/20" in out
    assert "failed L4_J0.5_beta1_c0: RuntimeError: no model today" in out
    assert "left: 3 task(s), about" in out


def test_time_left_from_measured_rates(mixed_run):
    """The stopped task: its own seconds per step; a task never run: the median seconds per unit of
    N beta of the measured tasks times its own N beta; the run: the sum."""
    st = run_status(mixed_run)
    by_id = {t.task_id: t for t in st.tasks}
    stopped, pending, done = by_id["L6_J1_beta1_c0"], by_id["L6_J0.5_beta1_c0"], by_id["L4_J1_beta1_c0"]
    assert stopped.seconds_per_step > 0 and done.seconds_per_step > 0
    assert stopped.seconds_left == pytest.approx((2050 - stopped.steps_done) * stopped.seconds_per_step)
    weights = {t.task_id: task_weight(t) for t in load_config(mixed_run / "config.toml").tasks()}
    ratios = sorted(t.seconds_per_step / weights[t.task_id] for t in (stopped, done))
    assert pending.seconds_left == pytest.approx(2050 * weights[pending.task_id] * sum(ratios) / 2)
    failed = by_id["L4_J0.5_beta1_c0"]
    assert failed.seconds_left == pytest.approx(2050 * weights[failed.task_id] * sum(ratios) / 2)
    assert st.seconds_left == pytest.approx(stopped.seconds_left + pending.seconds_left + failed.seconds_left)
    assert math.isfinite(st.seconds_left)


def test_a_task_marked_running_without_recent_checkpoints_is_flagged(mixed_run, tmp_path):
    import shutil

    run = tmp_path / "run"
    shutil.copytree(mixed_run, run)
    with h5py.File(task_path(run, "L6_J1_beta1_c0"), "r+") as f:
        f.attrs["status"] = "running"  # as a process killed during the run leaves it
    st = run_status(run)
    assert next(t for t in st.tasks if t.task_id == "L6_J1_beta1_c0").stale is False
    later = run_status(run, now=time.time() + 3600)
    t = next(t for t in later.tasks if t.task_id == "L6_J1_beta1_c0")
    assert t.state == "running" and t.stale
    text = status_text(later, now=time.time() + 3600)
    assert "running?" in text and "their process has probably stopped; rerun to continue" in text


def test_long_runs_fit_one_screen(mixed_run):
    st = run_status(mixed_run)
    text = status_text(st, rows=2)
    assert "... 2 more task(s) not shown (done, pending; --all lists every task)" in text
    assert "L4_J1_beta1_c0" not in text.split("...")[0]
    assert "L4_J1_beta1_c0" in status_text(st, rows=2, show_all=True)


def test_not_a_run_directory(tmp_path):
    result = invoke("status", tmp_path)
    assert result.exit_code == 2 and "not a run directory" in result.stderr


def test_queued_tasks_and_live_counters_of_the_index_are_shown(mixed_run, tmp_path):
    """What a running MPI farm writes into the index: a task queued on a busy rank, and a running task's
    counters between two checkpoints."""
    import json
    import shutil

    run = tmp_path / "run"
    shutil.copytree(mixed_run, run)
    index = json.loads((run / "index.json").read_text())
    index["tasks"]["L6_J0.5_beta1_c0"].update(status="queued", rank=1)  # never started, no file
    index["tasks"]["L6_J1_beta1_c0"].update(status="running", rank=0, steps_done=1500, bins_done=14)
    (run / "index.json").write_text(json.dumps(index))
    by_id = {t.task_id: t for t in run_status(run).tasks}
    queued, running = by_id["L6_J0.5_beta1_c0"], by_id["L6_J1_beta1_c0"]
    assert queued.state == "queued" and queued.steps_done == 0
    assert running.state == "running" and (running.steps_done, running.bins_done) == (1500, 14)
    assert by_id["L4_J1_beta1_c0"].state == "done" and by_id["L4_J0.5_beta1_c0"].state == "failed"
    text = status_text(run_status(run))
    assert "1 running, 1 queued" in text and "1500/2050" in text
