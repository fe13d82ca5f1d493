"""run_task, prepare_run and run_serial: resuming, stopping, failures, run-directory checks, progress."""

from __future__ import annotations

import inspect
import io
import threading
import time
from pathlib import Path

import numpy as np
import pytest
from helpers.configs import heisenberg_nn, write_config
from helpers.stopping import StopAfter

import qmc.run.pacing as pacing
import qmc.run.single as single
import qmc.run.task_book as task_book
from qmc.chain.simulation import Simulation
from qmc.config.parser import load_config
from qmc.engine.rng import stream_seed
from qmc.errors import UserError
from qmc.run.outcome import StopFlag
from qmc.run.plan import prepare_run
from qmc.run.progress import Progress, format_duration
from qmc.run.serial import run_serial
from qmc.run.single import run_task
from qmc.run.task_identity import task_fingerprint
from qmc.storage.run_index import load_index
from qmc.storage.task_file import read_task, task_path, write_task


def config_file(tmp: Path, *, sizes=(4,), J=1.0, measure=2000, bins=20, kind="square", seed=11,
                name="config.toml") -> Path:
    return write_config(tmp, name, seed=seed, lattice=kind, terms=[heisenberg_nn("J")],
                        scan={"L": sizes, "J": J, "beta": 1.5}, warmup_steps=50, measure_steps=measure,
                        bins=bins)


def direct_bins(task) -> np.ndarray:
    """The task's bins from one uninterrupted Simulation.advance call (no chunks, no files)."""
    from qmc.config.parser import build_model

    s = task.sampling
    sim = Simulation(build_model(task), task.beta, warmup_steps=s.warmup_steps, measure_steps=s.measure_steps,
                     bins=s.bins, seed_words=stream_seed(task.seed, task.seed_key))
    rows = sim.advance(sim.total_steps)
    return rows, sim.bin_names


def stored_rows(path: Path, names) -> np.ndarray:
    d = read_task(path)
    return np.column_stack([d.bins[n] for n in names])


def test_run_task_matches_an_unchunked_simulation(tmp_path):
    cfg = load_config(config_file(tmp_path))
    task = cfg.tasks()[0]
    out = run_task(task, tmp_path / "run", config_text=cfg.text)
    assert out.status == "done" and out.message == ""
    assert (out.bins_done, out.bins_total, out.steps_done, out.steps_total) == (20, 20, 2050, 2050)
    rows, names = direct_bins(task)
    assert np.array_equal(stored_rows(task_path(tmp_path / "run", task.task_id), names), rows)
    d = read_task(out.path)
    assert d.status == "done" and d.config_text == cfg.text
    assert d.params["L"] == 4 and d.params["J"] == 1.0 and d.params["lattice"] == "square"
    assert d.provenance["master_seed"] == 11 and d.provenance["seed_key"] == task.seed_key
    assert d.provenance["stream_seed"] == [int(w) for w in stream_seed(11, task.seed_key)]
    assert d.provenance["sessions"][0]["ended"] == "done"
    assert run_task(task, tmp_path / "run").status == "done"  # already done: nothing rewritten
    assert len(read_task(out.path).provenance["sessions"]) == 1


def test_stop_and_resume_is_bit_identical(tmp_path, monkeypatch):
    monkeypatch.setattr(pacing, "CHUNK_SECONDS", 1e-3)  # chunks of ~100 steps, so the stops land inside
    cfg = load_config(config_file(tmp_path, measure=20000))
    task = cfg.tasks()[0]
    run_dir = tmp_path / "run"
    for stop_at in (100, 5000, 12345):  # in the warm-up, then twice in the measurement (mid-bin)
        flag = StopFlag()
        out = run_task(task, run_dir, stop_flag=flag, progress=StopAfter(flag, stop_at))
        assert out.status == "stopped" and out.message == "test stop"
        d = read_task(out.path)
        assert d.status == "stopped" and stop_at <= d.steps_done < 20050 and d.bins_done == out.bins_done
    out = run_task(task, run_dir)
    assert out.status == "done"
    rows, names = direct_bins(task)
    assert np.array_equal(stored_rows(task_path(run_dir, task.task_id), names), rows)
    sessions = read_task(out.path).provenance["sessions"]
    assert [s["ended"] for s in sessions] == ["stopped"] * 3 + ["done"]
    assert all(a["steps_stop"] == b["steps_start"] for a, b in zip(sessions, sessions[1:], strict=False))


