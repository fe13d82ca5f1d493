"""Rank 0 of the MPI farm: coordinates AND computes, by interleaving.

Rank 0 takes units itself (:meth:`Schedule.own`) and runs them in chunks of about 0.3 s
(:mod:`qmc.run.task_run`); between two chunks (:class:`_CoordinatorSink`), and whenever it has no unit of
its own, it answers the workers' messages (:meth:`Coordinator.serve`): requests are answered by the
:class:`~qmc.mpi.schedule.Schedule` (which also says which prefetched units to take back from busy
workers for idle ranks), progress reports and outcomes go into the run index.  It is the only writer of
``run.log`` (workers ship their log lines with their reports) and the farm's writer of ``index.json``:
a unit handed to a busy worker is ``queued`` on that rank until the worker reports its first step, and
the steps and bins of running units are kept current; the index is rewritten at most every
:data:`INDEX_INTERVAL` seconds while running, and at the end.

Other processes may share the run directory (:mod:`qmc.run.sharing`): rank 0 claims every unit for the
whole farm before it hands it out, keeps the claims alive, sets aside units that a live process holds
(trying them again when its queue is empty) and releases a unit's claims once its outcome is in the
index file.

Stopping: SIGTERM (or SIGINT) on any rank, a worker's unit stopped by the ``--max-time`` budget, a write
fault on any rank (the machine refused a write: full disk, ...), or rank 0's own stop flag puts rank 0
into stop mode: it sends :class:`~qmc.mpi.protocol.Stop` to every worker, each running unit writes its
checkpoint at its next chunk boundary, prefetched units not yet started are handed back; the workers exit
0 and rank 0 with the status of an unfinished run, or of a write fault (``qmc run``).  A failed task is
recorded (status ``failed`` and its message) and the others go on.
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
    Progress,
    Request,
    Stop,
    TakeBack,
    Unstarted,
    poll_sleep,
)
from qmc.mpi.schedule import Placement, Schedule, unit_cost
from qmc.run.outcome import (
    RunReport,
    StopFlag,
    TaskOutcome,
    mark_running,
    record_outcome,
    record_progress,
    unmark,
)
from qmc.run.plan import RunPlan
from qmc.run.sharing import INDEX_SECONDS, SharedRun
from qmc.run.task_identity import steps_total
from qmc.run.units import is_ladder, run_unit, work_units
from qmc.storage.faults import WriteFault

__all__ = ["INDEX_INTERVAL", "FarmStats", "Coordinator"]

INDEX_INTERVAL = INDEX_SECONDS
"""Least number of seconds between two writes of index.json by rank 0 while the run goes on (the last write
is at the end); the interval grows to 20 times the duration of a write, so that a very large index never
takes more than about 5% of rank 0's time."""

_FIRST_WAIT = 10.0  # at most this many seconds for the workers' first requests before rank 0 computes


@dataclass
class FarmStats:
    """What rank 0 measured: units handed out, seconds spent coordinating (answering messages and writing
    the index; ``index_seconds`` is the part spent writing ``index.json``), progress reports received, and
    the schedule's decisions (prefetches granted and refused, units taken back and handed back)."""

    ranks: int = 0
    units: int = 0
    tasks: int = 0
    handed_out: int = 0
    coordinator_seconds: float = 0.0
    index_seconds: float = 0.0
    wall_seconds: float = 0.0
    index_writes: int = 0
    progress_reports: int = 0
    units_by_rank: dict[int, int] = field(default_factory=dict)
    schedule: dict[str, int] = field(default_factory=dict)

    def as_dict(self) -> dict[str, Any]:
        per = self.coordinator_seconds / self.handed_out if self.handed_out else 0.0
        return {"ranks": self.ranks, "units": self.units, "tasks": self.tasks, "handed_out": self.handed_out,
                "coordinator_seconds": round(self.coordinator_seconds, 6),
                "coordinator_seconds_per_unit": round(per, 6), "index_seconds": round(self.index_seconds, 6),
                "wall_seconds": round(self.wall_seconds, 3),
                "index_writes": self.index_writes, "progress_reports": self.progress_reports,
                "units_by_rank": {str(k): v for k, v in sorted(self.units_by_rank.items())},
                **self.schedule}


