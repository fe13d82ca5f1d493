"""A simulated MPI farm: the real :class:`~qmc.mpi.schedule.Schedule` driven through K ranks' events.

What it models, as the farm does it (:mod:`qmc.mpi.coordinator`, :mod:`qmc.mpi.worker`):

* every rank works at the same speed: a unit of cost c takes c seconds;
* rank 0 runs its own units in chunks of ``chunk`` seconds and answers the workers' messages only between
  two chunks (at once when it has no unit of its own); it takes a unit itself whenever it is free;
* a worker that starts a unit reports it and asks for its next one (prefetch); it reports its progress
  every ``report`` seconds (the coordinator's estimate of its work left is as old as that); finishing a
  unit it reports, then starts its prefetched unit if it got one, else asks and waits for the answer;
* a prefetched unit taken back by rank 0 is handed back at the worker's next chunk boundary (or before
  it would start it), unless the worker has started it.

:func:`simulate` returns the makespan, the lower bound max(largest unit, total / K) and the counts of the
schedule's decisions; the time spent inside the schedule's methods per unit (and per progress report)
measures the coordinator's share of the cost of placing a unit without MPI (messages and the index come
on top).
"""

from __future__ import annotations

import heapq
import math
import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from types import SimpleNamespace
from typing import Any

from qmc.mpi.schedule import Schedule

__all__ = ["FarmResult", "simulate"]


@dataclass
class FarmResult:
    """Outcome of a simulated farm (times in the units of the costs, i.e. seconds of one rank)."""

    ranks: int
    units: int
    makespan: float
    bound: float
    idle_fraction: float
    counts: dict[str, int]
    schedule_seconds_per_unit: float
    schedule_seconds_per_report: float

    @property
    def ratio(self) -> float:
        """makespan / lower bound (1 is perfect)."""
        return self.makespan / self.bound if self.bound > 0 else 1.0

    def as_dict(self) -> dict[str, Any]:
        return {"ranks": self.ranks, "units": self.units, "makespan": round(self.makespan, 3),
                "lower_bound": round(self.bound, 3), "makespan_over_bound": round(self.ratio, 4),
                "idle_fraction": round(self.idle_fraction, 4), **self.counts,
                "schedule_seconds_per_unit": round(self.schedule_seconds_per_unit, 7),
                "schedule_seconds_per_progress_report": round(self.schedule_seconds_per_report, 8)}


def _unit(i: int, cost: float) -> list[Any]:
    """A one-task unit whose :func:`~qmc.mpi.schedule.unit_cost` is ``cost`` (one cell, beta = cost, one
    step)."""
    sampling = SimpleNamespace(warmup_steps=0, measure_steps=1)
    return [SimpleNamespace(task_id=f"u{i}", size=(1,), beta=float(cost), exchange_group=None,
                            sampling=sampling)]


@dataclass
class _Worker:
    unit: int | None = None
    start: float = 0.0
    end: float = 0.0
    answer: int | str | None = None  # "pending" (prefetch asked), a unit, or None
    after: bool = False  # finished its unit, waits for the prefetch answer
    started: set[int] = field(default_factory=set)
    inbox: list[int] = field(default_factory=list)  # units to take back, not yet read


