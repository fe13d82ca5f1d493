"""Crash safety of `qmc run` for real: a subprocess killed with SIGKILL at random moments and resumed
gives bins bit-identical to an uninterrupted run; SIGTERM, Ctrl-C (SIGINT) and --max-time stop cleanly with
the exit status of an unfinished run (EXIT_UNFINISHED), and a rerun continues.

The reference is the same task run in this process by :func:`qmc.run.single.run_task` without interruption
(same master seed, so the same random stream).  Delays are drawn from a seeded generator; what they hit
(start-up, a chunk, a file write) varies with the machine, which is the point.
"""

from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from helpers.configs import config_text

from qmc.cli.run import EXIT_UNFINISHED
from qmc.config.parser import load_config
from qmc.run.single import run_task
from qmc.storage.run_index import load_index
from qmc.storage.task_file import read_task, task_path

# ~10 s of Monte Carlo work (L=8 at beta = 2: ~15 us/step on a 2026 machine), so that the
# L=8 task always writes intermediate checkpoints (at most one write per second)

SHORT = config_text(seed=2024, scan={"L": [4, 8], "beta": 2.0}, warmup_steps=1000, measure_steps=400000,
                    bins=50, checkpoint_seconds=0.5)

# far more work than any test waits for: only ever stopped by a signal or --max-time
LONG = config_text(seed=2024, scan={"L": [6], "beta": 2.0}, warmup_steps=1000, measure_steps=50000000,
                   bins=10000, checkpoint_seconds=0.5)


def _write_config(tmp: Path, text: str) -> Path:
    path = tmp / "config.toml"
    path.write_text(text)
    return path


def _start(config: Path, *extra: str, quiet: bool = True) -> subprocess.Popen:
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    return subprocess.Popen([sys.executable, "-m", "qmc", "run", str(config), *(["--quiet"] if quiet else []),
                             *extra],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env, text=True)


def _bins(path: Path) -> dict[str, np.ndarray]:
    return read_task(path).bins


@pytest.fixture(scope="module")
def reference(tmp_path_factory) -> dict[str, dict[str, np.ndarray]]:
    """Bins of every task of SHORT run without interruption, in this process."""
    tmp = tmp_path_factory.mktemp("reference")
    cfg = load_config(_write_config(tmp, SHORT))
    out = {}
    for task in cfg.tasks():
        outcome = run_task(task, tmp / "run", config_text=cfg.text)
        assert outcome.status == "done"
        out[task.task_id] = _bins(task_path(tmp / "run", task.task_id))
    return out


def _steps(run_dir: Path) -> dict[str, tuple[int, int]]:
    out = {}
    for f in (run_dir / "tasks").glob("*.h5") if (run_dir / "tasks").is_dir() else ():
        try:
            d = read_task(f)
        except Exception:  # replaced while we read: try again at the next poll
            continue
        out[d.task_id] = (d.steps_done, d.steps_total)
    return out


def _wait_for_new_checkpoint(run_dir: Path, proc: subprocess.Popen, timeout: float = 60.0) -> bool:
    """Wait until this process has written a checkpoint with more steps than before (and not finished)."""
    before = {k: v[0] for k, v in _steps(run_dir).items()}
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout and proc.poll() is None:
        for tid, (done, total) in _steps(run_dir).items():
            if before.get(tid, 0) < done < total:
                return True
        time.sleep(0.05)
    return False


def test_sigkill_at_random_moments_then_resume_is_bit_identical(tmp_path, reference):
    config = _write_config(tmp_path, SHORT)
    run_dir = tmp_path / "run"
    rng = random.Random(20240611)
    partial_seen = 0
    history = []
    for i in range(4):
        proc = _start(config)
        if i == 0:  # during start-up (imports, model building, first file)
            time.sleep(rng.uniform(0.2, 1.5))
        else:  # once this process has made progress: anywhere in a chunk or a write
            partial_seen += _wait_for_new_checkpoint(run_dir, proc)
            time.sleep(rng.uniform(0.0, 1.0))
        proc.send_signal(signal.SIGKILL)
        _, err = proc.communicate(timeout=30)
        history.append((proc.returncode, _steps(run_dir), err[-300:]))
        for tid in reference:
            path = task_path(run_dir, tid)
            if path.exists():
                d = read_task(path)  # always a complete, readable file
                assert all(len(v) == d.bins_done for v in d.bins.values())
    for _ in range(20):  # resume until done
        proc = _start(config)
        _, err = proc.communicate(timeout=120)
        assert proc.returncode == 0, err
        index = load_index(run_dir)
        if all(e["status"] == "done" for e in index["tasks"].values()):
            break
    else:
        pytest.fail("the run did not finish after 20 resumptions")
    assert not list((run_dir / "tasks").glob("*.tmp"))
    assert partial_seen >= 1, f"no kill landed in the middle of a task: {history}"
    for tid, ref in reference.items():
        got = _bins(task_path(run_dir, tid))
        assert set(got) == set(ref)
        for name in ref:
            assert len(got[name]) == 50
            assert np.array_equal(got[name], ref[name]), f"{tid} {name} differs after kills and resumes"
        sessions = read_task(task_path(run_dir, tid)).provenance["sessions"]
        assert sessions[-1]["ended"] == "done"


def _wait_for_progress(path: Path, proc: subprocess.Popen, min_bins: int = 1, timeout: float = 60.0) -> None:
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        assert proc.poll() is None, proc.communicate()[1]
        if path.exists():
            try:
                if read_task(path).bins_done >= min_bins:
                    return
            except Exception:
                pass
        time.sleep(0.1)
    pytest.fail("the run made no progress")


@pytest.mark.parametrize("sig, says", [(signal.SIGTERM, "SIGTERM"), (signal.SIGINT, "Ctrl-C")])
def test_a_signal_checkpoints_and_exits_unfinished(tmp_path, sig, says):
    config = _write_config(tmp_path, LONG)
    run_dir = tmp_path / "run"
    task_id = load_config(config).tasks()[0].task_id
    path = task_path(run_dir, task_id)
    proc = _start(config)
    _wait_for_progress(path, proc)
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=15)  # a chunk is ~0.3 s, a write a few ms
    assert proc.returncode == EXIT_UNFINISHED == 75, err
    assert says in err and "unfinished" in err and task_id in err
    d = read_task(path)
    assert d.status == "stopped"
    assert 0 < d.steps_done < d.steps_total
    assert d.provenance["sessions"][-1]["ended"] == "stopped"
    assert load_index(run_dir)["tasks"][task_id]["status"] == "stopped"
    first = d.bins

    # resume for a moment: the stored bins are kept as they are and more are added
    proc = _start(config, "--max-time", "5", quiet=False)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == EXIT_UNFINISHED, err
    assert f"resuming task {task_id} at step {d.steps_done}" in err
    d2 = read_task(path)
    assert d2.steps_done > d.steps_done and len(d2.provenance["sessions"]) == 2
    for name, col in first.items():
        assert np.array_equal(d2.bins[name][: len(col)], col)


def test_max_time_stops_cleanly(tmp_path):
    config = _write_config(tmp_path, LONG)
    run_dir = tmp_path / "run"
    proc = _start(config, "--max-time", "6")
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == EXIT_UNFINISHED, err
    assert "time budget" in err and "unfinished" in err and "run the same command again" in err
    task_id = load_config(config).tasks()[0].task_id
    d = read_task(task_path(run_dir, task_id))
    assert d.status == "stopped" and 0 < d.steps_done < d.steps_total
    assert "time budget" in (run_dir / "run.log").read_text()