def test_deadline_and_preset_flag_stop_at_once(tmp_path):
    cfg = load_config(config_file(tmp_path))
    task = cfg.tasks()[0]
    out = run_task(task, tmp_path / "run", deadline=time.time() - 1)
    assert out.status == "stopped" and out.message == "time budget used up" and out.steps_done == 0
    flag = StopFlag()
    flag.set("SIGTERM received")
    out = run_task(task, tmp_path / "run", stop_flag=flag)
    assert out.status == "stopped" and out.message == "SIGTERM received"
    ev = threading.Event()  # any object with is_set() will do
    ev.set()
    assert run_task(task, tmp_path / "run", stop_flag=ev).status == "stopped"


def test_writes_are_throttled(tmp_path, monkeypatch):
    cfg = load_config(config_file(tmp_path, measure=40000))
    task = cfg.tasks()[0]
    calls = []
    real = task_book.write_task
    monkeypatch.setattr(task_book, "write_task", lambda p, rec: (calls.append(rec.status), real(p, rec)))
    t0 = time.monotonic()
    run_task(task, tmp_path / "run", checkpoint_seconds=0.001)
    elapsed = time.monotonic() - t0
    # first file + at most one per second + the final one, although a bin completes every few ms
    assert calls[0] == "running" and calls[-1] == "done"
    assert len(calls) <= 2 + int(elapsed / pacing.MIN_WRITE_INTERVAL) + 1


def test_failure_is_recorded_and_other_tasks_go_on(tmp_path, monkeypatch):
    cfg = load_config(config_file(tmp_path, sizes=[4, 6]))
    real = single.build_model

    def broken(task):
        if task.params["L"] == 6:
            raise RuntimeError("simulated crash")
        return real(task)

    monkeypatch.setattr(single, "build_model", broken)
    plan = prepare_run(cfg)
    report = run_serial(plan)
    assert [o.status for o in report.outcomes] == ["failed", "done"]  # largest first
    assert report.unfinished == ["L6_J1_beta1.5_c0"]
    index = load_index(plan.run_dir)
    entry = index["tasks"]["L6_J1_beta1.5_c0"]
    assert entry["status"] == "failed" and "RuntimeError: simulated crash" in entry["message"]
    assert index["tasks"]["L4_J1_beta1.5_c0"]["status"] == "done"
    monkeypatch.setattr(single, "build_model", real)
    plan = prepare_run(cfg)  # rerun: only the failed task
    assert [t.task_id for t in plan.tasks] == ["L6_J1_beta1.5_c0"] and plan.done == ["L4_J1_beta1.5_c0"]
    report = run_serial(plan)
    assert report.unfinished == [] and load_index(plan.run_dir)["tasks"]["L6_J1_beta1.5_c0"]["message"] == ""


def test_failure_after_a_checkpoint_marks_the_file(tmp_path, monkeypatch):
    cfg = load_config(config_file(tmp_path, measure=20000))
    task = cfg.tasks()[0]
    real = Simulation.advance
    n = {"calls": 0}

    def advance(self, k, **kw):
        n["calls"] += 1
        if n["calls"] == 6:
            raise FloatingPointError("bad step")
        return real(self, k, **kw)

    monkeypatch.setattr(Simulation, "advance", advance)
    out = run_task(task, tmp_path / "run")
    assert out.status == "failed" and out.message == "FloatingPointError: bad step"
    d = read_task(out.path)
    assert d.status == "failed" and d.message == out.message
    monkeypatch.setattr(Simulation, "advance", real)
    assert run_task(task, tmp_path / "run").status == "done"  # resumes from the last good checkpoint
    rows, names = direct_bins(task)
    assert np.array_equal(stored_rows(Path(out.path), names), rows)


