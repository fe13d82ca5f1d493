"""The file side of one running task: its task file, its completed bins, its sessions, its last record.

A :class:`TaskBook` is kept for every task a process runs -- one for a single task, one per local chain of
an exchange ladder -- and is the only place where a running task's file is read, checked, filled and
written (:func:`qmc.storage.task_file.write_task`).  What a ladder adds to a record (the ladder state in
the checkpoint, the ``/exchange`` group) is passed in by the ladder's run (:mod:`qmc.run.ladder_run`).
"""

from __future__ import annotations

import logging
import os
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from qmc.chain.simulation import Simulation
from qmc.config.parser import Task
from qmc.engine.rng import stream_seed
from qmc.errors import UserError
from qmc.models.compiled import CompiledModel
from qmc.run.outcome import TaskOutcome
from qmc.run.task_identity import LENGTH, SAME, mismatch_text, steps_total, stored_relation, task_fingerprint
from qmc.storage.faults import write_fault
from qmc.storage.provenance import now_iso, session_entry, task_provenance
from qmc.storage.task_file import TaskData, TaskRecord, read_task, task_path, write_task

__all__ = ["ConfigSource", "config_source", "TaskBook"]


@dataclass(frozen=True)
class ConfigSource:
    """The configuration a task file records: its full ``text``, the ``path`` it came from, the run's
    configuration ``fingerprint``."""

    text: str
    path: str
    fingerprint: str


def config_source(run_dir: Path, task: Task, text: str | None, fingerprint: str) -> ConfigSource:
    """``text`` if given (with the task's source path), else the run's ``config.toml``, else the task's
    source file, else empty."""
    if text is not None:
        return ConfigSource(text, os.path.abspath(task.source), fingerprint)
    for p in (run_dir / "config.toml", Path(task.source)):
        try:
            return ConfigSource(p.read_text(encoding="utf-8"), str(p), fingerprint)
        except (OSError, UnicodeDecodeError):
            continue
    return ConfigSource("", task.source, fingerprint)


