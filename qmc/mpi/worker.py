"""Ranks 1 .. K-1 of the MPI farm: ask rank 0 for units, run them, report, until told to finish.

A worker asks for work (:class:`~qmc.mpi.protocol.Request`), runs the unit it gets (a single task, or its
block of a ladder with the team named in :class:`~qmc.mpi.protocol.JoinTeam`), and reports the outcomes
with the log lines it buffered meanwhile (:class:`~qmc.mpi.protocol.Done`; rank 0 writes them to
``run.log``).  When a unit has started it says so and then reports the unit's steps and bins every few
seconds (:class:`~qmc.mpi.protocol.Progress`; for a ladder only the team's member 0); having started a
single task it asks at once for the next one (``prefetch``), and the answer waits in its queue while the
task runs.  Between chunks, and before it starts a prefetched unit, it reads rank 0's control messages:
:class:`~qmc.mpi.protocol.Stop`, and :class:`~qmc.mpi.protocol.TakeBack` of the prefetched unit, which
it hands back (:class:`~qmc.mpi.protocol.Unstarted`) unless it has started it; a prefetched unit not yet
started when stopping is handed back too.  Each task file is written only by the rank that runs the
task.
"""

from __future__ import annotations

import logging
import time
from typing import Any

from qmc.exchange.team import form_team
from qmc.mpi.protocol import (
    POLL_MIN,
    Assign,
    Channel,
    Done,
    Finish,
    JoinTeam,
    Message,
    Progress,
    Request,
    Setup,
    Tag,
    TakeBack,
    Unstarted,
    poll_sleep,
)
from qmc.run.outcome import StopFlag
from qmc.run.task_identity import steps_total
from qmc.run.units import run_unit

__all__ = ["LogBuffer", "Worker"]


class LogBuffer(logging.Handler):
    """Keeps a worker's log lines (level, text with the time) until they travel to rank 0."""

    def __init__(self) -> None:
        super().__init__(logging.INFO)
        self.lines: list[tuple[int, str]] = []

    def emit(self, record: logging.LogRecord) -> None:
        try:
            stamp = time.strftime("%H:%M:%S", time.localtime(record.created)) + f".{int(record.msecs):03d}"
            self.lines.append((record.levelno, f"(at {stamp}) {record.getMessage()}"))
        except Exception:  # a broken log call must not break the task
            pass

    def take(self) -> list[tuple[int, str]]:
        out, self.lines = self.lines, []
        return out


