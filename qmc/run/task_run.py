"""The one path by which tasks run: a single task (:mod:`qmc.run.single`) and an exchange ladder
(:mod:`qmc.run.ladder_run`) both go through :class:`TaskRun` and :func:`run_guarded`.

Shared by both:

* the set-up: one :class:`~qmc.run.task_book.TaskBook` per task run here (its file, bins, sessions), the
  configuration text the files record, the checkpoint interval;
* the precision target of every chain (:attr:`TaskRun.watches`, :mod:`qmc.run.stopping`): fed with the
  bins of a resumed file here, with new bins by the chains as they complete them; a run whose target is
  reached (:attr:`TaskRun.target_reached`) is done;
* the loop (:meth:`TaskRun.execute`): advance in chunks of about ``CHUNK_SECONDS`` (:class:`Pacer`;
  chunking never changes results), add completed bins to the books, report progress, and at every
  *decision point* stop (stop flag, or the ``deadline`` would be passed) or rewrite the files
  (:func:`write_due`: a completed bin pending or ``checkpoint_seconds`` passed, at most once per
  ``MIN_WRITE_INTERVAL``); at the end the files get status ``done`` or ``stopped``;
* the failure path (:func:`run_guarded`): any exception is recorded as status ``failed`` with its message
  (:func:`failure_message`) in the outcome and in the files last written (the traceback goes to the log);
  the last checkpoint stays valid.

What a kind of run adds are the hooks: how the chains are built or restored (:meth:`TaskRun._load`), how
they advance, where the decision points are (a single task decides after every chunk; a ladder's members
decide together at meetings, from votes cast before their last chunk) and what a record carries besides
the chain (a ladder's state and ``/exchange`` group).  Nothing here touches the run index: the caller
does that with the returned outcomes (:mod:`qmc.run.outcome`).
"""

from __future__ import annotations

import logging
import os
import time
import traceback
from abc import ABC, abstractmethod
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, NamedTuple

import numpy as np

from qmc.chain.simulation import Simulation
from qmc.config.parser import Task
from qmc.models.compiled import CompiledModel
from qmc.run.outcome import StopSignal, TaskOutcome, failure_message
from qmc.run.pacing import Pacer, write_due
from qmc.run.progress import NullProgress, ProgressSink
from qmc.run.stopping import target_attrs, target_watch
from qmc.run.task_book import ConfigSource, TaskBook, config_source
from qmc.run.task_identity import steps_total
from qmc.storage.faults import WriteFault

__all__ = ["RunContext", "Decision", "TaskRun", "run_guarded"]

_MARGIN = 0.05  # seconds kept in hand before a deadline, besides the time of the final write


@dataclass
class RunContext:
    """What every task run gets from its caller (see :func:`qmc.run.single.run_task`)."""

    run_dir: Path
    stop_flag: StopSignal | None
    sink: ProgressSink
    log: logging.Logger
    deadline: float | None
    config_text: str | None
    config_fingerprint: str
    checkpoint_seconds: float | None

    @classmethod
    def of(cls, run_dir: str | os.PathLike, *, stop_flag: StopSignal | None = None,
           progress: ProgressSink | None = None, logger: logging.Logger | None = None,
           deadline: float | None = None, config_text: str | None = None, config_fingerprint: str = "",
           checkpoint_seconds: float | None = None) -> RunContext:
        """The context of the keyword arguments of ``run_task`` / ``run_group`` (defaults filled in)."""
        return cls(Path(run_dir), stop_flag, progress if progress is not None else NullProgress(),
                   logger if logger is not None else logging.getLogger("qmc.run"), deadline, config_text,
                   config_fingerprint, checkpoint_seconds)


class Decision(NamedTuple):
    """What is done at a decision point: stop (a reason, "" to go on) or else write a checkpoint."""

    stop: str
    write: bool


