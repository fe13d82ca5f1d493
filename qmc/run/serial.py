"""Running tasks: :func:`run_task` (one task, any process) and the serial driver behind ``qmc run``.

:func:`run_task` is the unit of work.  It builds the task's model, resumes from the task file's checkpoint
if there is one (keeping its first ``bins_done`` bins), advances the Simulation in chunks of about
``CHUNK_SECONDS`` wall-clock seconds (the step time is measured as it goes; chunking never changes results),
and rewrites the task file atomically (:func:`qmc.storage.task_file.write_task`):

* when a bin has completed or ``checkpoint_seconds`` have passed, but at most once per
  ``MIN_WRITE_INTERVAL`` seconds;
* at the end: status ``done``, or ``stopped`` when the stop flag was set (signal) or the deadline came.

It never touches the run index, so an MPI task farm may call it for different tasks on different ranks
and let one rank update the index from the returned :class:`TaskOutcome`.  Any exception inside the task is
caught and returned as status ``failed`` with its message (the traceback goes to the logger); the last
checkpoint stays valid.

:func:`prepare_run` (in :mod:`qmc.run.plan`, re-exported here) checks a configuration against a run
directory and lists the unfinished tasks, largest lattices first.  :func:`run_serial` runs them one after
the other (a replica-exchange ladder as one unit, see :mod:`qmc.exchange.tasks`) and keeps
``index.json`` up to date; :mod:`qmc.mpi.farm` does the same over MPI ranks.
"""

from __future__ import annotations

import logging
import os
import time
import traceback
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Protocol

import numpy as np

from qmc.chain.simulation import Simulation
from qmc.config.parser import Task, build_model, config_fingerprint
from qmc.engine.rng import stream_seed
from qmc.errors import UserError
from qmc.run.pacing import CHUNK_SECONDS, MIN_WRITE_INTERVAL, next_chunk, write_due
from qmc.run.plan import RunPlan, prepare_run
from qmc.run.progress import NullProgress, ProgressSink
from qmc.run.task_identity import steps_total, task_fingerprint, task_weight
from qmc.storage.provenance import now_iso, session_entry, task_provenance
from qmc.storage.run_index import write_index
from qmc.storage.task_file import TaskRecord, read_task, task_path, write_task

__all__ = [
    "CHUNK_SECONDS", "MIN_WRITE_INTERVAL", "StopFlag", "TaskOutcome", "RunPlan", "RunReport",
    "task_fingerprint", "task_weight", "run_task", "prepare_run", "run_serial", "update_index",
]



class _Flag(Protocol):
    def is_set(self) -> bool: ...


class StopFlag:
    """Set by a signal handler (or anyone) to ask the running task to checkpoint and stop."""

    def __init__(self) -> None:
        self.reason = ""
        self.signal: int | None = None

    def set(self, reason: str = "stop requested", signal: int | None = None) -> None:
        if not self.reason:
            self.reason, self.signal = reason, signal

    def is_set(self) -> bool:
        return bool(self.reason)


@dataclass
class TaskOutcome:
    """Result of :func:`run_task`.  ``status`` is ``done``, ``stopped`` or ``failed``; ``seconds`` is the
    wall time of this call; counters are those of the last written checkpoint."""

    task_id: str
    status: str
    message: str = ""
    bins_done: int = 0
    bins_total: int = 0
    steps_done: int = 0
    steps_total: int = 0
    seconds: float = 0.0
    path: str = ""


# ----------------------------------------------------------------------------------------------------------
# one task


