"""Rank 0 of the MPI farm: coordinates AND computes, by interleaving.

Rank 0 takes units itself (:meth:`Schedule.own`) and runs them in chunks of about 0.3 s
(:mod:`qmc.run.task_run`); between two chunks (:class:`_CoordinatorSink`), and whenever it has no unit of
its own, it answers the workers' messages (:meth:`Coordinator.serve`): requests are answered by the
:class:`~qmc.mpi.schedule.Schedule`, reports go into the run index.  It is the only writer of
``index.json`` and ``run.log`` (workers ship their log lines with their reports); the index is rewritten
at most every :data:`INDEX_INTERVAL` seconds while running, and at the end.

Stopping: SIGTERM (or SIGINT) on any rank, a worker's unit stopped by the ``--max-time`` budget, or rank
0's own stop flag puts rank 0 into stop mode: it sends :class:`~qmc.mpi.protocol.Stop` to every worker,
each running unit writes its checkpoint at its next chunk boundary, prefetched units not yet started are
handed back; the workers exit 0 and rank 0 with the status of an unfinished run (``qmc run``).  A failed
task is recorded (status ``failed`` and its message) and the others go on.
"""

from __future__ import annotations

import json
import logging
import time
from dataclasses import dataclass, field
from typing import Any

from qmc.exchange.team import form_team, team_size
from qmc.mpi.protocol import (
    POLL_MIN,
    Assign,
    Channel,
    Done,
    Finish,
    JoinTeam,
    Message,
    NoUnit,
    Request,
    Stop,
    Unstarted,
    poll_sleep,
)
from qmc.mpi.schedule import Placement, Schedule
from qmc.run.outcome import RunReport, StopFlag, TaskOutcome, mark_running, record_outcome
from qmc.run.plan import RunPlan
from qmc.run.units import is_ladder, run_unit, work_units
from qmc.storage.run_index import write_index

__all__ = ["INDEX_INTERVAL", "FarmStats", "Coordinator"]

INDEX_INTERVAL = 2.0
"""Least number of seconds between two writes of index.json by rank 0 while the run goes on (the last write
is at the end); the interval grows to 20 times the duration of a write, so that a very large index never
takes more than about 5% of rank 0's time."""

_FIRST_WAIT = 10.0  # at most this many seconds for the workers' first requests before rank 0 computes


@dataclass
class FarmStats:
    """What rank 0 measured: units handed out, seconds spent coordinating (answering messages and writing
    the index; ``index_seconds`` is the part spent writing ``index.json``)."""

    ranks: int = 0
    units: int = 0
    tasks: int = 0
    handed_out: int = 0
    coordinator_seconds: float = 0.0
    index_seconds: float = 0.0
    wall_seconds: float = 0.0
    index_writes: int = 0
    units_by_rank: dict[int, int] = field(default_factory=dict)

    def as_dict(self) -> dict[str, Any]:
        per = self.coordinator_seconds / self.handed_out if self.handed_out else 0.0
        return {"ranks": self.ranks, "units": self.units, "tasks": self.tasks, "handed_out": self.handed_out,
                "coordinator_seconds": round(self.coordinator_seconds, 6),
                "coordinator_seconds_per_unit": round(per, 6), "index_seconds": round(self.index_seconds, 6),
                "wall_seconds": round(self.wall_seconds, 3),
                "index_writes": self.index_writes,
                "units_by_rank": {str(k): v for k, v in sorted(self.units_by_rank.items())}}


