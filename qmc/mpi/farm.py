"""MPI task farm behind ``mpiexec -n K qmc run CONFIG``: dynamic load balancing over K ranks.

Detection (:func:`mpi_world`): mpi4py is imported only when the process looks started by an MPI launcher
(environment variables of MPICH/Hydra, Intel MPI, Open MPI, MVAPICH, PMIx) or when ``QMC_MPI=1``;
``QMC_MPI=0`` forces a serial run.  With one rank, or without mpi4py, ``qmc run`` runs serially exactly as
before.  Without mpi4py but with a launcher that started K > 1 processes, rank 0 (from the launcher's
environment) runs everything serially and the others exit at once, so no task runs twice.

Scheme (rank 0 coordinates AND computes, by interleaving): the units of work are single tasks and whole
replica-exchange ladders (``work_units``), queued largest first (estimated cost: lattice
cells x beta x steps left x tasks in the unit).  Rank 0 takes units from the queue itself and runs them in
chunks of about 0.3 s (:func:`qmc.run.serial.run_task` chunks); between two chunks, and whenever it has no
unit of its own, it answers the other ranks' messages (``Iprobe``): a request gets the next unit (or
"finish" when the queue is empty or the run is stopping), a report of finished tasks goes into the run
index.  To hide the up-to-one-chunk answer delay, a worker asks for its next unit as soon as it starts
one ("prefetch"); such a request is granted only while at least K units are queued, so that near the
end no unit waits behind another one while some rank is idle.  Everything sent by rank 0 uses ``isend``
(it never blocks on a busy worker); all waits are ``Iprobe`` polls with short sleeps, so signals are
handled promptly and idle ranks do not spin.  The farm itself uses only standard point-to-point calls and
one ``bcast`` (``send/isend/recv/Iprobe/bcast``, pickled objects); ladder teams add ``Create_group``,
``allgather`` and ``sendrecv`` on their own communicators.

Exchange ladders: a ladder of M chains runs side by side on ``p = team_size(M, min(K, exchange_ranks))``
ranks (:mod:`qmc.exchange.team`).  Rank 0 keeps the queue order: waiting workers are answered by
:meth:`_Coordinator._dispatch`; when the front unit is a ladder it waits until p ranks wait for work (rank 0
counts when it has no unit of its own), then sends each of them ("team", unit, ranks); the team makes its
own communicator (``Create_group``, collective over its members only) and each member reports the
outcomes of its chains.  Prefetching is granted for single tasks only.

Files: each task file is written only by the rank that runs the task (a ladder's by the rank of its block);
``index.json`` and ``run.log`` only by rank 0 (workers ship their log lines with their reports).  The
index is rewritten at most every :data:`INDEX_INTERVAL` seconds while running, and at the end.

Stopping: SIGTERM (or SIGINT) on any rank, a worker's task stopped by the ``--max-time`` budget, or
rank 0's own stop flag puts rank 0 into stop mode: it sends a stop message to every worker, each running
task writes its checkpoint at its next chunk boundary, unstarted prefetched units are handed back, and all
ranks exit 0.  A failed task is recorded (status ``failed`` and its message) and the others go on.
"""

from __future__ import annotations

import json
import logging
import os
import sys
import time
from collections import deque
from dataclasses import dataclass, field
from typing import Any

from qmc.exchange.team import form_team, team_size
from qmc.run.outcome import RunReport, TaskOutcome
from qmc.run.outcome import record_outcome as update_index
from qmc.run.plan import RunPlan
from qmc.run.task_identity import task_weight
from qmc.run.units import is_ladder, run_unit, work_units
from qmc.storage.provenance import now_iso
from qmc.storage.run_index import write_index

__all__ = [
    "INDEX_INTERVAL", "MpiWorld", "FarmStats", "launcher_rank_size", "mpi_world", "unit_cost",
    "run_farm", "run_worker",
]

INDEX_INTERVAL = 2.0
"""Least number of seconds between two writes of index.json by rank 0 while the run goes on (the last write
is at the end); the interval grows to 20 times the duration of a write, so that a very large index never
takes more than about 5% of rank 0's time."""