class TaskRun(ABC):
    """One execution of the tasks in ``tasks`` (those of this process) -- the shared path.

    Subclasses set :attr:`label` and implement :meth:`done_text`, :meth:`_load`, :meth:`_chains`,
    :attr:`steps_done`, :attr:`total_steps`, :meth:`_chunk`, :meth:`_advance` and :meth:`_decision`;
    :meth:`_extras` and :meth:`_written` add to the records, :attr:`target_reached` and :meth:`_next_stage`
    say when a run is done.  ``speaks`` is False on the members of a
    team that leave the log lines about the whole unit to member 0.
    """

    label = ""
    speaks = True

    def __init__(self, tasks: Sequence[Task], models: Sequence[CompiledModel], ctx: RunContext) -> None:
        self.ctx = ctx
        self.books = [TaskBook(t, ctx.run_dir) for t in tasks]
        self.models = list(models)
        self.watches = [target_watch(t, m) for t, m in zip(tasks, models, strict=True)]
        self.interval = float(ctx.checkpoint_seconds or tasks[0].sampling.checkpoint_seconds)
        self.stop_reason = ""
        self.fresh = True  # set by _load: no checkpoint was restored
        self.write_seconds = 0.0
        self.last_write = time.monotonic()
        self.pending = False  # completed bins not yet written
        self.fault: WriteFault | None = None  # a write fault this run carried on after (a ladder member)
        self._source: ConfigSource | None = None

    # ------------------------------------------------------------------------------------------ hooks
    @abstractmethod
    def _load(self) -> bool:
        """Build or restore the chains, begin the books' sessions; False if the files say done."""

    @abstractmethod
    def _chains(self) -> list[Simulation]:
        """The chains of this process, in the order of :attr:`books`."""

    @property
    @abstractmethod
    def steps_done(self) -> int:
        """Steps done by each chain of this run, warm-up included."""

    @property
    @abstractmethod
    def total_steps(self) -> int:
        """Steps each chain makes in all (warm-up and measurement) when the run goes to its end."""

    @property
    def target_reached(self) -> bool:
        """Whether the run ended because its precision target was met (the chains' say, see subclasses)."""
        return False

    @property
    def done(self) -> bool:
        return self.steps_done >= self.total_steps or self.target_reached

    @abstractmethod
    def done_text(self) -> str:
        """What the log says about a finished run, e.g. ``"20 bins"``."""

    @abstractmethod
    def _chunk(self, pacer: Pacer) -> int:
        """Steps to advance next (at least 1)."""

    @abstractmethod
    def _advance(self, n: int) -> list[Sequence[np.ndarray]]:
        """Advance by ``n`` steps; the bins completed by each chain (order of :attr:`books`)."""

    @abstractmethod
    def _decision(self) -> Decision | None:
        """The decision due now, None when this is not a decision point."""

    def _extras(self, j: int, sim: Simulation) -> dict[str, Any]:
        """Keyword arguments for :meth:`TaskBook.record` of book ``j`` besides the chain (none here)."""
        return {}

    def _next_stage(self) -> bool:
        """Called when the run is done: True when it went on to a new stage instead (a ground-state
        search), so that the loop goes on; False (here) to finish."""
        return False

    def _written(self, j: int) -> None:  # noqa: B027 (an optional hook: nothing to do by default)
        """Book ``j`` has just been written."""

    # ------------------------------------------------------------------------------------------ shared
    def local_stop(self, seconds_ahead: float) -> str:
        """Why this process wants to stop ("" if it does not): the stop flag, or the deadline would come
        within ``seconds_ahead`` plus the time of a write."""
        flag = self.ctx.stop_flag
        if flag is not None and flag.is_set():
            return getattr(flag, "reason", "") or "stop requested"
        d = self.ctx.deadline
        if d is not None and time.time() + seconds_ahead + self.write_seconds + _MARGIN >= d:
            return "time budget used up"
        return ""

    def seconds_left(self) -> float | None:
        """Seconds until the deadline, less the time of a write (None without a deadline)."""
        d = self.ctx.deadline
        return None if d is None else d - time.time() - self.write_seconds - _MARGIN

    def write_is_due(self) -> bool:
        return write_due(time.monotonic() - self.last_write, self.pending, self.interval, False)

    def _write(self, status: str) -> None:
        """Rewrite the files of all books at the current step."""
        t0 = time.perf_counter()
        t = time.time()
        if self._source is None:
            self._source = config_source(self.ctx.run_dir, self.books[0].task, self.ctx.config_text,
                                         self.ctx.config_fingerprint)
        met = self.target_reached
        for j, (book, sim, model) in enumerate(zip(self.books, self._chains(), self.models, strict=True)):
            extras = self._extras(j, sim)
            extras["bins_attrs"] = {**target_attrs(self.watches[j], met), **extras.get("bins_attrs", {})}
            book.write(book.record(sim, model, status, self._source, t, **extras))
            self._written(j)
        self.write_seconds = time.perf_counter() - t0
        self.last_write = time.monotonic()
        self.pending = False

    def _write_running(self) -> None:
        """An intermediate checkpoint."""
        self._write("running")

    def record_failure(self, message: str) -> None:
        """Mark every file written in this call as ``failed`` with ``message``."""
        for book in self.books:
            book.record_failure(message, self.ctx.log)

    def execute(self) -> str:
        """Run to the end or to a stop; returns ``done`` or ``stopped`` (exceptions propagate)."""
        ctx, first = self.ctx, self.books[0]
        m = len(self.books)
        bins_total = first.task.sampling.bins
        if not self._load():
            ctx.sink.task_started(first.task.task_id, m * first.steps_done, m * steps_total(first.task),
                                  bins_total)
            if self.speaks:
                ctx.log.info("%s: already done", self.label)
            return "done"
        say = getattr(ctx.sink, "message", None)  # sinks that show text lines (the terminal's)
        if not self.fresh and self.steps_done > 0 and self.speaks and say is not None:
            say(f"resuming {self.label} at step {self.steps_done} of {self.total_steps} "
                f"({self._chains()[0].bins_done} of {bins_total} bins)")
        for watch, book in zip(self.watches, self.books, strict=True):
            watch.reset(book.rows)
        ctx.sink.task_started(first.task.task_id, m * self.steps_done, m * self.total_steps, bins_total)
        if self.fresh:  # the files exist from the first step on
            self._write_running()
        self.last_write = time.monotonic()
        self.pending = False
        pacer = Pacer()
        while not self.done or self._next_stage():
            decision = self._decision()
            if decision is not None and decision.stop:
                self.stop_reason = decision.stop
                break
            if decision is not None and decision.write:
                self._write_running()
            n = self._chunk(pacer)
            before = self.steps_done
            t0 = time.perf_counter()
            new = self._advance(n)
            pacer.measured(time.perf_counter() - t0, self.steps_done - before)
            for book, rows in zip(self.books, new, strict=True):
                book.rows.extend(np.array(r) for r in rows)
                self.pending = self.pending or len(rows) > 0
            ctx.sink.task_advanced(m * self.steps_done, self._chains()[0].bins_done)
        status = "done" if self.done else "stopped"
        self._write(status)
        if self.speaks and status == "done":
            met = ", precision target met" if self.target_reached else ""
            ctx.log.info("%s: done (%s%s)", self.label, self.done_text(), met)
        elif self.speaks:
            ctx.log.info("%s: stopped at step %d of %d (%s); checkpoint written", self.label, self.steps_done,
                         self.total_steps, self.stop_reason)
        return status


