"""The state of a run directory at a glance (``qmc status``): :func:`run_status`.

Read are the run index and every task file's header (root attributes, checkpoint counters, sessions; never
the bins), so it is cheap also for a run in progress.  Per task: its state (``pending``, ``queued`` on a
busy MPI rank, ``running`` -- with the counters its process keeps current in the index --, ``stopped``,
``done``, ``failed``), steps and bins done of those asked for, the time of its last checkpoint,
a failure's message, and the seconds per Monte Carlo step measured in its sessions (wall time of each
session over the steps it made).

Remaining time: each unfinished task needs (steps left) x (its seconds per step); a task without a
measurement of its own is estimated from the measured tasks by the cost model of an SSE step,
seconds per step ~ c x N x beta (:func:`~qmc.run.task_identity.task_weight`), c the median of the measured
tasks' ratio (common practice, no source).  The sum is the time on one process; an MPI run with K ranks
takes about a K-th of it when it has at least K units of work.
"""

from __future__ import annotations

import statistics
import time
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any

from qmc.config.parser import load_config
from qmc.errors import UserError
from qmc.run.task_identity import task_weight
from qmc.storage.run_index import load_index
from qmc.storage.task_file import task_header

__all__ = ["TaskState", "RunStatus", "run_status", "STALE_SECONDS"]

STALE_SECONDS = 120.0
"""A task marked running whose file was not rewritten for this long beyond its checkpoint interval is
reported as probably no longer running (its process was killed)."""


@dataclass
class TaskState:
    """One task of the run as :func:`run_status` sees it (``seconds_per_step`` None when unmeasured;
    ``checkpoint_time`` seconds since the epoch, None without a file)."""

    task_id: str
    state: str
    steps_done: int
    steps_total: int
    bins_done: int
    bins_total: int
    checkpoint_time: float | None = None
    message: str = ""
    seconds_per_step: float | None = None
    seconds_left: float | None = None
    in_config: bool = True
    stale: bool = False


@dataclass
class RunStatus:
    """The whole run: ``tasks`` in index order, the configuration's ``name`` and ``source``, the
    ``seconds_left`` on one process (None when no task has been measured yet), and the time of the
    index's last update."""

    run_dir: Path
    name: str
    source: str
    updated: str
    tasks: list[TaskState] = field(default_factory=list)
    seconds_left: float | None = None
    unestimated: int = 0

    def count(self, state: str) -> int:
        return sum(t.state == state for t in self.tasks if t.in_config)


def _iso_seconds(text: str) -> float | None:
    try:
        return datetime.strptime(text, "%Y-%m-%dT%H:%M:%S%z").timestamp()
    except (TypeError, ValueError):
        return None


def _seconds_per_step(sessions: list[dict[str, Any]]) -> float | None:
    """Wall time per step over all sessions that made steps (a session's ``seconds``, or the difference
    of its start and stop times in files that do not record them)."""
    seconds, steps = 0.0, 0
    for s in sessions:
        n = int(s.get("steps_stop", 0)) - int(s.get("steps_start", 0))
        t = s.get("seconds")
        if t is None:
            t0, t1 = _iso_seconds(s.get("start", "")), _iso_seconds(s.get("stop", ""))
            t = t1 - t0 if t0 is not None and t1 is not None else None
        if t is not None and n > 0 and t >= 0:
            seconds += float(t)
            steps += n
    return seconds / steps if steps > 0 and seconds > 0 else None


def _weights(run_dir: Path) -> tuple[dict[str, float], float | None]:
    """Cost weight of every task of the run's config.toml, and its checkpoint interval (empty, None when
    it cannot be read)."""
    try:
        cfg = load_config(run_dir / "config.toml")
        return {t.task_id: task_weight(t) for t in cfg.tasks()}, float(cfg.sampling.checkpoint_seconds)
    except UserError:
        return {}, None


def run_status(run_dir: str | Path, *, now: float | None = None) -> RunStatus:
    """Read the state of every task of ``run_dir`` (see the module docstring); UserError when it is not a
    run directory or a file is damaged."""
    run_dir = Path(run_dir)
    if not run_dir.is_dir():
        raise UserError("no such run directory", str(run_dir))
    index = load_index(run_dir)
    if index is None:
        raise UserError("not a run directory (no index.json): start a run with 'qmc run CONFIG'",
                        str(run_dir))
    now = time.time() if now is None else now
    weights, interval = _weights(run_dir)
    out = RunStatus(run_dir, str(index.get("name", "")), str(index.get("config_source", "")),
                    str(index.get("updated", "")))
    for tid, entry in index["tasks"].items():
        path = run_dir / entry.get("file", f"tasks/{tid}.h5")
        st = TaskState(tid, str(entry.get("status", "pending")), int(entry.get("steps_done", 0)),
                       int(entry.get("steps_total", 0)), int(entry.get("bins_done", 0)),
                       int(entry.get("bins_total", 0)), message=str(entry.get("message", "")),
                       in_config="note" not in entry)
        if path.exists():
            head = task_header(path)
            st.steps_done = int(head.get("checkpoint_steps_done", st.steps_done))
            st.bins_done = int(head.get("checkpoint_bins_done", st.bins_done))
            st.checkpoint_time = float(head["checkpoint_time"]) if "checkpoint_time" in head else None
            st.seconds_per_step = _seconds_per_step(head.get("sessions", []))
            status = head.get("status")
            if status == "done":  # a finished file continues when the configuration asks for more steps
                st.state = "done" if st.steps_done >= st.steps_total else "stopped"
            elif status in ("running", "stopped", "failed"):
                st.state = status
            if st.state == "failed":
                st.message = st.message or str(head.get("message", ""))
            if st.state == "running" and st.checkpoint_time is not None:
                st.stale = now - st.checkpoint_time > (interval or 300.0) + STALE_SECONDS
        if entry.get("status") in ("queued", "running") and st.state not in ("done", "failed"):
            # what the running process says: queued on a busy MPI rank, or the counters between checkpoints
            st.state = str(entry["status"])
            st.steps_done = max(st.steps_done, int(entry.get("steps_done", 0)))
            st.bins_done = max(st.bins_done, int(entry.get("bins_done", 0)))
        out.tasks.append(st)
    _estimate(out, weights)
    return out


def _estimate(out: RunStatus, weights: dict[str, float]) -> None:
    """Fill in the seconds left of every unfinished task of the configuration and of the run."""
    ratios = [t.seconds_per_step / weights[t.task_id] for t in out.tasks
              if t.seconds_per_step is not None and weights.get(t.task_id, 0) > 0]
    per_weight = statistics.median(ratios) if ratios else None
    total, known = 0.0, False
    for t in out.tasks:
        left = max(0, t.steps_total - t.steps_done)
        if not t.in_config or t.state == "done" or left == 0:
            continue
        rate = t.seconds_per_step
        if rate is None and per_weight is not None and t.task_id in weights:
            rate = per_weight * weights[t.task_id]
        if rate is None:
            out.unestimated += 1
            continue
        t.seconds_left = left * rate
        total += t.seconds_left
        known = True
    out.seconds_left = total if known else None