TAG_WORK, TAG_STOP, TAG_MSG = 11, 12, 13
_FINISH = "finish"
_NONE = "none"
_POLL_MIN, _POLL_MAX = 0.0005, 0.02  # seconds between two polls while waiting (growing geometrically)
_FIRST_WAIT = 10.0  # at most this many seconds for the workers' first requests before rank 0 computes
_LAUNCHER_ENV = (  # (rank variable, size variable) set by common MPI launchers
    ("PMI_RANK", "PMI_SIZE"),  # MPICH (Hydra), Intel MPI, Slurm PMI-2
    ("OMPI_COMM_WORLD_RANK", "OMPI_COMM_WORLD_SIZE"),  # Open MPI
    ("MV2_COMM_WORLD_RANK", "MV2_COMM_WORLD_SIZE"),  # MVAPICH
    ("PMIX_RANK", None),  # PMIx (size known only to MPI)
)


@dataclass
class MpiWorld:
    """The MPI communicator of this run (``comm`` is mpi4py's COMM_WORLD).

    ``idle`` marks an extra process started by a launcher when mpi4py is missing: it must do nothing.
    """

    comm: Any
    rank: int
    size: int
    idle: bool = False

    def cancel(self) -> None:
        """Rank 0: tell the workers that the run will not start (bad configuration, refused directory)."""
        if self.comm is not None and self.rank == 0:
            self.comm.bcast({"ok": False}, root=0)


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


def launcher_rank_size() -> tuple[int, int | None] | None:
    """(rank, size) announced by an MPI launcher in the environment, None when there is none."""
    for rank_var, size_var in _LAUNCHER_ENV:
        if rank_var in os.environ:
            try:
                rank = int(os.environ[rank_var])
                size = int(os.environ[size_var]) if size_var and size_var in os.environ else None
            except ValueError:
                continue
            return rank, size
    return None


def mpi_world() -> MpiWorld | None:
    """The MPI world when this process is one of K > 1 MPI ranks, else None (run serially).

    Returns an ``idle`` world for the extra processes of a launcher when mpi4py cannot be imported (rank 0
    prints a warning and runs serially).  ``QMC_MPI=0`` never uses MPI, ``QMC_MPI=1`` always tries.
    """
    setting = os.environ.get("QMC_MPI", "").strip().lower()
    if setting in ("0", "no", "off", "false"):
        return None
    launched = launcher_rank_size()
    if launched is None and setting not in ("1", "yes", "on", "true"):
        return None
    try:
        from mpi4py import MPI
    except ImportError as exc:
        if launched is None:
            return None
        rank, size = launched
        if rank == 0:
            count = "?" if size is None else size
            print(f"warning: started by an MPI launcher ({count} processes) but mpi4py "
                  f"cannot be imported ({exc}); install it (pip extra 'mpi'). Rank 0 runs every task "
                  "serially; the other processes exit.", file=sys.stderr, flush=True)
            return None
        return MpiWorld(None, rank, size or 0, idle=True)
    comm = MPI.COMM_WORLD
    if comm.Get_size() < 2:
        return None
    return MpiWorld(comm, comm.Get_rank(), comm.Get_size())


def unit_cost(unit: list[Any], index: dict[str, Any] | None = None) -> float:
    """Estimated cost of a unit: sum over its tasks of (cells x beta) x (steps left)."""
    total = 0.0
    for t in unit:
        steps = t.sampling.warmup_steps + t.sampling.measure_steps
        done = int(index["tasks"].get(t.task_id, {}).get("steps_done", 0)) if index else 0
        total += task_weight(t) * max(steps - done, 0)
    return total


# ----------------------------------------------------------------------------------------------------------
# log lines of workers travel to rank 0


class _Buffer(logging.Handler):
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


def _outcome_dict(o: TaskOutcome) -> dict[str, Any]:
    return {"task_id": o.task_id, "status": o.status, "message": o.message, "bins_done": o.bins_done,
            "bins_total": o.bins_total, "steps_done": o.steps_done, "steps_total": o.steps_total,
            "seconds": o.seconds, "path": o.path}