def test_prepare_orders_largest_first_and_selects(tmp_path):
    cfg = load_config(config_file(tmp_path, sizes=[4, 8, 6]))
    plan = prepare_run(cfg)
    assert [t.params["L"] for t in plan.tasks] == [8, 6, 4]
    assert (plan.run_dir / "config.toml").read_text() == cfg.text
    assert set(load_index(plan.run_dir)["tasks"]) == {t.task_id for t in cfg.tasks()}
    plan = prepare_run(cfg, only=("L4_J1_beta1.5_c0,L6_J1_beta1.5_c0",))
    assert [t.params["L"] for t in plan.tasks] == [6, 4]
    with pytest.raises(UserError) as info:
        prepare_run(cfg, only=("L5_J1_beta1.5_c0",))
    assert info.value.where == "--only" and "did you mean" in info.value.message


def test_prepare_refuses_bad_output(tmp_path):
    cfg = load_config(config_file(tmp_path))
    (tmp_path / "afile").write_text("x")
    with pytest.raises(UserError, match="not a directory") as info:
        prepare_run(cfg, tmp_path / "afile")
    assert info.value.where == "--out"
    run = tmp_path / "run"
    (run / "tasks").mkdir(parents=True)
    foreign = task_path(run, cfg.tasks()[0].task_id)
    foreign.write_text("my notes")
    with pytest.raises(UserError, match="not an HDF5 file"):
        prepare_run(cfg)
    assert foreign.read_text() == "my notes" and not (run / "index.json").exists()


def test_other_bin_length_is_refused_unless_forced(tmp_path):
    first = load_config(config_file(tmp_path, sizes=[4, 6]))
    plan = prepare_run(first)
    run_serial(plan)
    kept = task_path(plan.run_dir, "L4_J1_beta1.5_c0").read_bytes()
    index_before = (plan.run_dir / "index.json").read_bytes()
    # 4000 steps in 20 bins: 200 steps per bin instead of 100
    second = load_config(config_file(tmp_path, sizes=[4, 6], measure=4000, name="other.toml"))
    with pytest.raises(UserError, match="cannot change its bin length") as info:
        prepare_run(second, plan.run_dir)
    assert info.value.where == str(plan.run_dir)
    assert "bins = 40 with measure_steps = 4000" in info.value.message and "--force" in info.value.message
    assert (plan.run_dir / "index.json").read_bytes() == index_before
    # forced: the task files of the old bin length renamed aside, nothing deleted; the index is kept
    plan2 = prepare_run(second, plan.run_dir, force=True)
    names = sorted(p.name for p in plan.run_dir.rglob("*"))
    assert not any(n.startswith("index.json.") for n in names)
    assert sum(n.startswith("L4_J1_beta1.5_c0.h5.") for n in names) == 1
    assert [t.task_id for t in plan2.tasks] == ["L6_J1_beta1.5_c0", "L4_J1_beta1.5_c0"]
    assert {why for _, _, why in plan2.set_aside} == {"bin length"}
    old = next(p for p in (plan.run_dir / "tasks").iterdir() if p.name.startswith("L4_J1_beta1.5_c0.h5."))
    assert old.read_bytes() == kept
    # a task whose chain is unchanged keeps its file
    third = load_config(config_file(tmp_path, sizes=[4, 6, 8], measure=4000, name="third.toml"))
    run_serial(prepare_run(second, plan.run_dir))
    kept6 = task_path(plan.run_dir, "L6_J1_beta1.5_c0").read_bytes()
    plan3 = prepare_run(third, plan.run_dir)
    assert [t.task_id for t in plan3.tasks] == ["L8_J1_beta1.5_c0"]
    assert task_path(plan.run_dir, "L6_J1_beta1.5_c0").read_bytes() == kept6