def run_guarded(label: str, make: Callable[[], TaskRun], tasks_here: Callable[[], Sequence[Task]],
                ctx: RunContext) -> list[TaskOutcome]:
    """Build a run with ``make()`` and execute it; never raises for a problem of the tasks.

    Returns one outcome per task run here (``tasks_here()`` names them when ``make`` itself fails, e.g. a
    model that cannot be built).  A failure is logged with its traceback as ``"<label> failed: ..."`` and
    recorded in the outcomes and in the files written in this call.  A write fault
    (:class:`~qmc.storage.faults.WriteFault`) is no failure of the task: status ``stopped`` with the fault
    marked in the outcomes, one log line, nothing more written."""
    t_call = time.time()
    run: TaskRun | None = None
    fault: WriteFault | None = None
    try:
        run = make()
        status = run.execute()
        message = run.stop_reason if status == "stopped" else ""
        fault = run.fault
    except WriteFault as exc:  # the machine, not the task: the last complete checkpoint stays
        fault, status = exc, "stopped"
    except Exception as exc:  # recorded, not hidden: message in the outcomes, traceback in the log
        message = failure_message(exc)
        ctx.log.error("%s failed: %s\n%s", label, message, traceback.format_exc().rstrip())
        if run is not None:
            run.record_failure(message)
        status = "failed"
    if fault is not None:
        message = str(fault)
        ctx.log.error("%s: %s; stopped, the last complete checkpoint is intact", label, message)
    ctx.sink.task_finished(status)
    books = run.books if run is not None else [TaskBook(t, ctx.run_dir) for t in tasks_here()]
    seconds = (time.time() - t_call) / len(books)
    return [book.outcome(status, message, seconds, fault is not None) for book in books]
