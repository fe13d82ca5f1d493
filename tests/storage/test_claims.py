"""Several processes on one run directory (job arrays): claims, take-overs, the shared index, and three
concurrent `qmc run` processes of which one is SIGKILLed, ending with bins bit-identical to one serial run.
"""

from __future__ import annotations

import json
import multiprocessing
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from qmc.config.parser import load_config
from qmc.run.single import run_task
from qmc.storage.claims import ClaimBook
from qmc.storage.processes import this_host
from qmc.storage.run_index import load_index, new_index, write_index
from qmc.storage.task_file import read_task, task_path


def _dead_pid() -> int:
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


def _fake_claim(run_dir: Path, key: str, gen: int, host: str, pid: int, heartbeat: float) -> None:
    d = run_dir / "claims"
    d.mkdir(parents=True, exist_ok=True)
    (d / f"{key}.{gen}.claim").write_text(json.dumps({"key": key, "host": host, "pid": pid, "owner": "other",
                                                      "claimed": heartbeat, "heartbeat": heartbeat}))


# ------------------------------------------------------------------------------------------- claims


def test_a_claim_held_by_a_live_process_is_respected_and_released(tmp_path):
    a, b = ClaimBook(tmp_path), ClaimBook(tmp_path)
    assert a.claim("t1") and a.claim("t1")  # ours (again)
    assert not b.claim("t1")
    assert b.holder("t1")["owner"] == a.owner and b.holder("t1")["pid"] == os.getpid()
    assert set(b.live()) == {"t1"} and b.claim("t2")
    a.release("t1")
    assert not (tmp_path / "claims" / "t1.0.claim").exists() and b.holder("t1") is None
    assert b.claim("t1") and set(a.live()) == {"t1", "t2"}
    b.close()
    assert a.live() == {}
    a.close()
    assert not list((tmp_path / "claims").iterdir())  # no claim and no heartbeat file left


def test_a_dead_process_on_this_host_is_taken_over_at_once(tmp_path):
    _fake_claim(tmp_path, "t1", 0, this_host(), _dead_pid(), time.time())
    book = ClaimBook(tmp_path)
    assert book.holder("t1") is None
    assert book.claim("t1") and book.held == {"t1": 1}
    book.release("t1")  # all generations go
    assert not list((tmp_path / "claims").glob("t1.*"))


def test_another_host_is_taken_over_only_when_its_heartbeat_is_stale(tmp_path):
    _fake_claim(tmp_path, "t1", 0, "node-far-away", 4242, time.time() - 100)
    assert not ClaimBook(tmp_path, stale_seconds=120).claim("t1")  # heartbeat 100 s old: alive
    (tmp_path / "claims" / "other.alive").write_text(json.dumps({"owner": "other", "heartbeat": time.time()}))
    assert not ClaimBook(tmp_path, stale_seconds=50).claim("t1")  # its process file beats on
    (tmp_path / "claims" / "other.alive").unlink()
    assert ClaimBook(tmp_path, stale_seconds=50).claim("t1")  # silent for 100 s > 50 s


def test_a_frozen_holder_learns_at_its_next_heartbeat_that_it_lost_the_claim(tmp_path):
    a = ClaimBook(tmp_path, stale_seconds=0.2, heartbeat_seconds=0.05)
    assert a.claim("t1") and a.claim("t2")
    time.sleep(0.3)  # frozen beyond the stale limit
    b = ClaimBook(tmp_path, stale_seconds=0.2)
    assert b.claim("t1")
    assert a.beat() == ["t1"] and set(a.held) == {"t2"}
    a.release("t1")  # not ours any more: b's claim stays
    assert b.still_held("t1")


def _race(run_dir: str, key: str, start: float, out: multiprocessing.Queue) -> None:
    book = ClaimBook(run_dir)
    while time.time() < start:
        pass
    out.put(book.claim(key))
    time.sleep(0.5)  # keep the claim (and the process) alive while the others look


@pytest.mark.parametrize("stale_first", [False, True], ids=["fresh", "take-over"])
def test_of_processes_racing_for_a_unit_exactly_one_wins(tmp_path, stale_first):
    if stale_first:
        _fake_claim(tmp_path, "t1", 0, this_host(), _dead_pid(), time.time())
    ctx = multiprocessing.get_context("fork")
    out = ctx.Queue()
    start = time.time() + 0.5
    procs = [ctx.Process(target=_race, args=(str(tmp_path), "t1", start, out)) for _ in range(8)]
    for p in procs:
        p.start()
    wins = [out.get(timeout=30) for _ in procs]
    for p in procs:
        p.join(timeout=30)
    assert sum(wins) == 1


# ------------------------------------------------------------------------------------------- index


def test_processes_sharing_the_index_keep_each_others_entries(tmp_path):
    tasks = [{"task_id": t, "params": {}, "bins_total": 4, "steps_total": 40} for t in ("a", "b", "c")]
    write_index(tmp_path, new_index("fp", "/c.toml", "x", tasks))
    one, two = load_index(tmp_path), load_index(tmp_path)
    one["tasks"]["a"].update(status="running", steps_done=10)
    write_index(tmp_path, one, mine={"a"})
    two["tasks"]["b"].update(status="done", steps_done=40)
    two["tasks"]["a"]["status"] = "pending"  # stale view of a task it does not hold: not written
    write_index(tmp_path, two, mine={"b"})
    back = load_index(tmp_path)["tasks"]
    assert (back["a"]["status"], back["a"]["steps_done"], back["b"]["status"]) == ("running", 10, "done")
    assert two["tasks"]["a"]["status"] == "running"  # its view was refreshed
    assert back["c"]["status"] == "pending" and (tmp_path / "claims" / "index.lock").exists()