class TaskBook:
    """Bookkeeping of one task's file: ``rows`` (completed bins), ``sessions``, the ``last`` record written
    in this process, and the counters of the file as last read or written."""

    def __init__(self, task: Task, run_dir: Path) -> None:
        self.task = task
        self.path = task_path(run_dir, task.task_id)
        self.fingerprint = task_fingerprint(task)
        self.seed_words = stream_seed(task.seed, task.seed_key)
        self.rows: list[np.ndarray] = []
        self.sessions: list[dict[str, Any]] = []
        self.session: dict[str, Any] = {}
        self.session_start = time.time()
        self.last: TaskRecord | None = None
        self.bins_done = 0
        self.steps_done = 0

    # -------------------------------------------------------------------------------------------- reading
    def read(self) -> TaskData | None:
        """The task file with its checkpoint, None if there is none; UserError if it was written for another
        chain (model, beta, seed, warm-up or bin length; a file of the same chain with another number of
        bins is continued or already done, :func:`~qmc.run.task_identity.stored_relation`)."""
        if not self.path.exists():
            return None
        data = read_task(self.path, with_checkpoint=True)
        stored = (data.task_fingerprint, data.steps_per_bin, data.bins_total, data.steps_total)
        relation = stored_relation(self.task, *stored)
        if relation not in (SAME, LENGTH):
            raise UserError(f"{mismatch_text(relation, self.task, *stored[1:])}; move it away (or run with "
                            "--force, which renames it aside)", str(self.path))
        self.bins_done, self.steps_done = data.bins_done, data.steps_done
        return data

    def keep_sessions(self, data: TaskData | None) -> None:
        """Continue the session list of the file ``data`` (none without a file)."""
        self.sessions = list(data.provenance.get("sessions", [])) if data is not None else []

    def resume(self, data: TaskData, sim: Simulation) -> None:
        """Take the file's first ``sim.bins_done`` bins (the chain was restored from its checkpoint) and its
        sessions; a file with fewer bins than its checkpoint, or other columns, is damaged."""
        nb = sim.bins_done
        if data.bins_done < nb or tuple(data.bin_names) != sim.bin_names:
            raise UserError(f"damaged task file: checkpoint at {sim.steps_done} steps does not match its "
                            f"{data.bins_done} stored bins", str(self.path))
        ncol = len(sim.bin_names)
        table = np.column_stack([data.bins[n][:nb] for n in sim.bin_names]).reshape(nb, ncol)
        self.rows = [np.array(r) for r in table]
        self.keep_sessions(data)

    def begin_session(self, steps: int) -> None:
        """Start the record of this process's session (from step ``steps``); its ``seconds`` are the wall
        time from here to the last write."""
        self.session = session_entry(now_iso(), steps)
        self.sessions.append(self.session)
        self.session_start = time.time()

    # -------------------------------------------------------------------------------------------- writing
    def record(self, sim: Simulation, model: CompiledModel, status: str, source: ConfigSource, t: float, *,
               checkpoint: dict[str, np.ndarray] | None = None,
               checkpoint_attrs: dict[str, Any] | None = None,
               exchange: dict[str, Any] | None = None, bins_attrs: dict[str, Any] | None = None,
               ground_state: dict[str, Any] | None = None) -> TaskRecord:
        """The file content now (time ``t``): the chain's bins and state, ``checkpoint`` arrays instead of
        ``sim.state()`` and extra ``checkpoint_attrs`` if given, an ``/exchange`` group if given, extra
        attributes of ``/bins`` (the precision target) and a ``/ground_state`` group if given."""
        task = self.task
        self.session.update(stop=now_iso(t), steps_stop=sim.steps_done, ended=status,
                            seconds=round(t - self.session_start, 3))
        params = dict(task.params)
        for k, v in (("lattice", task.lattice_kind), ("size", list(task.size)), ("boundary", task.boundary)):
            params.setdefault(k, v)
        ncol = len(sim.bin_names)
        return TaskRecord(
            task_id=task.task_id, status=status, message="", task_fingerprint=self.fingerprint,
            config_text=source.text, config_path=source.path, config_fingerprint=source.fingerprint,
            params=params, model=model.to_arrays(),
            provenance=task_provenance(task.seed, task.seed_key, self.seed_words),
            sessions=[dict(x) for x in self.sessions], bin_names=sim.bin_names,
            bins=np.array(self.rows, dtype=np.float64).reshape(len(self.rows), ncol),
            bins_attrs={"steps_per_bin": sim.steps_per_bin, "n_sites": model.n_sites,
                        "linear_size": model.linear_size, "beta": float(sim.beta),
                        "bins_total": task.sampling.bins, "warmup_steps": sim.warmup_steps,
                        "measure_steps": sim.measure_steps, **(bins_attrs or {})},
            vbs_histogram=np.array(sim.vbs_histogram), vbs_hist_range=sim.vbs_hist_range,
            checkpoint=checkpoint if checkpoint is not None else sim.state(),
            checkpoint_attrs={"steps_done": sim.steps_done, "bins_done": sim.bins_done,
                              "steps_total": sim.total_steps, "time": t, "time_iso": now_iso(t),
                              **(checkpoint_attrs or {})},
            exchange=exchange, ground_state=ground_state,
        )

    def write(self, record: TaskRecord) -> None:
        """Replace the task file by ``record`` (atomically); WriteFault when the machine refuses.

        The ``tasks`` folder (and the run directory) is created by the first write of this process only:
        a directory that vanishes during the run is a fault, not silently made anew."""
        if self.last is None:
            try:
                self.path.parent.mkdir(parents=True, exist_ok=True)
            except OSError as exc:
                raise write_fault(self.path, exc) from None
        write_task(self.path, record)
        self.last = record
        self.bins_done = int(record.checkpoint_attrs["bins_done"])
        self.steps_done = int(record.checkpoint_attrs["steps_done"])

    def record_failure(self, message: str, log: logging.Logger) -> None:
        """Rewrite the last record written in this process with status ``failed`` (nothing without one)."""
        rec = self.last
        if rec is None:
            return
        rec.status, rec.message = "failed", message
        if rec.sessions:
            rec.sessions[-1]["ended"] = "failed"
        try:
            write_task(self.path, rec)
        except Exception as exc:  # the previous file stays; the failure is in the log and the outcome
            log.error("task %s: could not record the failure in %s: %s", self.task.task_id, self.path, exc)

    def outcome(self, status: str, message: str, seconds: float, fault: bool = False) -> TaskOutcome:
        """The outcome of this task, with the counters of its file."""
        t = self.task
        return TaskOutcome(t.task_id, status, message, self.bins_done, t.sampling.bins, self.steps_done,
                           steps_total(t), seconds, str(self.path), fault)
