"""`qmc run` under a real `mpiexec` (the mpich/mpi4py wheels): same bins as a serial run, clean stops,
recorded failures, and the fallback without mpi4py.

Every comparison is bit for bit (np.array_equal) against a serial run of the same configuration: a task's
random stream depends only on the master seed and its own parameters, never on the rank or the number
of ranks.  Configurations are tiny (4x4 and 6x6 lattices, a few thousand steps) so that each launch costs
mostly its start-up.
"""

from __future__ import annotations

import os
import signal
import time
from pathlib import Path

import h5py
import numpy as np
import pytest
from helpers.mpi_runs import (
    EXCHANGE,
    EXCHANGE_ONE_RANK,
    MPIEXEC,
    PLAIN,
    all_bins,
    assert_same_bins,
    qmc_run,
    start,
    write,
)

from qmc.cli.run import EXIT_UNFINISHED
from qmc.config.parser import load_config
from qmc.exchange.ladder import Ladder
from qmc.mpi.world import launcher_rank_size, mpi_world
from qmc.run.outcome import StopFlag
from qmc.run.single import run_task
from qmc.run.units import work_units
from qmc.storage.run_index import load_index
from qmc.storage.task_file import read_task, task_path

pytest.importorskip("mpi4py")


pytestmark = pytest.mark.skipif(MPIEXEC is None, reason="no mpiexec beside the Python interpreter or on PATH")


# ------------------------------------------------------------------------------------------- detection


def test_launcher_environment_is_read(monkeypatch):
    for var in ("PMI_RANK", "PMI_SIZE", "OMPI_COMM_WORLD_RANK", "OMPI_COMM_WORLD_SIZE", "MV2_COMM_WORLD_RANK",
                "MV2_COMM_WORLD_SIZE", "PMIX_RANK", "QMC_MPI"):
        monkeypatch.delenv(var, raising=False)
    assert launcher_rank_size() is None
    assert mpi_world() is None  # not started by a launcher: serial, mpi4py not even imported
    monkeypatch.setenv("OMPI_COMM_WORLD_RANK", "3")
    monkeypatch.setenv("OMPI_COMM_WORLD_SIZE", "8")
    assert launcher_rank_size() == (3, 8)
    monkeypatch.setenv("QMC_MPI", "0")
    assert mpi_world() is None  # forced serial


# ------------------------------------------------------------------------------------------- same bins


@pytest.mark.parametrize("template", [PLAIN, EXCHANGE, EXCHANGE_ONE_RANK],
                         ids=["plain", "exchange", "exchange-one-rank"])
def test_bins_identical_serial_n1_n2(tmp_path, template):
    config = write(tmp_path, template, "c.toml")
    results = {}
    for label, ranks in (("serial", None), ("n1", 1), ("n2", 2)):
        proc = qmc_run(config, tmp_path / label, ranks)
        assert proc.returncode == 0, proc.stderr
        index = load_index(tmp_path / label)
        assert all(e["status"] == "done" for e in index["tasks"].values())
        results[label] = all_bins(tmp_path / label, config)
    assert_same_bins(results["serial"], results["n1"])
    assert_same_bins(results["serial"], results["n2"])
    log = (tmp_path / "n2" / "run.log").read_text()
    assert "MPI farm statistics" in log and '"ranks": 2' in log
    assert "rank 1:" in log  # the worker's log lines reach run.log through rank 0
    if template is EXCHANGE:
        d = read_task(task_path(tmp_path / "n2", load_config(config).tasks()[0].task_id))
        assert d.exchange is not None and d.exchange["parameter"] == "Q"
        # each 3-chain ladder ran side by side on both ranks: chains 0..1 on rank 0, chain 2 on rank 1
        assert log.count("on ranks 0, 1") == 2
        assert "rank 1: (at" in log and "here chains 2..2 of 3 (team member 1 of 2)" in log
    if template is EXCHANGE_ONE_RANK:  # max_ranks = 1: one ladder per rank, no teams
        assert "on ranks" not in log and "side by side" not in log
        assert '"units_by_rank": {"0": 1, "1": 1}' in log