def _poll_sleep(wait: float) -> float:
    time.sleep(wait)
    return min(wait * 1.5, _POLL_MAX)


# ----------------------------------------------------------------------------------------------------------
# rank 0


class _Coordinator:
    def __init__(self, world: MpiWorld, plan: RunPlan, stop_flag: Any, progress: Any, log: logging.Logger,
                 deadline: float | None) -> None:
        self.world, self.comm = world, world.comm
        self.plan, self.flag, self.progress, self.log = plan, stop_flag, progress, log
        self.deadline = deadline
        units = work_units(plan.tasks, plan.config.tasks())
        order = sorted(range(len(units)), key=lambda i: (-unit_cost(units[i], plan.index), i))
        self.units = [units[i] for i in order]
        self.queue: deque[int] = deque(range(len(self.units)))
        self.inflight: dict[int, set[int]] = {r: set() for r in range(1, world.size)}
        self.idle: list[int] = []  # workers whose request for work is not answered yet, oldest first
        self.finished: set[int] = set()
        self.previous: dict[str, dict[str, Any]] = {}  # index entries before "running"
        self.outcomes: list[TaskOutcome] = []
        self.sends: list[Any] = []
        self.stopping = False
        self.stop_reason = ""
        self.stop_sent = False
        self.dirty = False
        self.last_index = 0.0
        self.index_interval = INDEX_INTERVAL
        n_tasks = sum(len(u) for u in self.units)
        self.stats = FarmStats(ranks=world.size, units=len(self.units), tasks=n_tasks)
        self.n_reported = 0

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

    def _mark_running(self, unit: list[Any]) -> None:
        for t in unit:
            entry = self.plan.index["tasks"][t.task_id]
            self.previous[t.task_id] = {k: entry.get(k) for k in ("status", "updated")}
            entry.update(status="running", updated=now_iso())
        self.dirty = True

    def _record(self, outcomes: list[TaskOutcome], rank: int) -> None:
        for o in outcomes:
            self.outcomes.append(o)
            update_index(self.plan.index, o)
            self.n_reported += 1
            self.progress.message(f"{o.status} {o.task_id} on rank {rank} ({o.bins_done}/{o.bins_total} "
                                  f"bins, {o.seconds:.1f} s) [{self.n_reported}/{self.stats.tasks}]"
                                  + (f": {o.message}" if o.message and o.status != "done" else ""))
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
    def _send(self, obj: Any, dest: int, tag: int) -> None:
        self.sends.append(self.comm.isend(obj, dest=dest, tag=tag))
        if len(self.sends) > 64:
            self.sends = [r for r in self.sends if not r.test()[0]]

    def _members(self, idx: int) -> int:
        """Ranks a unit runs on: 1 for a single task, :func:`qmc.exchange.team.team_size` for a ladder."""
        unit = self.units[idx]
        if not is_ladder(unit):
            return 1
        cap = unit[0].sampling.exchange_ranks or self.world.size
        return team_size(len(unit), min(cap, self.world.size))

    def _give(self, rank: int) -> None:
        idx = self.queue.popleft()
        unit = self.units[idx]
        self.inflight[rank].add(idx)
        self._mark_running(unit)
        self.stats.handed_out += 1
        self.stats.units_by_rank[rank] = self.stats.units_by_rank.get(rank, 0) + 1
        self._send(("unit", idx, unit), rank, TAG_WORK)

    def _give_team(self, ranks: list[int]) -> int:
        """Hand the ladder at the front of the queue to ``ranks`` (rank 0 among them runs its part itself
        after this returns); returns its unit index."""
        idx = self.queue.popleft()
        unit = self.units[idx]
        self._mark_running(unit)
        self.stats.handed_out += 1
        for r in ranks:
            self.stats.units_by_rank[r] = self.stats.units_by_rank.get(r, 0) + 1
            if r != 0:
                self.inflight[r].add(idx)
                self._send(("team", idx, unit, list(ranks)), r, TAG_WORK)
        self.log.info("exchange ladder %s (%d chains) on ranks %s", unit[0].exchange_group, len(unit),
                      ", ".join(map(str, ranks)))
        return idx

    def _dispatch(self) -> None:
        """Answer the waiting workers: the next unit, a place in a ladder's team once enough of them wait
        (the queue order is kept: a ladder at the front holds back the units behind it), or finish."""
        while self.idle:
            if self.stopping or not self.queue:
                for r in self.idle:
                    self._send((_FINISH,), r, TAG_WORK)
                    self.finished.add(r)
                self.idle.clear()
                return
            need = self._members(self.queue[0])
            if need == 1:
                self._give(self.idle.pop(0))
            elif len(self.idle) >= need:
                ranks = sorted(self.idle[:need])
                del self.idle[:need]
                self._give_team(ranks)
            else:
                return

    def _handle(self, rank: int, msg: tuple) -> None:
        kind = msg[0]
        if kind == "req":
            if not msg[1]:  # waiting for work: answered by _dispatch
                self.idle.append(rank)
            elif (not self.stopping and len(self.queue) >= self.world.size
                  and self._members(self.queue[0]) == 1):
                self._give(rank)  # prefetch: granted only for single tasks while the queue is long
            else:
                self._send((_NONE,), rank, TAG_WORK)
        elif kind == "done":
            _, idx, outcomes, lines = msg
            self.inflight[rank].discard(idx)
            for level, text in lines:
                self.log.log(level, "rank %d: %s", rank, text)
            self._record([TaskOutcome(**d) for d in outcomes], rank)
        elif kind == "unstarted":
            idx = msg[1]
            self.inflight[rank].discard(idx)
            for t in self.units[idx]:
                entry = self.plan.index["tasks"][t.task_id]
                entry.update({k: v for k, v in self.previous.get(t.task_id, {}).items() if v is not None})
            self.dirty = True
        else:  # a message this version does not know: log it, never crash the run
            self.log.error("rank %d sent an unknown message %r", rank, kind)

    def serve(self) -> None:
        """Answer every waiting message; broadcast a stop; write the index when due."""
        from mpi4py import MPI

        t0 = time.perf_counter()
        status = MPI.Status()
        while self.comm.Iprobe(source=MPI.ANY_SOURCE, tag=TAG_MSG, status=status):
            src = status.Get_source()
            self._handle(src, self.comm.recv(source=src, tag=TAG_MSG))
        if self.flag.is_set():
            self._stop(getattr(self.flag, "reason", "") or "stop requested")
        if self.deadline is not None and time.time() >= self.deadline:
            self._stop("time budget used up")
        if self.stopping and not self.stop_sent:
            self.stop_sent = True
            for r in range(1, self.world.size):
                if r not in self.finished:
                    self._send(self.stop_reason, r, TAG_STOP)
        self._dispatch()
        self._write_index()
        self.stats.coordinator_seconds += time.perf_counter() - t0

    # -------------------------------------------------------------------------------------------- main loop
    def run(self) -> RunReport:
        t_start = time.perf_counter()
        self.log.info("MPI farm: %d ranks, %d unit(s) of work (%d task(s)), largest first", self.world.size,
                      len(self.units), self.stats.tasks)
        sink = _CoordinatorSink(self.progress, self)
        fp = self.plan.config.fingerprint()
        # hand out first, then compute: every worker's first request is answered before rank 0 starts a
        # unit of its own (they come right after the set-up broadcast; the wait is bounded all the same)
        wait, t0 = _POLL_MIN, time.monotonic()
        while (self.queue and not self.stopping and time.monotonic() - t0 < _FIRST_WAIT
               and any(not self.inflight[r] and r not in self.finished and r not in self.idle
                       for r in self.inflight)):
            self.serve()
            wait = _poll_sleep(wait)
        wait = _POLL_MIN
        while True:
            self.serve()
            if not self.stopping and self.queue:
                need = self._members(self.queue[0])
                if need == 1:
                    idx = self.queue.popleft()
                    unit = self.units[idx]
                    self._mark_running(unit)
                    self.stats.units_by_rank[0] = self.stats.units_by_rank.get(0, 0) + 1
                    outcomes = run_unit(unit, self.plan.run_dir, stop_flag=self.flag, progress=sink,
                                        logger=self.log, deadline=self.deadline,
                                        config_text=self.plan.config.text, config_fingerprint=fp)
                    self._record(outcomes, 0)
                    wait = _POLL_MIN
                    continue
                if len(self.idle) + 1 >= need:  # a ladder's team with rank 0 in it
                    ranks = [0, *sorted(self.idle[:need - 1])]
                    del self.idle[:need - 1]
                    idx = self._give_team(ranks)
                    team = form_team(self.comm, ranks, tag=idx)
                    try:
                        outcomes = run_unit(self.units[idx], self.plan.run_dir, stop_flag=self.flag,
                                            progress=sink, logger=self.log, deadline=self.deadline,
                                            config_text=self.plan.config.text, config_fingerprint=fp,
                                            team=team)
                    finally:
                        team.close()
                    self._record(outcomes, 0)
                    wait = _POLL_MIN
                    continue
            elif len(self.finished) == self.world.size - 1:
                break
            wait = _poll_sleep(wait)
        t0 = time.perf_counter()
        for r in self.sends:
            r.wait()
        self._write_index(force=True)
        self.stats.coordinator_seconds += time.perf_counter() - t0
        self.stats.wall_seconds = time.perf_counter() - t_start
        self.log.info("MPI farm statistics: %s", json.dumps(self.stats.as_dict()))
        selected = [t.task_id for t in self.plan.tasks] + self.plan.done
        unfinished = [tid for tid in selected if self.plan.index["tasks"][tid]["status"] != "done"]
        return RunReport(self.outcomes, unfinished, self.stop_reason)