class Coordinator:
    """Rank 0's side of the farm for one plan (see the module docstring)."""

    def __init__(self, world: Any, plan: RunPlan, stop_flag: StopFlag, progress: Any, log: logging.Logger,
                 deadline: float | None) -> None:
        self.world, self.channel = world, Channel(world.comm)
        self.plan, self.flag, self.progress, self.log = plan, stop_flag, progress, log
        self.deadline = deadline
        self.shared = SharedRun(plan, log)
        self.schedule = Schedule(work_units(plan.tasks, plan.config.tasks()), plan.index, world.size,
                                 self._members, self.shared.claim)
        self.previous: dict[str, dict[str, Any]] = {}  # index entries before "queued"
        self.outcomes: list[TaskOutcome] = []
        self.stopping = False
        self.stop_reason = ""
        self.fault = ""
        self.stop_sent = False
        self.dirty = False
        self.last_index = 0.0
        self.last_retry = time.monotonic()
        self.index_interval = INDEX_INTERVAL
        self.finished_units: list[int] = []  # outcomes recorded, claims to release after the next write
        self.reporting: dict[int, int] = {}  # unit -> ranks whose outcomes are still to come
        self.own_unit: int | None = None
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
        """Write the index when due (or ``force``), then release the claims of the units finished before;
        a write fault stops the run."""
        now = time.monotonic()
        due = force or now - self.last_index >= self.index_interval
        if not due or not (self.dirty or self.finished_units):
            return
        try:
            self.shared.write_index()
        except WriteFault as exc:
            self._fault(str(exc))
            return
        self.stats.index_writes += 1
        self.last_index = time.monotonic()
        self.stats.index_seconds += self.last_index - now
        self.index_interval = max(INDEX_INTERVAL, 20.0 * (self.last_index - now))
        self.dirty = False
        for u in self.finished_units:
            self.shared.release(self.schedule.units[u])
        self.finished_units = []

    def _started(self, p: Placement, status: str) -> None:
        """Bookkeeping of a placement: the index says queued (on a busy worker) or running, and where; the
        statistics count it."""
        tasks = self.schedule.units[p.unit]
        self.reporting[p.unit] = len(p.ranks)
        self.previous.update(mark_running(self.plan.index, tasks, status, rank=min(p.ranks),
                                          process=self.shared.process))
        self.dirty = True
        for r in p.ranks:
            self.stats.units_by_rank[r] = self.stats.units_by_rank.get(r, 0) + 1
        if p.ranks != (0,):
            self.stats.handed_out += 1
        if len(p.ranks) > 1:
            self.log.info("exchange ladder %s (%d chains) on ranks %s", tasks[0].exchange_group, len(tasks),
                          ", ".join(map(str, p.ranks)))

    def _hand_out(self, p: Placement) -> None:
        """Send a placement to its workers (rank 0, if in it, runs its part itself)."""
        self._started(p, "queued" if len(p.ranks) == 1 else "running")
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
            if o.fault:
                self._fault(o.message)
            elif o.status == "stopped":
                self._stop(o.message or "stopped")
        self.dirty = True

    def _reported(self, unit: int) -> None:
        """One rank of ``unit`` has reported its outcomes; once all have, the unit's claims go with the next
        index write (which holds the outcomes)."""
        self.reporting[unit] = self.reporting.get(unit, 1) - 1
        if self.reporting[unit] <= 0:
            del self.reporting[unit]
            self.finished_units.append(unit)

    def progressed(self, unit: int, steps_done: int, bins_done: int) -> None:
        """A running unit's tasks are at ``steps_done`` steps (each) and ``bins_done`` bins (-1: unknown)."""
        tasks = self.schedule.units[unit]
        if bins_done < 0:
            bins_done = int(self.plan.index["tasks"][tasks[0].task_id].get("bins_done", 0))
        record_progress(self.plan.index, tasks, steps_done, bins_done)
        self.schedule.progress(unit, unit_cost(tasks, self.plan.index))
        self.dirty = True

    def _stop(self, reason: str) -> None:
        if not self.stopping:
            self.stopping, self.stop_reason = True, reason
            self.log.info("stopping all ranks: %s", reason)
        if not self.flag.is_set():  # rank 0's own unit checkpoints and stops too
            self.flag.set(reason)

    def _fault(self, message: str) -> None:
        """The machine refused a write: every rank checkpoints and stops (the first fault is reported)."""
        self.fault = self.fault or message
        self._stop(message)

    # -------------------------------------------------------------------------------------------- messages
    def _handle(self, rank: int, msg: Message) -> None:
        if isinstance(msg, Progress):
            self.stats.progress_reports += 1
            self.schedule.started(rank, msg.unit)
            self.progressed(msg.unit, msg.steps_done, msg.bins_done)
        elif isinstance(msg, Request):
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
            self._reported(msg.unit)
        elif isinstance(msg, Unstarted):
            self.schedule.handed_back(rank, msg.unit)
            tasks = self.schedule.units[msg.unit]
            unmark(self.plan.index, {t.task_id: self.previous.get(t.task_id, {}) for t in tasks})
            self.dirty = True
        else:  # a message rank 0 does not expect: log it, never crash the run
            self.log.error("rank %d sent an unexpected message %r", rank, msg)

    def serve(self) -> None:
        """Answer every waiting message; broadcast a stop; take back prefetched units for idle ranks; keep
        the claims alive; write the index when due."""
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
        if not self.schedule.queue and self.schedule.elsewhere and time.monotonic() - self.last_retry > 2.0:
            self.last_retry = time.monotonic()  # units of processes that may have died meanwhile
            self.schedule.retry()
        placed, finished = self.schedule.dispatch(self.stopping)
        for p in placed:
            self._hand_out(p)
        for r in finished:
            self.channel.send(Finish(), r)
        for r, u in self.schedule.take_backs(self.own_unit is None, self.stopping):
            self.channel.send(TakeBack(u), r)
        try:
            self.shared.beat()
        except WriteFault as exc:
            self._fault(str(exc))
        self._write_index()
        self.stats.coordinator_seconds += time.perf_counter() - t0

    # -------------------------------------------------------------------------------------------- main loop
    def _run_own(self, p: Placement, sink: _CoordinatorSink, fp: str) -> None:
        """Run rank 0's part of a placement (a single task, or member 0 of a ladder's team)."""
        if len(p.ranks) == 1:
            self._started(p, "running")
        else:
            self._hand_out(p)
        self.own_unit = p.unit
        kwargs = dict(stop_flag=self.flag, progress=sink, logger=self.log, deadline=self.deadline,
                      config_text=self.plan.config.text, config_fingerprint=fp)
        unit = self.schedule.units[p.unit]
        try:
            if len(p.ranks) == 1:
                outcomes = run_unit(unit, self.plan.run_dir, **kwargs)
            else:
                team = form_team(self.world.comm, list(p.ranks), tag=p.unit)
                try:
                    outcomes = run_unit(unit, self.plan.run_dir, team=team, **kwargs)
                finally:
                    team.close()
        finally:
            self.own_unit = None
        self.schedule.returned(0, p.unit)
        self._record(outcomes, 0)
        self._reported(p.unit)

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
        try:
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
        finally:
            self.shared.close()
        self.stats.wall_seconds = time.perf_counter() - t_start
        self.stats.schedule = dict(self.schedule.counts)
        self.log.info("MPI farm statistics: %s", json.dumps(self.stats.as_dict()))
        unfinished = self.plan.unfinished()
        elsewhere = self.shared.elsewhere(unfinished)
        return RunReport(self.outcomes, [t for t in unfinished if t not in elsewhere],
                         self.fault or self.stop_reason, self.fault, list(elsewhere))


class _CoordinatorSink:
    """Progress sink of rank 0's own units: shows them, keeps their index entries current and answers the
    workers between chunks."""

    def __init__(self, progress: Any, coordinator: Coordinator) -> None:
        self.progress, self.coordinator = progress, coordinator
        self.per_task = 1

    def task_started(self, task_id: str, steps_done: int, steps_total_: int, bins_total: int) -> None:
        c = self.coordinator
        first = c.schedule.units[c.own_unit][0] if c.own_unit is not None else None
        self.per_task = max(1, steps_total_ // max(steps_total(first), 1)) if first is not None else 1
        self.progress.task_started(task_id, steps_done, steps_total_, bins_total)

    def task_advanced(self, steps_done: int, bins_done: int) -> None:
        self.progress.task_advanced(steps_done, bins_done)
        c = self.coordinator
        if c.own_unit is not None:
            c.progressed(c.own_unit, steps_done // self.per_task, bins_done)
        c.serve()

    def task_finished(self, status: str) -> None:
        self.progress.task_finished(status)

    def message(self, text: str) -> None:
        self.progress.message(text)