class _WorkerSink:
    """Progress sink of a worker's unit: reports its start (and then asks for the next unit, if
    ``prefetch``) and its progress at most every ``every`` seconds (if ``report``: a single task, or member
    0 of a ladder's team), and reads rank 0's control messages between chunks."""

    def __init__(self, worker: Worker, unit: int, tasks: list[Any], report: bool, prefetch: bool,
                 every: float) -> None:
        self.worker, self.unit, self.first = worker, unit, tasks[0]
        self.report, self.prefetch, self.every = report, prefetch, every
        self.per_task = 1
        self.last = 0.0

    def _send(self, steps_done: int, bins_done: int) -> None:
        self.worker.channel.send(Progress(self.unit, steps_done // self.per_task, bins_done), 0)
        self.last = time.monotonic()

    def task_started(self, task_id: str, steps_done: int, steps_total_: int, bins_total: int) -> None:
        self.per_task = max(1, steps_total_ // max(steps_total(self.first), 1))  # chains run here
        if self.report:
            self._send(steps_done, -1)
        if self.prefetch:  # the answer waits in the queue while this unit runs; asked once per unit (a
            self.prefetch = False  # ground-state search starts each stage of beta doubling anew)
            self.worker.channel.send(Request(prefetch=True), 0)
            self.worker.asked = True

    def task_advanced(self, steps_done: int, bins_done: int) -> None:
        self.worker.check_control()
        if self.report and time.monotonic() - self.last >= self.every:
            self._send(steps_done, bins_done)

    def task_finished(self, status: str) -> None:
        pass


class Worker:
    """One worker rank's side of the farm."""

    def __init__(self, world: Any, stop_flag: StopFlag | None) -> None:
        self.world, self.flag = world, stop_flag
        self.channel = Channel(world.comm)
        self.buffer = LogBuffer()
        self.log = logging.getLogger(f"qmc.run.rank{world.rank}")
        self.log.setLevel(logging.INFO)
        self.log.propagate = False
        self.log.addHandler(self.buffer)
        self.started: set[int] = set()  # units this worker has started
        self.dropped: set[int] = set()  # prefetched units handed back before they started
        self.asked = False  # a prefetch request of the running unit awaits its answer

    def check_control(self) -> None:
        """Read rank 0's control messages: a stop sets the stop flag; a prefetched unit not started yet is
        handed back when taken back (a unit already started is not)."""
        while self.channel.waiting(0, Tag.CONTROL):
            msg = self.channel.receive(0, Tag.CONTROL)
            if isinstance(msg, TakeBack):
                if msg.unit not in self.started and msg.unit not in self.dropped:
                    self.dropped.add(msg.unit)
                    self.channel.send(Unstarted(msg.unit), 0)
            elif self.flag is not None:
                self.flag.set(f"{getattr(msg, 'reason', 'stop')} (stop sent by rank 0)")

    def _next_message(self) -> Message:
        """The next answer of rank 0 (polling, and reading control messages meanwhile)."""
        wait = POLL_MIN
        while not self.channel.waiting(0, Tag.WORK):
            self.check_control()
            wait = poll_sleep(wait)
        return self.channel.receive(0, Tag.WORK)

    def _stopped(self) -> bool:
        self.check_control()
        return self.flag is not None and self.flag.is_set()

    def _run(self, msg: Assign | JoinTeam, setup: Setup) -> None:
        self.started.add(msg.unit)
        team_msg = isinstance(msg, JoinTeam)
        report = not team_msg or min(msg.ranks) == self.world.rank
        sink = _WorkerSink(self, msg.unit, msg.tasks, report, not team_msg, setup.progress_seconds)
        kwargs = dict(stop_flag=self.flag, progress=sink, logger=self.log, deadline=setup.deadline,
                      config_text=setup.config_text, config_fingerprint=setup.fingerprint)
        if isinstance(msg, JoinTeam):  # a block of an exchange ladder, side by side with the other ranks
            team = form_team(self.world.comm, msg.ranks, tag=msg.unit)
            try:
                outcomes = run_unit(msg.tasks, setup.run_dir, team=team, **kwargs)
            finally:
                team.close()
        else:
            outcomes = run_unit(msg.tasks, setup.run_dir, **kwargs)
        self.channel.send(Done(msg.unit, outcomes, self.buffer.take()), 0)

    def run(self, setup: Setup) -> None:
        """Work until rank 0 says finish."""
        reserve: Assign | None = None
        while True:
            if reserve is not None:
                msg: Message = reserve
                reserve = None
            else:
                self.channel.send(Request(prefetch=False), 0)
                msg = self._next_message()
            if isinstance(msg, Finish):
                break
            if isinstance(msg, JoinTeam):
                self._run(msg, setup)
                continue
            if not isinstance(msg, Assign):
                raise RuntimeError(f"rank 0 answered a request with {msg!r}")
            stopped = self._stopped()  # (reads a take-back of this very unit, too)
            if msg.unit in self.dropped:  # the answer to a prefetch already handed back: skip it once (rank 0
                self.dropped.discard(msg.unit)  # may give the same unit again later, and then it runs)
                continue
            if stopped:
                self.channel.send(Unstarted(msg.unit), 0)
                continue
            self.asked = False
            self._run(msg, setup)
            if self.asked:
                answer = self._next_message()
                if isinstance(answer, Assign):
                    reserve = answer
        self.channel.flush()