def test_task_fingerprint(tmp_path):
    a = load_config(config_file(tmp_path, sizes=[4, 6])).tasks()
    b = load_config(config_file(tmp_path, sizes=[6, 4], name="b.toml")).tasks()
    c = load_config(config_file(tmp_path, sizes=[4], J=0.5, name="c.toml")).tasks()
    assert task_fingerprint(a[0]) == task_fingerprint(b[1])  # independent of scan order
    assert task_fingerprint(a[0]) != task_fingerprint(a[1])
    assert task_fingerprint(a[0]) != task_fingerprint(c[0])


def test_foreign_task_file_in_run_is_reported_by_run_task(tmp_path):
    cfg = load_config(config_file(tmp_path))
    task = cfg.tasks()[0]
    path = task_path(tmp_path / "run", task.task_id)
    path.parent.mkdir(parents=True)
    path.write_text("not ours")
    out = run_task(task, tmp_path / "run")
    assert out.status == "failed" and "not an HDF5 file" in out.message
    assert path.read_text() == "not ours"


@pytest.mark.parametrize("other, says", [
    (dict(seed=12), "different model, lattice, beta, seed or exchange ladder"),
    (dict(measure=4000), "cannot change its bin length")])
def test_mismatched_task_file_is_not_resumed(tmp_path, other, says):
    cfg = load_config(config_file(tmp_path))
    written = load_config(config_file(tmp_path, name="o.toml", **other))
    run_task(written.tasks()[0], tmp_path / "run")
    before = task_path(tmp_path / "run", cfg.tasks()[0].task_id).read_bytes()
    out = run_task(cfg.tasks()[0], tmp_path / "run")
    assert out.status == "failed" and says in out.message
    assert task_path(tmp_path / "run", cfg.tasks()[0].task_id).read_bytes() == before


# ------------------------------------------------------------------------------------------------ progress


class Clock:
    def __init__(self) -> None:
        self.t = 0.0

    def __call__(self) -> float:
        return self.t


def test_progress_eta_from_rates():
    clock = Clock()
    out = io.StringIO()
    p = Progress(out, clock=clock, tty=False, plain_interval=1e9)
    p.plan([("a", 2.0, 1000, 0), ("b", 1.0, 1000, 500)])  # work 2000 + 500
    p.task_started("a", 0, 1000, 10)
    clock.t = 2.0
    p.task_advanced(50, 0)  # the first chunk: its time (start-up) is not a rate
    assert p.task_eta() is None and p.run_eta() is None
    clock.t = 10.0
    p.task_advanced(250, 2)
    assert p.task_eta() == pytest.approx(30.0)  # 750 steps left at 200 steps / 8 s
    assert p.run_eta() == pytest.approx(40.0)  # 2000 of work left at 400 / 8 s
    p.task_finished("done")
    text = out.getvalue().splitlines()
    assert text[0].startswith("start [0/2 done] a") and text[1].startswith("done [1/2 done] a")
    assert "bins 2/10" in text[1] and "ETA 0:00:30" in text[1] and "all  20% ETA 0:00:40" in text[1]