class _CoordinatorSink:
    """Progress sink of rank 0's own units: shows them and answers the workers between chunks."""

    def __init__(self, progress: Any, coordinator: _Coordinator) -> None:
        self.progress, self.coordinator = progress, coordinator

    def task_started(self, task_id: str, steps_done: int, steps_total: int, bins_total: int) -> None:
        self.progress.task_started(task_id, steps_done, steps_total, bins_total)

    def task_advanced(self, steps_done: int, bins_done: int) -> None:
        self.progress.task_advanced(steps_done, bins_done)
        self.coordinator.serve()

    def task_finished(self, status: str) -> None:
        self.progress.task_finished(status)


def run_farm(world: MpiWorld, plan: RunPlan, *, stop_flag: Any = None, progress: Any = None,
             logger: logging.Logger | None = None, deadline: float | None = None) -> RunReport:
    """Rank 0: hand the plan's units out to all ranks (and run some itself); keeps ``index.json``.

    Same result as ``run_serial``; the statistics are logged and kept in ``run_farm.stats``.
    Any unexpected error aborts the whole MPI job (``MPI_Abort``) rather than leaving ranks waiting.
    """
    from qmc.run.outcome import StopFlag
    from qmc.run.progress import NullProgress

    stop_flag = stop_flag if stop_flag is not None else StopFlag()
    log = logger if logger is not None else logging.getLogger("qmc.run")
    prog = progress if progress is not None else NullProgress()
    try:
        world.comm.bcast({"ok": True, "run_dir": str(plan.run_dir), "config_text": plan.config.text,
                          "fingerprint": plan.config.fingerprint(), "deadline": deadline}, root=0)
        coord = _Coordinator(world, plan, stop_flag, prog, log, deadline)
        report = coord.run()
        run_farm.stats = coord.stats  # type: ignore[attr-defined]
        return report
    except BaseException as exc:
        if isinstance(exc, SystemExit):
            raise
        log.error("MPI farm on rank 0 failed unexpectedly: %s: %s", type(exc).__name__, exc)
        print(f"error: rank 0: {type(exc).__name__}: {exc}; aborting all ranks", file=sys.stderr, flush=True)
        world.comm.Abort(1)
        raise