def test_without_mpi4py_rank0_runs_everything_serially(tmp_path):
    shadow = tmp_path / "shadow" / "mpi4py"
    shadow.mkdir(parents=True)
    (shadow / "__init__.py").write_text("raise ImportError('mpi4py hidden by the test')\n")
    config = write(tmp_path, PLAIN, "c.toml")
    ref = qmc_run(config, tmp_path / "serial")
    assert ref.returncode == 0, ref.stderr
    path = os.pathsep.join([str(shadow.parent), os.environ.get("PYTHONPATH", "")])
    proc = qmc_run(config, tmp_path / "n2", 2, env={"PYTHONPATH": path})
    assert proc.returncode == 0, proc.stderr
    assert proc.stderr.count("mpi4py cannot be imported") == 1  # rank 0 says it once; rank 1 exits
    assert_same_bins(all_bins(tmp_path / "serial", config), all_bins(tmp_path / "n2", config))
    for t in load_config(config).tasks():  # each task ran once: one session per file
        assert len(read_task(task_path(tmp_path / "n2", t.task_id)).provenance["sessions"]) == 1


# ------------------------------------------------------------------------------------------- failures


def test_a_failed_task_is_recorded_and_the_others_go_on(tmp_path):
    config = write(tmp_path, PLAIN, "c.toml")
    tasks = load_config(config).tasks()
    victim = tasks[2]
    run_dir = tmp_path / "run"
    flag = StopFlag()
    flag.set("test")
    run_task(victim, run_dir, stop_flag=flag, config_text=config.read_text())  # a checkpoint at step 0
    with h5py.File(task_path(run_dir, victim.task_id), "r+") as f:
        f["checkpoint/ops"][0] = 1 << 30  # an operator index beyond the model: restoring it fails
    proc = qmc_run(config, run_dir, 2)
    assert proc.returncode == 1, proc.stderr
    assert f"task {victim.task_id} failed" in proc.stderr
    index = load_index(run_dir)
    for t in tasks:
        entry = index["tasks"][t.task_id]
        if t is victim:
            assert entry["status"] == "failed" and "inconsistent" in entry["message"]
        else:
            assert entry["status"] == "done", (t.task_id, entry)
    before = {t.task_id: task_path(run_dir, t.task_id).stat().st_mtime_ns for t in tasks if t is not victim}
    proc = qmc_run(config, run_dir, 2)  # resumes only what is unfinished: the failed task, again
    assert proc.returncode == 1 and f"task {victim.task_id} failed" in proc.stderr
    assert {t: task_path(run_dir, t).stat().st_mtime_ns for t in before} == before


def test_bad_configuration_is_reported_once_and_all_ranks_exit(tmp_path):
    config = write(tmp_path, PLAIN, "bad.toml", measure=2000, bins=7)  # 7 does not divide 2000
    proc = qmc_run(config, tmp_path / "run", 2, timeout=60)
    assert proc.returncode == 2
    assert proc.stderr.count("error:") == 1 and "sampling.bins" in proc.stderr
    assert "Traceback" not in proc.stderr


# ------------------------------------------------------------------------------------------- SIGTERM


def _started(run_dir: Path, ids: list[str]) -> bool:
    return all(task_path(run_dir, tid).exists() for tid in ids)