# ------------------------------------------------------------------------------------------- job array

# six tasks of about 3 s each on an idle 2026 machine (a checkpoint with bins is written after 1 s)
ARRAY = """
[run]
seed = 4711
output = "run"
[lattice]
kind = "square"
size = [6, 6]
[[terms]]
type = "heisenberg"
bonds = "nn"
coupling = "J"
[scan]
J = [1.0, 1.1, 1.2, 1.3, 1.4, 1.5]
beta = 3.0
[sampling]
warmup_steps = 200
measure_steps = 300000
bins = 40
checkpoint_seconds = 0.2
"""


def _claims_of(run_dir: Path, pid: int) -> list[str]:
    out = []
    for p in (run_dir / "claims").glob("*.claim") if (run_dir / "claims").is_dir() else []:
        try:
            info = json.loads(p.read_text())
        except (OSError, ValueError):
            continue
        if info.get("pid") == pid:
            out.append(info["key"])
    return out


def test_three_processes_on_six_tasks_one_killed_bins_identical_to_one_serial_run(tmp_path):
    config = tmp_path / "array.toml"
    config.write_text(ARRAY)
    tasks = load_config(config).tasks()
    run_dir = tmp_path / "run"
    cmd = [sys.executable, "-m", "qmc", "run", str(config), "--quiet", "--out", str(run_dir)]
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    procs = [subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
             for _ in range(3)]
    victim = procs[1]
    deadline = time.monotonic() + 120
    killed_task = None
    while killed_task is None and time.monotonic() < deadline:  # the victim has a checkpoint with bins
        for tid in _claims_of(run_dir, victim.pid):
            path = task_path(run_dir, tid)
            try:
                if path.exists() and read_task(path).bins_done > 0:
                    killed_task = tid
            except Exception:  # being replaced right now
                pass
        assert victim.poll() is None, victim.communicate()[1]
        time.sleep(0.05)
    assert killed_task is not None, "the victim never wrote a checkpoint with bins"
    victim.send_signal(signal.SIGKILL)
    victim.wait(timeout=30)
    steps_at_kill = read_task(task_path(run_dir, killed_task)).steps_done
    for p in (procs[0], procs[2]):
        _, err = p.communicate(timeout=300)
        assert p.returncode == 0, err
    index = load_index(run_dir)
    assert all(e["status"] == "done" for e in index["tasks"].values()), index["tasks"]
    assert not any(k in e for e in index["tasks"].values() for k in ("rank", "process"))
    assert not list((run_dir / "claims").glob("*.claim"))
    reference = tmp_path / "serial"
    for task in tasks:  # the same tasks run once each, without interruption, in this process
        run_task(task, reference, config_text=ARRAY)
        got, ref = read_task(task_path(run_dir, task.task_id)), read_task(task_path(reference, task.task_id))
        for name in ref.bin_names:
            assert np.array_equal(got.bins[name], ref.bins[name]), (task.task_id, name)
        sessions = got.provenance["sessions"]  # nothing computed twice: sessions follow each other
        for before, after in zip(sessions, sessions[1:], strict=False):
            assert after["steps_start"] == before["steps_stop"], sessions
        assert sessions[-1]["steps_stop"] == got.steps_total
        if task.task_id == killed_task:
            assert len(sessions) == 2 and sessions[0]["pid"] == victim.pid
            assert sessions[0]["steps_stop"] == steps_at_kill > 0 and sessions[1]["pid"] != victim.pid
        else:
            assert len(sessions) == 1 and sessions[0]["ended"] == "done"


def test_an_mpi_job_and_a_serial_job_share_a_run_directory(tmp_path):
    pytest.importorskip("mpi4py")
    here = Path(sys.executable).parent / "mpiexec"
    mpiexec = str(here) if here.exists() else shutil.which("mpiexec")
    if mpiexec is None:
        pytest.skip("no mpiexec")
    text = ARRAY.replace("measure_steps = 300000", "measure_steps = 100000")
    config = tmp_path / "array.toml"
    config.write_text(text)
    run_dir = tmp_path / "run"
    cmd = [sys.executable, "-m", "qmc", "run", str(config), "--quiet", "--out", str(run_dir)]
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    procs = [subprocess.Popen(c, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
             for c in ([mpiexec, "-n", "2", *cmd], cmd)]
    for p in procs:
        _, err = p.communicate(timeout=300)
        assert p.returncode == 0, err
    index = load_index(run_dir)
    assert all(e["status"] == "done" for e in index["tasks"].values()), index["tasks"]
    pids = set()
    for task in load_config(config).tasks():
        run_task(task, tmp_path / "serial", config_text=text)
        got, ref = read_task(task_path(run_dir, task.task_id)), read_task(task_path(tmp_path / "serial",
                                                                                    task.task_id))
        assert all(np.array_equal(got.bins[n], ref.bins[n]) for n in ref.bin_names), task.task_id
        sessions = got.provenance["sessions"]
        assert len(sessions) == 1 and sessions[0]["ended"] == "done"  # each task ran once
        pids.add(sessions[0]["pid"])
    assert procs[1].pid in pids and len(pids) >= 2  # both jobs took part