class _Farm:
    def __init__(self, costs: Sequence[float], seconds: Sequence[float], ranks: int, chunk: float,
                 report: float, **rules: Any) -> None:
        self.k, self.chunk, self.report = ranks, chunk, report
        self.s = Schedule([_unit(i, c) for i, c in enumerate(costs)], None, ranks, lambda u: 1, **rules)
        order = [int(u[0].task_id[1:]) for u in self.s.units]
        self.est = self.s.cost  # estimated costs, by schedule position
        self.cost = [float(seconds[i]) for i in order]  # actual durations, by schedule position
        self.t = 0.0
        self.events: list[tuple[float, int, str, int]] = []
        self.seq = 0
        self.mail: list[tuple[int, str, int]] = []
        self.w = {r: _Worker() for r in range(1, ranks)}
        self.own: int | None = None  # rank 0's unit
        self.own_start = self.own_end = 0.0
        self.last_report = -math.inf
        self.sched_seconds = self.progress_seconds = 0.0
        self.progress_calls = 0
        self.end = 0.0

    def push(self, t: float, kind: str, who: int) -> None:
        self.seq += 1
        heapq.heappush(self.events, (t, self.seq, kind, who))

    def call(self, fn: Any, *args: Any) -> Any:
        t0 = time.perf_counter()
        out = fn(*args)
        dt = time.perf_counter() - t0
        if fn == self.s.progress:
            self.progress_seconds += dt
            self.progress_calls += 1
        else:
            self.sched_seconds += dt
        return out

    # ---------------------------------------------------------------------------------------- workers
    def start(self, r: int, u: int) -> None:
        w = self.w[r]
        w.unit, w.start, w.end, w.answer, w.after = u, self.t, self.t + self.cost[u], "pending", False
        w.started.add(u)
        self.end = max(self.end, w.end)
        self.push(w.end, "finish", r)
        self.mail += [(r, "started", u), (r, "prefetch", -1)]

    def read_inbox(self, r: int) -> None:
        w = self.w[r]
        for u in w.inbox:
            if u not in w.started:
                self.mail.append((r, "unstarted", u))
                if w.answer == u:
                    w.answer = None
        w.inbox.clear()

    def next_step(self, r: int) -> None:
        """Worker ``r`` is between units with its prefetch answer in hand."""
        w = self.w[r]
        self.read_inbox(r)
        if isinstance(w.answer, int):
            self.start(r, w.answer)
        else:
            w.answer = None
            self.mail.append((r, "wait", -1))

    def finish(self, r: int) -> None:
        w = self.w[r]
        self.mail.append((r, "done", w.unit))
        w.unit = None
        if w.answer == "pending":
            w.after = True
        else:
            self.next_step(r)

    # ---------------------------------------------------------------------------------------- rank 0
    def est_left(self, u: int, end: float) -> float:
        """What a progress report says: the estimated cost times the fraction of the steps left."""
        return self.est[u] * max(end - self.t, 0.0) / self.cost[u] if self.cost[u] > 0 else 0.0

    def serve(self) -> None:
        s = self.s
        if self.t - self.last_report >= self.report:  # the workers' latest progress reports
            self.last_report = self.t
            for w in self.w.values():
                if w.unit is not None:
                    self.call(s.progress, w.unit, self.est_left(w.unit, w.end))
        while self.mail:
            mail, self.mail = self.mail, []
            for r, kind, u in mail:
                if kind == "done":
                    self.call(s.returned, r, u)
                elif kind == "started":
                    self.call(s.started, r, u)
                elif kind == "wait":
                    self.call(s.wait, r)
                elif kind == "unstarted":
                    self.call(s.handed_back, r, u)
                elif kind == "prefetch":
                    p = self.call(s.prefetch, r, False)
                    w = self.w[r]
                    w.answer = p.unit if p is not None else None
                    if w.after:
                        w.after = False
                        self.next_step(r)
            placed, _ = self.call(s.dispatch, False)
            for p in placed:
                self.start(p.ranks[0], p.unit)
        for r, u in self.call(s.take_backs, self.own is None, False):
            w = self.w[r]
            w.inbox.append(u)
            boundary = w.start + self.chunk * math.ceil((self.t - w.start) / self.chunk + 1e-12)
            self.push(min(boundary, w.end), "inbox", r)

    def rank0(self) -> None:
        """Rank 0 between chunks: answer, then take a unit if free."""
        self.serve()
        if self.own is None:
            p = self.call(self.s.own, False)
            if p is not None:
                self.own, self.own_start = p.unit, self.t
                self.own_end = self.t + self.cost[p.unit]
                self.end = max(self.end, self.own_end)
                self.push(min(self.t + self.chunk, self.own_end), "chunk", 0)
                self.serve()  # what arrived meanwhile (nothing: the same instant)

    def run(self) -> float:
        for r in range(1, self.k):
            self.mail.append((r, "wait", -1))
        self.rank0()
        while self.events:
            self.t, _, kind, who = heapq.heappop(self.events)
            if kind == "finish":
                if self.w[who].unit is not None and self.w[who].end == self.t:
                    self.finish(who)
            elif kind == "inbox":
                if self.w[who].inbox:
                    self.read_inbox(who)
            elif kind == "chunk":
                if self.t >= self.own_end:
                    self.call(self.s.returned, 0, self.own)
                    self.own = None
                else:
                    self.call(self.s.progress, self.own, self.est_left(self.own, self.own_end))
                    self.push(min(self.t + self.chunk, self.own_end), "chunk", 0)
            if kind == "chunk" or self.own is None:
                self.rank0()
        return self.end


def simulate(costs: Sequence[float], ranks: int, *, seconds: Sequence[float] | None = None,
             chunk: float = 0.3, report: float = 2.0, prefetch_rule: str = "cost",
             take_back: bool = True) -> FarmResult:
    """Run units of estimated ``costs`` on a simulated farm of ``ranks`` ranks (see the module docstring)
    with the schedule's ``prefetch_rule`` and ``take_back`` settings.  A unit takes ``seconds[i]`` on one
    rank (default: its cost, a perfect estimate); progress reports scale the estimate by the fraction of
    the steps left, as the farm's do."""
    seconds = list(costs) if seconds is None else list(seconds)
    farm = _Farm(costs, seconds, ranks, chunk, report, prefetch_rule=prefetch_rule, take_back=take_back)
    makespan = farm.run()
    if farm.s.queue or any(w.unit is not None for w in farm.w.values()):
        raise RuntimeError("simulated farm stopped with work left")  # a bug of the schedule
    total = float(sum(seconds))
    bound = max(max(seconds, default=0.0), total / ranks)
    idle = 1.0 - total / (ranks * makespan) if makespan > 0 else 0.0
    per_report = farm.progress_seconds / farm.progress_calls if farm.progress_calls else 0.0
    return FarmResult(ranks, len(costs), makespan, bound, idle, dict(farm.s.counts),
                      farm.sched_seconds / max(len(costs), 1), per_report)
