"""Ranks 1 .. K-1 of the MPI farm: ask rank 0 for units, run them, report, until told to finish.

A worker asks for work (:class:`~qmc.mpi.protocol.Request`), runs the unit it gets (a single task, or its
block of a ladder with the team named in :class:`~qmc.mpi.protocol.JoinTeam`), and reports the outcomes
with the log lines it buffered meanwhile (:class:`~qmc.mpi.protocol.Done`; rank 0 writes them to
``run.log``).  Having started a single task it asks at once for the next one (``prefetch``); the answer
waits in its queue while the task runs.  Between chunks it looks for rank 0's
:class:`~qmc.mpi.protocol.Stop`; a prefetched unit not yet started when stopping is handed back
(:class:`~qmc.mpi.protocol.Unstarted`).  Each task file is written only by the rank that runs the task.
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
    Request,
    Setup,
    Tag,
    Unstarted,
    poll_sleep,
)
from qmc.run.outcome import StopFlag
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
    """Progress sink of a worker: between chunks, looks for rank 0's stop message."""

    def __init__(self, worker: Worker) -> None:
        self.worker = worker

    def task_started(self, *args: Any) -> None:
        pass

    def task_advanced(self, steps_done: int, bins_done: int) -> None:
        self.worker.check_stop()

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

    def check_stop(self) -> None:
        """Set the stop flag if rank 0 has sent a stop."""
        if self.channel.waiting(0, Tag.STOP):
            msg = self.channel.receive(0, Tag.STOP)
            if self.flag is not None:
                self.flag.set(f"{getattr(msg, 'reason', 'stop')} (stop sent by rank 0)")

    def _next_message(self) -> Message:
        """The next answer of rank 0 (polling, and looking for a stop meanwhile)."""
        wait = POLL_MIN
        while not self.channel.waiting(0, Tag.WORK):
            self.check_stop()
            wait = poll_sleep(wait)
        return self.channel.receive(0, Tag.WORK)

    def _stopped(self) -> bool:
        self.check_stop()
        return self.flag is not None and self.flag.is_set()

    def _run(self, msg: Assign | JoinTeam, setup: Setup) -> None:
        kwargs = dict(stop_flag=self.flag, progress=_WorkerSink(self), logger=self.log,
                      deadline=setup.deadline, config_text=setup.config_text,
                      config_fingerprint=setup.fingerprint)
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
            if self._stopped():
                self.channel.send(Unstarted(msg.unit), 0)
                continue
            self.channel.send(Request(prefetch=True), 0)  # the answer waits in the queue while this unit runs
            self._run(msg, setup)
            answer = self._next_message()
            if isinstance(answer, Assign):
                reserve = answer
        self.channel.flush()