class Coordinator:
    """Rank 0's side of the farm for one plan (see the module docstring)."""

    def __init__(self, world: Any, plan: RunPlan, stop_flag: StopFlag, progress: Any, log: logging.Logger,
                 deadline: float | None) -> None:
        self.world, self.channel = world, Channel(world.comm)
        self.plan, self.flag, self.progress, self.log = plan, stop_flag, progress, log
        self.deadline = deadline
        self.schedule = Schedule(work_units(plan.tasks, plan.config.tasks()), plan.index, world.size,
                                 self._members)
        self.previous: dict[str, dict[str, Any]] = {}  # index entries before "running"
        self.outcomes: list[TaskOutcome] = []
        self.stopping = False
        self.stop_reason = ""
        self.stop_sent = False
        self.dirty = False
        self.last_index = 0.0
        self.index_interval = INDEX_INTERVAL
        n_tasks = sum(len(u) for u in self.schedule.units)
        self.stats = FarmStats(ranks=world.size, units=len(self.schedule.units), tasks=n_tasks)

    def _members(self, unit: list[Any]) -> int:
        """Ranks a unit runs on: 1 for a single task, :func:`qmc.exchange.team.team_size` for a ladder."""
        if not is_ladder(unit):
            return 1
        cap = unit[0].sampling.exchange_ranks or self.world.size
        return team_size(len(unit), min(cap, self.world.size))

    # -------------------------------------------------------------------------------------------- index
    def _write_index(self, force: bool = False) -> None:
        now = time.monotonic()
        if self.dirty and (force or now - self.last_index >= self.index_interval):
            write_index(self.plan.run_dir, self.plan.index)
            self.stats.index_writes += 1
            self.last_index = time.monotonic()
            self.stats.index_seconds += self.last_index - now
            self.index_interval = max(INDEX_INTERVAL, 20.0 * (self.last_index - now))
            self.dirty = False

    def _started(self, p: Placement) -> None:
        """Bookkeeping of a placement: the index says running, the statistics count it."""
        self.previous.update(mark_running(self.plan.index, self.schedule.units[p.unit]))
        self.dirty = True
        for r in p.ranks:
            self.stats.units_by_rank[r] = self.stats.units_by_rank.get(r, 0) + 1
        if p.ranks != (0,):
            self.stats.handed_out += 1
        if len(p.ranks) > 1:
            unit = self.schedule.units[p.unit]
            self.log.info("exchange ladder %s (%d chains) on ranks %s", unit[0].exchange_group, len(unit),
                          ", ".join(map(str, p.ranks)))

    def _hand_out(self, p: Placement) -> None:
        """Send a placement to its workers (rank 0, if in it, runs its part itself)."""
        self._started(p)
        tasks = self.schedule.units[p.unit]
        steps = self.plan.index["tasks"][tasks[0].task_id].get("steps_done", 0)
        if steps and p.ranks[0] != 0:  # rank 0 says it for its own units when it starts them
            t = tasks[0]
            what = f"task {t.task_id}" if len(tasks) == 1 else f"exchange group {t.exchange_group}"
            ranks = ", ".join(map(str, p.ranks))
            self.progress.message(f"resuming {what} at step {steps} on rank(s) {ranks}")
        for r in p.ranks:
            if r != 0:
                msg = Assign(p.unit, tasks) if len(p.ranks) == 1 else JoinTeam(p.unit, tasks, list(p.ranks))
                self.channel.send(msg, r)

    def _record(self, outcomes: list[TaskOutcome], rank: int) -> None:
        for o in outcomes:
            self.outcomes.append(o)
            record_outcome(self.plan.index, o)
            self.progress.outcome(o, rank)  # one count of the tasks done, on every rank
            if o.status == "stopped":
                self._stop(o.message or "stopped")
        self.dirty = True

    def _stop(self, reason: str) -> None:
        if not self.stopping:
            self.stopping, self.stop_reason = True, reason
            self.log.info("stopping all ranks: %s", reason)
        if not self.flag.is_set():  # rank 0's own unit checkpoints and stops too
            self.flag.set(reason)

    # -------------------------------------------------------------------------------------------- messages
    def _handle(self, rank: int, msg: Message) -> None:
        if isinstance(msg, Request):
            if not msg.prefetch:
                self.schedule.wait(rank)  # answered by dispatch
                return
            p = self.schedule.prefetch(rank, self.stopping)
            if p is None:
                self.channel.send(NoUnit(), rank)
            else:
                self._hand_out(p)
        elif isinstance(msg, Done):
            self.schedule.returned(rank, msg.unit)
            for level, text in msg.log_lines:
                self.log.log(level, "rank %d: %s", rank, text)
            self._record(msg.outcomes, rank)
        elif isinstance(msg, Unstarted):
            self.schedule.returned(rank, msg.unit)
            for t in self.schedule.units[msg.unit]:
                entry = self.plan.index["tasks"][t.task_id]
                entry.update({k: v for k, v in self.previous.get(t.task_id, {}).items() if v is not None})
            self.dirty = True
        else:  # a message rank 0 does not expect: log it, never crash the run
            self.log.error("rank %d sent an unexpected message %r", rank, msg)

    def serve(self) -> None:
        """Answer every waiting message; broadcast a stop; write the index when due."""
        t0 = time.perf_counter()
        for rank, msg in self.channel.incoming():
            self._handle(rank, msg)
        if self.flag.is_set():
            self._stop(getattr(self.flag, "reason", "") or "stop requested")
        if self.deadline is not None and time.time() >= self.deadline:
            self._stop("time budget used up")
        if self.stopping and not self.stop_sent:
            self.stop_sent = True
            for r in range(1, self.world.size):
                if r not in self.schedule.finished:
                    self.channel.send(Stop(self.stop_reason), r)
        placed, finished = self.schedule.dispatch(self.stopping)
        for p in placed:
            self._hand_out(p)
        for r in finished:
            self.channel.send(Finish(), r)
        self._write_index()
        self.stats.coordinator_seconds += time.perf_counter() - t0

    # -------------------------------------------------------------------------------------------- main loop
    def _run_own(self, p: Placement, sink: Any, fp: str) -> None:
        """Run rank 0's part of a placement (a single task, or member 0 of a ladder's team)."""
        if len(p.ranks) == 1:
            self._started(p)
        else:
            self._hand_out(p)
        kwargs = dict(stop_flag=self.flag, progress=sink, logger=self.log, deadline=self.deadline,
                      config_text=self.plan.config.text, config_fingerprint=fp)
        unit = self.schedule.units[p.unit]
        if len(p.ranks) == 1:
            outcomes = run_unit(unit, self.plan.run_dir, **kwargs)
        else:
            team = form_team(self.world.comm, list(p.ranks), tag=p.unit)
            try:
                outcomes = run_unit(unit, self.plan.run_dir, team=team, **kwargs)
            finally:
                team.close()
        self._record(outcomes, 0)

    def run(self) -> RunReport:
        t_start = time.perf_counter()
        self.log.info("MPI farm: %d ranks, %d unit(s) of work (%d task(s)), largest first", self.world.size,
                      self.stats.units, self.stats.tasks)
        sink = _CoordinatorSink(self.progress, self)
        fp = self.plan.config.fingerprint()
        # hand out first, then compute: every worker's first request is answered before rank 0 starts a
        # unit of its own (they come right after the set-up broadcast; the wait is bounded all the same)
        wait, t0 = POLL_MIN, time.monotonic()
        while (self.schedule.has_work(self.stopping) and time.monotonic() - t0 < _FIRST_WAIT
               and self.schedule.workers_not_heard()):
            self.serve()
            wait = poll_sleep(wait)
        wait = POLL_MIN
        while True:
            self.serve()
            if self.schedule.has_work(self.stopping):
                p = self.schedule.own(self.stopping)
                if p is not None:
                    self._run_own(p, sink, fp)
                    wait = POLL_MIN
                    continue
            elif self.schedule.all_finished():
                break
            wait = poll_sleep(wait)
        t0 = time.perf_counter()
        self.channel.flush()
        self._write_index(force=True)
        self.stats.coordinator_seconds += time.perf_counter() - t0
        self.stats.wall_seconds = time.perf_counter() - t_start
        self.log.info("MPI farm statistics: %s", json.dumps(self.stats.as_dict()))
        return RunReport(self.outcomes, self.plan.unfinished(), self.stop_reason)


@dataclass
class _CoordinatorSink:
    """Progress sink of rank 0's own units: shows them and answers the workers between chunks."""

    progress: Any
    coordinator: Coordinator

    def task_started(self, task_id: str, steps_done: int, steps_total: int, bins_total: int) -> None:
        self.progress.task_started(task_id, steps_done, steps_total, bins_total)

    def task_advanced(self, steps_done: int, bins_done: int) -> None:
        self.progress.task_advanced(steps_done, bins_done)
        self.coordinator.serve()

    def task_finished(self, status: str) -> None:
        self.progress.task_finished(status)

    def message(self, text: str) -> None:
        self.progress.message(text)