def test_progress_of_a_short_run_has_no_long_estimates():
    """A 15 s run whose first chunk of 16 steps takes 3 s (compiled kernels loaded, files written) and whose
    later chunks run 1000 steps in 0.3 s: never an estimate of more than a few times the true time."""
    clock = Clock()
    p = Progress(io.StringIO(), clock=clock, tty=False, plain_interval=1e9)
    total = 40016
    p.plan([("a", 1.0, total, 0)])
    p.task_started("a", 0, total, 100)
    clock.t, steps = 3.0, 16
    p.task_advanced(steps, 0)
    etas = []
    while steps < total:
        clock.t += 0.3
        steps += 1000
        p.task_advanced(steps, steps // 400)
        true_left = (total - steps) / 1000 * 0.3
        etas.append((p.task_eta(), p.run_eta(), true_left))
    assert all(e is not None and abs(e - left) <= 0.05 * left + 1e-9 for e, _, left in etas)
    assert all(r is not None and abs(r - left) <= 0.05 * left + 1e-9 for _, r, left in etas)


def test_progress_counts_tasks_done_on_any_rank():
    from qmc.run.outcome import TaskOutcome

    clock = Clock()
    out = io.StringIO()
    p = Progress(out, clock=clock, tty=False, plain_interval=1e9)
    p.plan([("a", 1.0, 100, 0), ("b", 1.0, 100, 0), ("c", 1.0, 100, 40)])
    p.task_started("a", 0, 100, 4)
    p.outcome(TaskOutcome("b", "done", bins_done=4, bins_total=4, steps_done=100, steps_total=100), rank=1)
    assert "done b on rank 1 (4/4 bins, 0.0 s) [1/3 done]" in out.getvalue()
    assert p.work_done == pytest.approx(100.0)
    p.task_advanced(100, 4)
    p.task_finished("done")
    p.outcome(TaskOutcome("a", "done", steps_done=100), rank=0)  # rank 0's own task: counted once
    p.outcome(TaskOutcome("c", "stopped", steps_done=70), rank=2)
    assert p.count() == "[2/3 done]" and p.work_done == pytest.approx(230.0)
    assert out.getvalue().count("\n") == 4  # start a, b's line, done a, c's line


def test_progress_of_a_ladder_counts_its_work_once():
    """A ladder of three chains reports the steps of all its chains under its first task; the outcomes
    of its three tasks then count them as done without counting their work again."""
    from qmc.run.outcome import TaskOutcome

    p = Progress(io.StringIO(), clock=Clock(), tty=False, plain_interval=1e9)
    p.plan([(f"x{i}", 2.0, 100, 0) for i in range(3)])
    p.task_started("x0", 0, 300, 10)
    p.task_advanced(300, 10)
    p.task_finished("done")
    for i in range(3):
        p.outcome(TaskOutcome(f"x{i}", "done", steps_done=100))
    assert p.work_done == pytest.approx(p.work_total) == pytest.approx(600.0)
    assert p.count() == "[3/3 done]"


def test_progress_terminal_redraws_in_place():
    clock = Clock()
    out = io.StringIO()
    p = Progress(out, clock=clock, tty=True, min_interval=0.5)
    p.plan([("a", 1.0, 100, 0)])
    p.task_started("a", 0, 100, 4)
    for k in range(1, 11):
        clock.t = 0.1 * k
        p.task_advanced(10 * k, k // 3)
    p.task_finished("done")
    text = out.getvalue()
    assert text.count("\r") == 4 and text.endswith("\n")  # start, two throttled redraws, end
    assert "|####################|" in text and "done [1/1 done] a" in text


def test_format_duration():
    assert format_duration(3725) == "1:02:05"
    assert format_duration(90061) == "1d 01:01:01"
    assert format_duration(None) == format_duration(float("nan")) == "--:--:--"


def _hdf5_writers() -> list[str]:
    """Every place in the installed qmc package that opens an HDF5 file in a mode other than "r"."""
    import ast

    import qmc

    root = Path(qmc.__file__).parent
    found = []
    for path in sorted(root.rglob("*.py")):
        for node in ast.walk(ast.parse(path.read_text(), str(path))):
            if not (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute)
                    and node.func.attr == "File" and getattr(node.func.value, "id", "") == "h5py"):
                continue
            mode = node.args[1] if len(node.args) > 1 else next(
                (k.value for k in node.keywords if k.arg == "mode"), None)
            if not (isinstance(mode, ast.Constant) and mode.value == "r"):
                found.append(f"{path.relative_to(root)}:{node.lineno}")
    return found


def test_write_task_is_the_only_writer_of_task_files(tmp_path):
    """Only write_task opens HDF5 files for writing, and a normal run leaves no temporary file behind."""
    writers = _hdf5_writers()
    assert len(writers) == 1 and writers[0].startswith("storage/task_file.py:"), writers
    line = int(writers[0].split(":")[1])
    source = inspect.getsource(write_task)
    first = inspect.getsourcelines(write_task)[1]
    assert first <= line < first + len(source.splitlines()), "the writer is not write_task"
    cfg = load_config(config_file(tmp_path))
    run_task(cfg.tasks()[0], tmp_path / "run")
    tasks = tmp_path / "run" / "tasks"
    assert list(tasks.glob("*.h5")) and not list(tasks.glob("*.tmp"))
