"""Progress display for ``qmc run``: one bar for the running task and one for the whole run, with ETAs.

Estimates (wall-clock seconds) come from step rates measured in this session, never from the first chunk
of a task (it carries the one-off costs: loading the compiled kernels, building the model, the first
file write), so that a start-up of a few seconds does not make an hour-long estimate:

* task ETA = (steps left in the task) / (steps per second since the task's first chunk);
* run ETA  = (work left) / (work per second since the run's first chunk), where the work of a step of a
  task is its ``weight`` (the caller passes an estimate of the cost per step, e.g. N * beta, since an SSE
  step costs time proportional to the expansion order ~ N beta).  Under MPI the tasks finished on other
  ranks (:meth:`Progress.outcome`) count with the work of their steps.

The count of tasks done, ``[d/n done]``, counts every task whose outcome is ``done`` (on any rank), out of
the tasks of the plan.  A task that continues from a checkpoint is announced as ``resuming ...``.

On a terminal the line is redrawn in place at most every ``min_interval`` seconds; otherwise (a log file,
a batch job) a plain line is printed when a task starts or ends and every ``plain_interval`` seconds.
Everything goes to ``stream`` (standard error by default).  :class:`NullProgress` shows nothing.
"""

from __future__ import annotations

import shutil
import sys
import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from typing import Any, Protocol, TextIO

__all__ = ["ProgressSink", "RunDisplay", "NullProgress", "LineDisplay", "Progress", "format_duration"]


class ProgressSink(Protocol):
    """What a running task reports to (:mod:`qmc.run.task_run`)."""

    def task_started(self, task_id: str, steps_done: int, steps_total: int, bins_total: int) -> None: ...

    def task_advanced(self, steps_done: int, bins_done: int) -> None: ...

    def task_finished(self, status: str) -> None: ...


class RunDisplay(ProgressSink, Protocol):
    """What the runner of a whole plan reports to besides the running task: the plan, text lines, and
    the outcome of every task (:mod:`qmc.run.serial`, :mod:`qmc.mpi.coordinator`)."""

    def plan(self, tasks: Iterable[tuple[str, float, int, int]]) -> None: ...

    def message(self, text: str) -> None: ...

    def outcome(self, outcome: Any, rank: int | None = None) -> None: ...

    def close(self) -> None: ...


class NullProgress:
    """Shows nothing (quiet mode, or a worker process)."""

    def plan(self, tasks: Iterable[tuple[str, float, int, int]]) -> None:
        pass

    def task_started(self, task_id: str, steps_done: int, steps_total: int, bins_total: int) -> None:
        pass

    def task_advanced(self, steps_done: int, bins_done: int) -> None:
        pass

    def task_finished(self, status: str) -> None:
        pass

    def message(self, text: str) -> None:
        pass

    def outcome(self, outcome: Any, rank: int | None = None) -> None:
        pass

    def close(self) -> None:
        pass


def format_duration(seconds: float | None) -> str:
    """``H:MM:SS`` (``Dd HH:MM:SS`` beyond a day); ``--:--:--`` when unknown."""
    if seconds is None or seconds != seconds or seconds < 0 or seconds > 1e9:
        return "--:--:--"
    s = int(round(seconds))
    d, s = divmod(s, 86400)
    h, s = divmod(s, 3600)
    m, s = divmod(s, 60)
    return f"{d}d {h:02d}:{m:02d}:{s:02d}" if d else f"{h}:{m:02d}:{s:02d}"


@dataclass
class _Task:
    task_id: str
    weight: float
    steps_total: int
    steps_at_start: int
    steps_done: int = 0
    bins_done: int = 0
    bins_total: int = 0
    started: float = 0.0
    ref_time: float | None = None  # the end of the task's first chunk: rates are measured from there
    ref_steps: int = 0


class LineDisplay:
    """A status line on ``stream``: redrawn in place on a terminal (``tty``), cleared before other text.

    Base of :class:`Progress` and :class:`qmc.validation.progress.SuiteProgress`; ``_drawn`` is the length
    of the line now shown (0 when none).
    """

    def __init__(self, stream: TextIO | None, tty: bool | None) -> None:
        self.stream = stream if stream is not None else sys.stderr
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)()) if tty is None else tty
        self._drawn = 0

    def message(self, text: str) -> None:
        """Print a line of text (clearing the status line first on a terminal)."""
        self._clear()
        self.stream.write(text + "\n")
        self.stream.flush()

    def close(self) -> None:
        self._clear()

    def _clear(self) -> None:
        if self.tty and self._drawn:
            self.stream.write("\r" + " " * self._drawn + "\r")
            self.stream.flush()
            self._drawn = 0

    def _overwrite(self, text: str) -> None:
        """Replace the line shown on the terminal by ``text`` (no newline, no flush)."""
        pad = max(0, self._drawn - len(text))
        self.stream.write("\r" + text + " " * pad)
        self._drawn = len(text)