def run_task(
    task: Task,
    run_dir: str | os.PathLike,
    *,
    stop_flag: _Flag | None = None,
    progress: ProgressSink | None = None,
    logger: logging.Logger | None = None,
    deadline: float | None = None,
    config_text: str | None = None,
    config_fingerprint: str = "",
    checkpoint_seconds: float | None = None,
) -> TaskOutcome:
    """Run (or resume) one task until it is done, ``stop_flag.is_set()``, or ``time.time() >= deadline``.

    The task file is ``RUN_DIR/tasks/<task_id>.h5`` (the ``tasks`` folder is created if needed).
    ``config_text`` is stored in the file; by default it is read from ``RUN_DIR/config.toml`` (or the task's
    source file).  ``checkpoint_seconds`` defaults to ``task.sampling.checkpoint_seconds``.  Never raises
    for a problem of the task itself: that is returned as status ``failed``.
    """
    t_call = time.time()
    log = logger if logger is not None else logging.getLogger("qmc.run")
    sink = progress if progress is not None else NullProgress()
    run = _TaskRun(task, Path(run_dir), stop_flag, sink, log, deadline, config_text, config_fingerprint,
                   checkpoint_seconds)
    try:
        status = run.execute()
        message = run.stop_reason if status == "stopped" else ""
    except Exception as exc:  # recorded, not hidden: message in the outcome, traceback in the log
        message = str(exc) if isinstance(exc, UserError) else f"{type(exc).__name__}: {exc}"
        log.error("task %s failed: %s\n%s", task.task_id, message, traceback.format_exc().rstrip())
        run.record_failure(message)
        status = "failed"
    sink.task_finished(status)
    return TaskOutcome(task.task_id, status, message, run.bins_done, task.sampling.bins, run.steps_done,
                       steps_total(task), time.time() - t_call, str(run.path))