# ----------------------------------------------------------------------------------------------------------
# ranks 1 .. K-1


class _WorkerSink:
    """Progress sink of a worker: between chunks, looks for rank 0's stop message."""

    def __init__(self, worker: _Worker) -> None:
        self.worker = worker

    def task_started(self, *args: Any) -> None:
        pass

    def task_advanced(self, steps_done: int, bins_done: int) -> None:
        self.worker.check_stop()

    def task_finished(self, status: str) -> None:
        pass


class _Worker:
    def __init__(self, world: MpiWorld, stop_flag: Any) -> None:
        self.world, self.comm, self.flag = world, world.comm, stop_flag
        self.sends: list[Any] = []
        self.buffer = _Buffer()
        self.log = logging.getLogger(f"qmc.run.rank{world.rank}")
        self.log.setLevel(logging.INFO)
        self.log.propagate = False
        self.log.addHandler(self.buffer)

    def send(self, obj: Any) -> None:
        self.sends.append(self.comm.isend(obj, dest=0, tag=TAG_MSG))

    def check_stop(self) -> None:
        if self.comm.Iprobe(source=0, tag=TAG_STOP):
            reason = self.comm.recv(source=0, tag=TAG_STOP)
            if self.flag is not None:
                self.flag.set(f"{reason} (stop sent by rank 0)")

    def receive(self) -> tuple:
        wait = _POLL_MIN
        while not self.comm.Iprobe(source=0, tag=TAG_WORK):
            self.check_stop()
            wait = _poll_sleep(wait)
        return self.comm.recv(source=0, tag=TAG_WORK)

    def stopped(self) -> bool:
        self.check_stop()
        return self.flag is not None and self.flag.is_set()

    def run(self, setup: dict[str, Any]) -> None:
        sink = _WorkerSink(self)
        reserve: tuple | None = None
        while True:
            if reserve is not None:
                msg, reserve = reserve, None
            else:
                self.send(("req", False))
                msg = self.receive()
                if msg[0] == _FINISH:
                    break
            if msg[0] == "team":  # a block of an exchange ladder, side by side with the other ranks
                _, idx, unit, ranks = msg
                team = form_team(self.comm, ranks, tag=idx)
                try:
                    outcomes = run_unit(unit, setup["run_dir"], stop_flag=self.flag, progress=sink,
                                        logger=self.log, deadline=setup["deadline"],
                                        config_text=setup["config_text"],
                                        config_fingerprint=setup["fingerprint"], team=team)
                finally:
                    team.close()
                self.send(("done", idx, [_outcome_dict(o) for o in outcomes], self.buffer.take()))
                continue
            _, idx, unit = msg
            if self.stopped():
                self.send(("unstarted", idx))
                continue
            self.send(("req", True))  # prefetch: the answer waits in the queue while this unit runs
            outcomes = run_unit(unit, setup["run_dir"], stop_flag=self.flag, progress=sink, logger=self.log,
                                deadline=setup["deadline"], config_text=setup["config_text"],
                                config_fingerprint=setup["fingerprint"])
            self.send(("done", idx, [_outcome_dict(o) for o in outcomes], self.buffer.take()))
            answer = self.receive()
            if answer[0] == "unit":
                reserve = answer
        for r in self.sends:
            r.wait()


def run_worker(world: MpiWorld, *, stop_flag: Any = None) -> int:
    """Ranks 1..K-1: run the units rank 0 hands out until it says finish; returns the exit status
    (0, or 2 when rank 0 could not start the run -- rank 0 reports why)."""
    setup = world.comm.bcast(None, root=0)
    if not setup.get("ok"):
        return 2
    worker = _Worker(world, stop_flag)
    try:
        worker.run(setup)
    except BaseException as exc:
        if isinstance(exc, SystemExit):
            raise
        print(f"error: rank {world.rank}: {type(exc).__name__}: {exc}; aborting all ranks", file=sys.stderr,
              flush=True)
        world.comm.Abort(1)
        raise
    return 0
