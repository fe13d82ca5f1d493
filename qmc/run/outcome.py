"""What running a task gives back, how a run is asked to stop, and how outcomes enter the run index.

:class:`TaskOutcome` is the result of running one task for a while (any process); :class:`RunReport` that
of a whole run.  Only the process that keeps the run index (the serial runner, or rank 0 of an MPI farm)
calls :func:`mark_running` and :func:`record_outcome`.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field
from typing import Any, Protocol

from qmc.config.parser import Task
from qmc.errors import UserError
from qmc.storage.provenance import now_iso

__all__ = ["StopSignal", "StopFlag", "TaskOutcome", "RunReport", "failure_message", "WHERE_KEYS",
           "mark_running", "unmark", "record_progress", "record_outcome"]


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
    is shared evenly among its tasks); counters are those of the last written checkpoint.  ``fault`` marks
    a task stopped because the machine refused a write (:class:`~qmc.storage.faults.WriteFault`, its text
    in ``message``): the whole run stops."""

    task_id: str
    status: str
    message: str = ""
    bins_done: int = 0
    bins_total: int = 0
    steps_done: int = 0
    steps_total: int = 0
    seconds: float = 0.0
    path: str = ""
    fault: bool = False


@dataclass
class RunReport:
    """Outcomes of a whole run; ``unfinished`` lists the selected tasks that are not done (and not being run
    by another process); ``fault`` is the message of a write fault that stopped the run ("" if none);
    ``elsewhere`` lists the unfinished tasks that other processes sharing the run directory are running."""

    outcomes: list[TaskOutcome]
    unfinished: list[str]
    stop_reason: str = ""
    fault: str = ""
    elsewhere: list[str] = field(default_factory=list)

    @property
    def failed(self) -> list[TaskOutcome]:
        return [o for o in self.outcomes if o.status == "failed"]


def failure_message(exc: BaseException) -> str:
    """The one-line message recorded for a task that raised ``exc``: a UserError's own message, else the
    exception's type and text (the traceback goes to the log)."""
    return str(exc) if isinstance(exc, UserError) else f"{type(exc).__name__}: {exc}"


WHERE_KEYS = ("rank", "process")
"""Index entry fields that say where a queued or running task is (see :mod:`qmc.storage.run_index`)."""


def mark_running(index: dict[str, Any], tasks: Iterable[Task], status: str = "running",
                 **where: Any) -> dict[str, dict[str, Any]]:
    """Mark ``tasks`` as ``running`` (or ``queued``) in the index, at ``where`` (``rank=``, ``process=``;
    the caller writes the index); returns their previous entries' ``status``, ``updated`` and place, to
    put back by :func:`unmark` if the tasks do not start after all."""
    previous = {}
    for t in tasks:
        entry = index["tasks"][t.task_id]
        previous[t.task_id] = {k: entry.get(k) for k in ("status", "updated", *WHERE_KEYS)}
        for k in WHERE_KEYS:
            entry.pop(k, None)
        entry.update(status=status, updated=now_iso(), **where)
    return previous


def unmark(index: dict[str, Any], previous: dict[str, dict[str, Any]]) -> None:
    """Put back the entries :func:`mark_running` changed."""
    for tid, before in previous.items():
        entry = index["tasks"][tid]
        for k in WHERE_KEYS:
            entry.pop(k, None)
        entry.update({k: v for k, v in before.items() if v is not None})


def record_progress(index: dict[str, Any], tasks: Iterable[Task], steps_done: int, bins_done: int) -> None:
    """A running unit's tasks have done ``steps_done`` steps and ``bins_done`` bins each (the chains of a
    ladder advance together): status ``running`` with these counters (the caller writes the index)."""
    t_iso = now_iso()
    for t in tasks:
        index["tasks"][t.task_id].update(status="running", steps_done=int(steps_done),
                                         bins_done=int(bins_done), updated=t_iso)


def record_outcome(index: dict[str, Any], outcome: TaskOutcome) -> None:
    """Copy an outcome into its index entry (the caller writes the index)."""
    entry = index["tasks"][outcome.task_id]
    for k in WHERE_KEYS:
        entry.pop(k, None)
    entry.update(status=outcome.status, message=outcome.message, bins_done=outcome.bins_done,
                 steps_done=outcome.steps_done, updated=now_iso(),
                 seconds=round(float(entry.get("seconds", 0.0)) + outcome.seconds, 3))