class _TaskRun:
    """State of one execution of :func:`run_task`."""

    def __init__(self, task: Task, run_dir: Path, stop_flag: _Flag | None, sink: ProgressSink,
                 log: logging.Logger, deadline: float | None, config_text: str | None, config_fp: str,
                 checkpoint_seconds: float | None) -> None:
        self.task, self.run_dir, self.stop_flag, self.sink, self.log = task, run_dir, stop_flag, sink, log
        self.deadline = deadline
        self.config_text, self.config_fp = config_text, config_fp
        self.interval = float(checkpoint_seconds or task.sampling.checkpoint_seconds)
        self.path = task_path(run_dir, task.task_id)
        self.sim: Simulation | None = None
        self.rows: list[np.ndarray] = []
        self.sessions: list[dict[str, Any]] = []
        self.last_record: TaskRecord | None = None
        self.bins_done = 0
        self.steps_done = 0
        self.stop_reason = ""

    # -------------------------------------------------------------------------------------------- setup
    def _config(self) -> tuple[str, str]:
        if self.config_text is not None:
            return self.config_text, os.path.abspath(self.task.source)
        for p in (self.run_dir / "config.toml", Path(self.task.source)):
            try:
                return p.read_text(encoding="utf-8"), str(p)
            except (OSError, UnicodeDecodeError):
                continue
        return "", self.task.source

    def _start(self) -> bool:
        """Create or restore the Simulation; False if the task file says the task is already done."""
        task, s = self.task, self.task.sampling
        self.model = build_model(task)
        self.seed_words = stream_seed(task.seed, task.seed_key)
        self.fingerprint = task_fingerprint(task)
        kw = dict(warmup_steps=s.warmup_steps, measure_steps=s.measure_steps, bins=s.bins)
        if self.path.exists():
            data = read_task(self.path, with_checkpoint=True)
            if data.task_fingerprint != self.fingerprint:
                raise UserError("was written for a different model, beta, sampling or seed than this task; "
                                "move it away (or run with --force, which renames it aside)", str(self.path))
            self.bins_done, self.steps_done = data.bins_done, data.steps_done
            if data.status == "done":
                return False
            sim = Simulation.restore(self.model, task.beta, state=data.checkpoint, **kw)
            if sim.bins_done != data.bins_done or tuple(data.bin_names) != sim.bin_names:
                raise UserError(f"damaged task file: checkpoint at {sim.steps_done} steps does not match its "
                                f"{data.bins_done} stored bins", str(self.path))
            table = np.column_stack([data.bins[n] for n in sim.bin_names]).reshape(-1, len(sim.bin_names))
            self.rows = [np.array(r) for r in table]
            self.sessions = list(data.provenance.get("sessions", []))
            self.log.info("task %s: resuming at step %d of %d (%d of %d bins)", task.task_id, sim.steps_done,
                          sim.total_steps, sim.bins_done, s.bins)
        else:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            sim = Simulation(self.model, task.beta, seed_words=self.seed_words, **kw)
            self.log.info("task %s: starting (%d sites, beta %g, %d steps)", task.task_id, self.model.n_sites,
                          task.beta, sim.total_steps)
        self.sim = sim
        self.session = session_entry(now_iso(), sim.steps_done)
        self.sessions.append(self.session)
        return True

    # -------------------------------------------------------------------------------------------- writing
    def _record(self, status: str, message: str = "") -> TaskRecord:
        sim, task = self.sim, self.task
        assert sim is not None and len(self.rows) == sim.bins_done
        t = time.time()
        self.session.update(stop=now_iso(t), steps_stop=sim.steps_done, ended=status)
        text, source = self._config()
        params = dict(task.params)
        for k, v in (("lattice", task.lattice_kind), ("size", list(task.size)), ("boundary", task.boundary)):
            params.setdefault(k, v)
        ncol = len(sim.bin_names)
        return TaskRecord(
            task_id=task.task_id, status=status, message=message, task_fingerprint=self.fingerprint,
            config_text=text, config_path=source, config_fingerprint=self.config_fp, params=params,
            model=self.model.to_arrays(),
            provenance=task_provenance(task.seed, task.seed_key, self.seed_words),
            sessions=[dict(x) for x in self.sessions], bin_names=sim.bin_names,
            bins=np.array(self.rows, dtype=np.float64).reshape(len(self.rows), ncol),
            bins_attrs={"steps_per_bin": sim.steps_per_bin, "n_sites": self.model.n_sites,
                        "linear_size": self.model.linear_size, "beta": float(task.beta),
                        "bins_total": task.sampling.bins, "warmup_steps": sim.warmup_steps,
                        "measure_steps": sim.measure_steps},
            vbs_histogram=np.array(sim.vbs_histogram), vbs_hist_range=sim.vbs_hist_range,
            checkpoint=sim.state(),
            checkpoint_attrs={"steps_done": sim.steps_done, "bins_done": sim.bins_done,
                              "steps_total": sim.total_steps, "time": t, "time_iso": now_iso(t)},
            exchange=None,
        )

    def _write(self, status: str) -> None:
        t0 = time.perf_counter()
        rec = self._record(status)
        write_task(self.path, rec)
        self.last_record = rec
        self.bins_done, self.steps_done = self.sim.bins_done, self.sim.steps_done
        self.write_seconds = time.perf_counter() - t0
        self.last_write = time.monotonic()
        self.pending = False

    def record_failure(self, message: str) -> None:
        """Rewrite the last good checkpoint with status ``failed`` (if one was written in this call)."""
        rec = self.last_record
        if rec is None:
            return
        rec.status, rec.message = "failed", message
        if rec.sessions:
            rec.sessions[-1]["ended"] = "failed"
        try:
            write_task(self.path, rec)
        except Exception as exc:  # the previous file stays; the failure is in the log and the outcome
            self.log.error("task %s: could not record the failure in %s: %s", self.task.task_id, self.path,
                           exc)

    # -------------------------------------------------------------------------------------------- running
    def _should_stop(self) -> bool:
        flag = self.stop_flag
        if flag is not None and flag.is_set():
            self.stop_reason = getattr(flag, "reason", "") or "stop requested"
            return True
        if self.deadline is not None and time.time() + self.write_seconds + 0.05 >= self.deadline:
            self.stop_reason = "time budget used up"
            return True
        return False

    def execute(self) -> str:
        task = self.task
        self.write_seconds = 0.0
        if not self._start():
            self.sink.task_started(task.task_id, self.steps_done, steps_total(task), task.sampling.bins)
            self.log.info("task %s: already done", task.task_id)
            return "done"
        sim = self.sim
        self.sink.task_started(task.task_id, sim.steps_done, sim.total_steps, task.sampling.bins)
        if not self.path.exists():
            self._write("running")
        self.last_write = time.monotonic()
        self.pending = False
        chunk, step_time = 16, 0.0
        while not sim.done:
            if self._should_stop():
                break
            n = chunk
            if self.deadline is not None and step_time > 0:
                left = self.deadline - time.time() - self.write_seconds - 0.05
                n = max(1, min(n, int(left / step_time)))
            before = sim.steps_done
            t0 = time.perf_counter()
            new = sim.advance(n)
            dt = time.perf_counter() - t0
            done = sim.steps_done - before
            self.rows.extend(np.array(r) for r in new)
            self.pending = self.pending or len(new) > 0
            if done > 0:
                step_time = dt / done
            chunk = next_chunk(chunk, dt, done)
            self.sink.task_advanced(sim.steps_done, sim.bins_done)
            if write_due(time.monotonic() - self.last_write, self.pending, self.interval, sim.done):
                self._write("running")
        status = "done" if sim.done else "stopped"
        self._write(status)
        if status == "done":
            self.log.info("task %s: done (%d bins)", task.task_id, sim.bins_done)
        else:
            self.log.info("task %s: stopped at step %d of %d (%s); checkpoint written", task.task_id,
                          sim.steps_done, sim.total_steps, self.stop_reason)
        return status


