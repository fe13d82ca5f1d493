"""What running a task gives back, how a run is asked to stop, and how outcomes enter the run index.

:class:`TaskOutcome` is the result of running one task for a while (any process); :class:`RunReport` that
of a whole run.  Only the process that keeps the run index (the serial runner, or rank 0 of an MPI farm)
calls :func:`mark_running` and :func:`record_outcome`.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any, Protocol

from qmc.config.parser import Task
from qmc.errors import UserError
from qmc.storage.provenance import now_iso

__all__ = ["StopSignal", "StopFlag", "TaskOutcome", "RunReport", "failure_message", "mark_running",
           "record_outcome"]


class StopSignal(Protocol):
    """Anything that says whether the run should checkpoint and stop (``reason`` is optional)."""

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
    """Result of running one task (:func:`qmc.run.single.run_task`, :func:`qmc.run.ladder_run.run_group`).

    ``status`` is ``done``, ``stopped`` or ``failed``; ``seconds`` is the wall time of this call (a ladder's
    is shared evenly among its tasks); counters are those of the last written checkpoint."""

    task_id: str
    status: str
    message: str = ""
    bins_done: int = 0
    bins_total: int = 0
    steps_done: int = 0
    steps_total: int = 0
    seconds: float = 0.0
    path: str = ""


@dataclass
class RunReport:
    """Outcomes of a whole run; ``unfinished`` lists the selected tasks that are not done."""

    outcomes: list[TaskOutcome]
    unfinished: list[str]
    stop_reason: str = ""

    @property
    def failed(self) -> list[TaskOutcome]:
        return [o for o in self.outcomes if o.status == "failed"]


def failure_message(exc: BaseException) -> str:
    """The one-line message recorded for a task that raised ``exc``: a UserError's own message, else the
    exception's type and text (the traceback goes to the log)."""
    return str(exc) if isinstance(exc, UserError) else f"{type(exc).__name__}: {exc}"


def mark_running(index: dict[str, Any], tasks: Iterable[Task]) -> dict[str, dict[str, Any]]:
    """Mark ``tasks`` as running in the index (the caller writes it); returns their previous ``status`` and
    ``updated`` entries, to put back if the tasks do not start after all."""
    previous = {}
    for t in tasks:
        entry = index["tasks"][t.task_id]
        previous[t.task_id] = {k: entry.get(k) for k in ("status", "updated")}
        entry.update(status="running", updated=now_iso())
    return previous


def record_outcome(index: dict[str, Any], outcome: TaskOutcome) -> None:
    """Copy an outcome into its index entry (the caller writes the index)."""
    entry = index["tasks"][outcome.task_id]
    entry.update(status=outcome.status, message=outcome.message, bins_done=outcome.bins_done,
                 steps_done=outcome.steps_done, updated=now_iso(),
                 seconds=round(float(entry.get("seconds", 0.0)) + outcome.seconds, 3))