class Progress(LineDisplay):
    """Task and run progress with ETAs on ``stream`` (see module docstring)."""

    def __init__(self, stream: TextIO | None = None, *, min_interval: float = 0.2,
                 plain_interval: float = 30.0, clock: Callable[[], float] = time.monotonic,
                 tty: bool | None = None) -> None:
        super().__init__(stream, tty)
        self.min_interval = min_interval
        self.plain_interval = plain_interval
        self.clock = clock
        self.weights: dict[str, float] = {}
        self.credited: dict[str, int] = {}  # steps of each task counted in work_done (or done before)
        self.work_total = 0.0
        self.work_done = 0.0
        self.n_tasks = 0
        self.done_ids: set[str] = set()
        self.t0 = clock()
        self.ref: tuple[float, float] | None = None  # (time, work done) at the end of the run's first chunk
        self.current: _Task | None = None
        self._last_draw = -1e18

    # -------------------------------------------------------------------------------------------- planning
    def plan(self, tasks: Iterable[tuple[str, float, int, int]]) -> None:
        """Tasks of this run as ``(task_id, weight, steps_total, steps_done)`` (those with all their steps
        count as done); starts the run clock."""
        self.t0 = self.clock()
        for task_id, weight, total, done in tasks:
            self.weights[task_id] = float(weight)
            self.credited[task_id] = int(done)
            self.work_total += float(weight) * max(0, int(total) - int(done))
            self.n_tasks += 1
            if int(done) >= int(total):
                self.done_ids.add(task_id)

    def _credit(self, task_id: str, steps: int) -> None:
        """Count the work of ``task_id`` up to ``steps`` steps (never less than counted before)."""
        before = self.credited.get(task_id, steps)
        if steps > before:
            self.work_done += self.weights.get(task_id, 1.0) * (steps - before)
            self.credited[task_id] = steps

    # --------------------------------------------------------------------------------------- ProgressSink
    def task_started(self, task_id: str, steps_done: int, steps_total: int, bins_total: int) -> None:
        if task_id not in self.weights:  # not planned: count it now
            self.weights[task_id] = 1.0
            self.credited[task_id] = steps_done
            self.work_total += max(0, steps_total - steps_done)
            self.n_tasks += 1
        self.current = _Task(task_id, self.weights[task_id], steps_total, steps_done, steps_done, 0,
                             bins_total, self.clock())
        self._draw(force=True, event="start")

    def task_advanced(self, steps_done: int, bins_done: int) -> None:
        t = self.current
        if t is None:
            return
        self._credit(t.task_id, steps_done)
        t.steps_done, t.bins_done = steps_done, bins_done
        now = self.clock()
        if t.ref_time is None:
            t.ref_time, t.ref_steps = now, steps_done
        if self.ref is None:
            self.ref = (now, self.work_done)
        self._draw()

    def task_finished(self, status: str) -> None:
        if self.current is not None:
            if status == "done":
                self.done_ids.add(self.current.task_id)
            self._draw(force=True, event=status)
        self.current = None

    def outcome(self, outcome: Any, rank: int | None = None) -> None:
        """A task ended (``outcome`` is a :class:`~qmc.run.outcome.TaskOutcome`), here (``rank`` None or 0)
        or on another rank: count it if done; the work of another rank's task counts now (that of this
        process's was counted as it went: a ladder reports all its local chains' steps under its first
        task), with a line on it."""
        if outcome.status == "done":
            self.done_ids.add(outcome.task_id)
        if rank is not None and rank != 0:
            self._credit(outcome.task_id, int(outcome.steps_done))
            extra = f": {outcome.message}" if outcome.message and outcome.status != "done" else ""
            self.message(f"{outcome.status} {outcome.task_id} on rank {rank} ({outcome.bins_done}/"
                         f"{outcome.bins_total} bins, {outcome.seconds:.1f} s) {self.count()}{extra}")

    # -------------------------------------------------------------------------------------------- output
    def count(self) -> str:
        """``[d/n done]``: tasks done out of the tasks of the plan."""
        return f"[{len(self.done_ids)}/{self.n_tasks} done]"

    def task_eta(self) -> float | None:
        t = self.current
        if t is None or t.ref_time is None:
            return None
        done = t.steps_done - t.ref_steps
        elapsed = self.clock() - t.ref_time
        if done <= 0 or elapsed <= 0:
            return None
        return (t.steps_total - t.steps_done) * elapsed / done

    def run_eta(self) -> float | None:
        if self.ref is None:
            return None
        elapsed = self.clock() - self.ref[0]
        work = self.work_done - self.ref[1]
        if work <= 0 or elapsed <= 0:
            return None
        return max(0.0, self.work_total - self.work_done) * elapsed / work

    def line(self) -> str:
        """The current status line (without bar characters when not on a terminal)."""
        t = self.current
        run_frac = min(1.0, self.work_done / self.work_total) if self.work_total > 0 else 1.0
        overall = f"all {100 * run_frac:3.0f}% ETA {format_duration(self.run_eta())}"
        if t is None:
            return f"{self.count()} {overall}"
        frac = t.steps_done / t.steps_total if t.steps_total else 1.0
        head = f"{self.count()} {t.task_id}"
        body = f"{100 * frac:3.0f}% bins {t.bins_done}/{t.bins_total} ETA {format_duration(self.task_eta())}"
        if self.tty:
            width = 20
            filled = int(round(width * min(max(frac, 0.0), 1.0)))
            body = "|" + "#" * filled + "-" * (width - filled) + "| " + body
        return f"{head} {body} | {overall}"

    def _draw(self, force: bool = False, event: str = "") -> None:
        now = self.clock()
        interval = self.min_interval if self.tty else self.plain_interval
        if not force and now - self._last_draw < interval:
            return
        self._last_draw = now
        text = self.line()
        if event and not (self.tty and event == "start"):
            text = f"{event} {text}"
        if self.tty:
            width = max(20, shutil.get_terminal_size((100, 24)).columns - 1)
            text = text[:width]
            self._overwrite(text)
            if event and event != "start":
                self.stream.write("\n")
                self._drawn = 0
        else:
            self.stream.write(text + "\n")
        self.stream.flush()