# ----------------------------------------------------------------------------------------------------------
# a whole run


@dataclass
class RunReport:
    """Outcomes of :func:`run_serial`; ``unfinished`` lists the selected tasks that are not done."""

    outcomes: list[TaskOutcome]
    unfinished: list[str]
    stop_reason: str = ""

    @property
    def failed(self) -> list[TaskOutcome]:
        return [o for o in self.outcomes if o.status == "failed"]


def update_index(index: dict[str, Any], outcome: TaskOutcome) -> None:
    """Copy an outcome into its index entry (the caller writes the index)."""
    entry = index["tasks"][outcome.task_id]
    entry.update(status=outcome.status, message=outcome.message, bins_done=outcome.bins_done,
                 steps_done=outcome.steps_done, updated=now_iso(),
                 seconds=round(float(entry.get("seconds", 0.0)) + outcome.seconds, 3))


def run_serial(plan: RunPlan, *, stop_flag: _Flag | None = None, progress: ProgressSink | None = None,
               logger: logging.Logger | None = None, deadline: float | None = None) -> RunReport:
    """Run the plan's work in this process, one unit after the other, updating ``index.json`` after each.

    A unit is a single task (:func:`run_task`) or a whole replica-exchange ladder
    (:func:`qmc.exchange.tasks.run_group`), as split by :func:`qmc.exchange.tasks.work_units`.
    """
    from qmc.exchange.tasks import run_unit, work_units

    log = logger if logger is not None else logging.getLogger("qmc.run")
    outcomes: list[TaskOutcome] = []
    reason = ""
    fp = config_fingerprint(plan.config)
    for unit in work_units(plan.tasks, plan.config.tasks()):
        if stop_flag is not None and stop_flag.is_set():
            reason = getattr(stop_flag, "reason", "") or "stop requested"
            break
        if deadline is not None and time.time() >= deadline:
            reason = "time budget used up"
            break
        for task in unit:
            plan.index["tasks"][task.task_id].update(status="running", updated=now_iso())
        write_index(plan.run_dir, plan.index)
        results = run_unit(unit, plan.run_dir, stop_flag=stop_flag, progress=progress, logger=log,
                           deadline=deadline, config_text=plan.config.text, config_fingerprint=fp)
        for outcome in results:
            outcomes.append(outcome)
            update_index(plan.index, outcome)
        write_index(plan.run_dir, plan.index)
        stopped = [o for o in results if o.status == "stopped"]
        if stopped:
            reason = stopped[0].message
            break
    selected = [t.task_id for t in plan.tasks] + plan.done
    unfinished = [tid for tid in selected if plan.index["tasks"][tid]["status"] != "done"]
    return RunReport(outcomes, unfinished, reason)