def test_sigterm_checkpoints_every_rank_and_resumes_bit_identically(tmp_path):
    config = write(tmp_path, EXCHANGE, "c.toml", measure=60000, bins=60)
    cfg = load_config(config)
    units = work_units(cfg.tasks())
    assert len(units) == 2  # two 3-chain ladders, each side by side on both ranks, one after the other
    run_dir = tmp_path / "run"
    proc = start(config, run_dir, 2)
    first = [t.task_id for t in units[0]]
    t0 = time.monotonic()
    while time.monotonic() - t0 < 120:  # the first ladder has started on both ranks: its first files
        assert proc.poll() is None, proc.communicate()[1]
        if _started(run_dir, first):
            break
        time.sleep(0.05)
    else:
        pytest.fail("the first ladder did not start")
    time.sleep(0.5)  # a ladder takes several seconds: stop it well inside
    proc.send_signal(signal.SIGTERM)  # to mpiexec, which forwards it to every rank
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == EXIT_UNFINISHED, err  # rank 0's status: unfinished, rerun to continue
    assert "SIGTERM" in err and "unfinished" in err
    index = load_index(run_dir)
    steps = set()
    for t in units[0]:  # chains 0, 1 written by rank 0, chain 2 by rank 1: all at the same step
        d = read_task(task_path(run_dir, t.task_id))
        assert d.status == "stopped" and 0 < d.steps_done < d.steps_total, (t.task_id, d.status)
        assert index["tasks"][t.task_id]["status"] == "stopped"
        steps.add(d.steps_done)
    assert len(steps) == 1
    for t in units[1]:
        assert not task_path(run_dir, t.task_id).exists()
        assert index["tasks"][t.task_id]["status"] == "pending"
    # resume with two ranks until done: bit-identical to uninterrupted in-memory ladders
    proc = qmc_run(config, run_dir, 2)
    assert proc.returncode == 0, proc.stderr
    for unit in units:
        rows = Ladder(unit).advance(10**12)
        for t, ref in zip(unit, rows, strict=True):
            d = read_task(task_path(run_dir, t.task_id))
            got = np.column_stack([d.bins[n] for n in d.bin_names])
            assert d.status == "done" and np.array_equal(got, ref), t.task_id
            ended = ["stopped", "done"] if unit is units[0] else ["done"]
            assert [s["ended"] for s in d.provenance["sessions"]] == ended


# ------------------------------------------------------------------------------------------- index


EQUAL = dict(seed=33, size=[6, 6], scan={"beta": 3.0}, warmup_steps=200, copies=6, checkpoint_seconds=60)


def test_index_shows_queued_units_and_live_counters(tmp_path):
    """Six equal tasks on two ranks: a prefetched task reads "queued" with its rank until the rank starts it,
    and the steps of running tasks move while they run (not only at checkpoints: 60 s here)."""
    config = write(tmp_path, EQUAL, "c.toml", measure=650000, bins=20)  # ~4 s a task on an idle machine
    run_dir = tmp_path / "run"
    proc = start(config, run_dir, 2)
    seen: dict[str, list[tuple[str, int | None, int]]] = {}
    t0 = time.monotonic()
    while proc.poll() is None and time.monotonic() - t0 < 240:
        try:
            index = load_index(run_dir)
        except Exception:  # not written yet
            index = None
        for tid, e in (index or {"tasks": {}})["tasks"].items():
            state = (e["status"], e.get("rank"), e["steps_done"])
            if not seen.get(tid) or seen[tid][-1] != state:
                seen.setdefault(tid, []).append(state)
        time.sleep(0.05)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 0, err
    queued = [tid for tid, states in seen.items() if any(s[0] == "queued" for s in states)]
    assert queued, seen
    for tid in queued:  # queued on a rank, then running on the same rank, then done
        states = [s for s in seen[tid] if s[0] != "pending"]
        q = next(s for s in states if s[0] == "queued")
        assert q[1] is not None and all(s[1] == q[1] for s in states if s[0] in ("queued", "running"))
        assert [s[0] for s in states][-1] == "done"
    # counters between start and end while running: they come from progress reports (the checkpoint
    # interval is 60 s, and the outcome arrives only at the end)
    moving = [tid for tid, states in seen.items()
              if any(s[0] == "running" and 0 < s[2] < 650200 for s in states)]
    assert moving, seen
    log = (run_dir / "run.log").read_text()
    assert '"progress_reports": ' in log and '"prefetch_granted": 0' not in log
