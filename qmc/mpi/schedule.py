"""Which rank of the MPI farm runs which unit of work: the queue and its rules, with no MPI in it.

Rank 0 keeps one :class:`Schedule` and carries out its answers (:mod:`qmc.mpi.coordinator`);
:mod:`qmc.mpi.simulation` drives the same object through a simulated farm of any size.  The rules:

* units (single tasks and whole ladders, :func:`qmc.run.units.work_units`) are queued largest first by
  their estimated cost (:func:`unit_cost`: beta times the total operator weight per step, about N beta,
  times the steps left), and the queue order is kept: a ladder at the front holds back the units behind
  it until its team can be formed;
* a worker waiting for work (:meth:`Schedule.wait`) gets the front unit if it is a single task, or a place
  in the front ladder's team once enough ranks wait (:meth:`Schedule.dispatch`); rank 0 takes the front
  unit itself between its rounds of answering (:meth:`Schedule.own`);
* a worker that has just started a single task may ask for its next one, to start it without waiting for
  rank 0's answer ("prefetch", :meth:`Schedule.prefetch`).  Granted only when the unit, waiting behind
  the worker's current one, would still finish by the time the farm would finish all the work left if
  it were spread evenly over the K ranks (the queue, the running units' work left from their progress
  reports, the prefetched units)::

      left(r) + cost(unit)  <=  (queue + sum_s left(s) + prefetched) / K

  and never while some rank waits: a large unit is never put behind another one while ranks would idle
  (it would rather start on the next free rank), and while much work is left the prefetch hides rank 0's
  answer.  Estimates can be wrong (a task slower than its weight says), so
* a prefetched unit not yet started is taken back (:meth:`Schedule.take_backs`) as soon as a rank is idle
  with nothing in the queue, largest first; the worker hands it back unless it has just started it;
* units whose tasks another process holds (a job array sharing the run directory, ``claim`` returns
  False) are set aside (:attr:`Schedule.elsewhere`) and may be queued again (:meth:`Schedule.retry`);
* when the queue is empty and nothing can come back, waiting workers are told to finish.
"""

from __future__ import annotations

import bisect
from collections import deque
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

from qmc.config.parser import Task
from qmc.run.task_identity import steps_total, task_weight

__all__ = ["PREFETCH_RULES", "unit_cost", "Placement", "Schedule"]

PREFETCH_RULES = ("cost", "queue-length", "never")
"""``cost``: the rule above (the farm's); ``queue-length``: granted while at least K units are queued (the
rule before, kept for comparison in :mod:`qmc.mpi.simulation`); ``never``: no prefetching."""


def unit_cost(unit: Sequence[Task], index: dict[str, Any] | None = None) -> float:
    """Estimated cost of a unit: sum over its tasks of (cells x beta) x (steps left, from the index)."""
    total = 0.0
    for t in unit:
        done = int(index["tasks"].get(t.task_id, {}).get("steps_done", 0)) if index else 0
        total += task_weight(t) * max(steps_total(t) - done, 0)
    return total


@dataclass(frozen=True)
class Placement:
    """Unit ``unit`` (a position in :attr:`Schedule.units`) runs on ``ranks``: one rank for a single task,
    the team of a ladder in member order."""

    unit: int
    ranks: tuple[int, ...]


class Schedule:
    """The queue of ``units`` over ``ranks`` ranks (rank 0 included); ``members(unit)`` is the number of
    ranks a unit needs (1 for a single task, the team size of a ladder); ``claim(unit)`` says whether this
    run may run it (default: always); ``prefetch_rule`` is one of :data:`PREFETCH_RULES` and
    ``take_back`` switches taking back prefetched units (both for comparisons; the farm uses the
    defaults)."""

    def __init__(self, units: Sequence[list[Task]], index: dict[str, Any] | None, ranks: int,
                 members: Callable[[list[Task]], int], claim: Callable[[list[Task]], bool] | None = None,
                 *, prefetch_rule: str = "cost", take_back: bool = True) -> None:
        if prefetch_rule not in PREFETCH_RULES:
            raise ValueError(f"prefetch_rule must be one of {PREFETCH_RULES}, not {prefetch_rule!r}")
        costs = [unit_cost(u, index) for u in units]
        order = sorted(range(len(units)), key=lambda i: (-costs[i], i))
        self.units = [units[i] for i in order]
        self.cost = [costs[i] for i in order]
        self.ranks = ranks
        self._members = members
        self._claim = claim
        self.prefetch_rule, self.take_back = prefetch_rule, take_back
        self.queue: deque[int] = deque(range(len(self.units)))
        self.queue_cost = sum(self.cost)
        self.waiting: list[int] = []  # workers whose request for work is not answered yet, oldest first
        self.running: dict[int, int | None] = dict.fromkeys(range(ranks))  # rank -> unit it runs
        self.on: dict[int, tuple[int, ...]] = {}  # unit -> ranks it was started on
        self.left = [0.0] * ranks  # estimated cost left of each rank's running unit (its share of a team's)
        self.left_total = 0.0
        self.reserved: dict[int, int] = {}  # worker -> prefetched unit it has not started
        self.reserved_cost = 0.0
        self.taking_back: set[int] = set()
        self.finished: set[int] = set()  # workers told to finish
        self.elsewhere: list[int] = []  # units held by other processes sharing the run directory
        self.counts = {"prefetch_granted": 0, "prefetch_refused": 0, "take_backs": 0, "handed_back": 0}

    def members(self, unit: int) -> int:
        return self._members(self.units[unit])

    # ------------------------------------------------------------------------------------------ bookkeeping
    def _set_left(self, rank: int, value: float) -> None:
        self.left_total += value - self.left[rank]
        self.left[rank] = value

    def _run(self, unit: int, ranks: tuple[int, ...]) -> None:
        share = self.cost[unit] / len(ranks)
        self.on[unit] = ranks
        for r in ranks:
            self.running[r] = unit
            self._set_left(r, share)

    def _place(self, ranks: tuple[int, ...], reserve: bool = False) -> Placement | None:
        """Pop the front unit for ``ranks`` (running, or prefetched by the single rank); None when another
        process holds it (it is set aside)."""
        unit = self.queue.popleft()
        self.queue_cost -= self.cost[unit]
        if self._claim is not None and not self._claim(self.units[unit]):
            self.elsewhere.append(unit)
            return None
        if reserve:
            self.reserved[ranks[0]] = unit
            self.reserved_cost += self.cost[unit]
        else:
            self._run(unit, ranks)
        return Placement(unit, ranks)

    def requeue(self, unit: int) -> None:
        """Put ``unit`` back into the queue at its place by cost."""
        keys = [(-self.cost[u], u) for u in self.queue]
        self.queue.insert(bisect.bisect_left(keys, (-self.cost[unit], unit)), unit)
        self.queue_cost += self.cost[unit]

    def retry(self) -> None:
        """Queue the units set aside for other processes again (their claims are tried when placed)."""
        units, self.elsewhere = self.elsewhere, []
        for u in units:
            self.requeue(u)

    # ------------------------------------------------------------------------------------------ requests
    def wait(self, rank: int) -> None:
        """A worker asks for work (it has none): answered by :meth:`dispatch`."""
        self.waiting.append(rank)

    def _prefetch_ok(self, rank: int, unit: int) -> bool:
        if self.prefetch_rule == "never":
            return False
        if self.prefetch_rule == "queue-length":
            return len(self.queue) >= self.ranks
        if self.waiting:
            return False
        balanced = (self.queue_cost + self.left_total + self.reserved_cost) / self.ranks
        return self.left[rank] + self.cost[unit] <= balanced

    def prefetch(self, rank: int, stopping: bool) -> Placement | None:
        """A worker that has just started a unit asks for its next one: the front unit if granted."""
        while not stopping and self.queue and rank not in self.reserved:
            unit = self.queue[0]
            if self.members(unit) != 1 or not self._prefetch_ok(rank, unit):
                break
            p = self._place((rank,), reserve=True)
            if p is not None:
                self.counts["prefetch_granted"] += 1
                return p
        self.counts["prefetch_refused"] += 1
        return None

    def _can_return(self) -> bool:
        """Whether a unit may still come back into the queue (a prefetched one)."""
        return self.take_back and bool(self.reserved)

    def dispatch(self, stopping: bool) -> tuple[list[Placement], list[int]]:
        """Answer the waiting workers as far as possible: units placed, and workers to finish."""
        placed: list[Placement] = []
        while self.waiting:
            if stopping or (not self.queue and not self._can_return()):
                done, self.waiting = self.waiting, []
                self.finished.update(done)
                return placed, done
            if not self.queue:
                break
            need = self.members(self.queue[0])
            if need == 1:
                rank = self.waiting.pop(0)
                p = self._place((rank,))
                if p is None:
                    self.waiting.insert(0, rank)
                else:
                    placed.append(p)
            elif len(self.waiting) >= need:
                ranks = tuple(sorted(self.waiting[:need]))
                del self.waiting[:need]
                p = self._place(ranks)
                if p is None:
                    self.waiting[:0] = list(ranks)
                else:
                    placed.append(p)
            else:
                break
        return placed, []

    def own(self, stopping: bool) -> Placement | None:
        """What rank 0 runs now: the front single task, or the front ladder with rank 0 as member 0 and
        waiting workers as the others; None when there is nothing it can start."""
        while not stopping and self.queue:
            need = self.members(self.queue[0])
            if need == 1:
                p = self._place((0,))
            elif len(self.waiting) + 1 < need:
                return None
            else:
                ranks = (0, *sorted(self.waiting[:need - 1]))
                p = self._place(ranks)
                if p is not None:
                    del self.waiting[:need - 1]
            if p is not None:
                return p
        return None

    def take_backs(self, rank0_idle: bool, stopping: bool) -> list[tuple[int, int]]:
        """Prefetched units to take back now, as (worker, unit): while ranks are idle (waiting workers,
        and rank 0 if ``rank0_idle``) and the queue is empty, the largest ones first, one per idle rank."""
        if stopping or not self.take_back or self.queue:
            return []
        idle = len(self.waiting) + int(rank0_idle) - len(self.taking_back)
        if idle <= 0:
            return []
        candidates = sorted(((u, r) for r, u in self.reserved.items() if u not in self.taking_back),
                            key=lambda x: (-self.cost[x[0]], x[0]))[:idle]
        self.taking_back.update(u for u, _ in candidates)
        self.counts["take_backs"] += len(candidates)
        return [(r, u) for u, r in candidates]

    # ------------------------------------------------------------------------------------------ reports
    def started(self, rank: int, unit: int) -> None:
        """A worker reports that it has started ``unit`` (its prefetched one, or one just placed)."""
        if self.reserved.get(rank) == unit:
            del self.reserved[rank]
            self.reserved_cost -= self.cost[unit]
            self.taking_back.discard(unit)
            self._run(unit, (rank,))

    def progress(self, unit: int, cost_left: float) -> None:
        """The running ``unit`` has ``cost_left`` left (shared evenly by the ranks running it)."""
        ranks = [r for r in self.on.get(unit, ()) if self.running[r] == unit]
        for r in ranks:
            self._set_left(r, cost_left / len(ranks))

    def returned(self, rank: int, unit: int) -> None:
        """A rank reported ``unit`` done (or stopped, or failed -- a prefetched one may fail before its
        start was reported)."""
        self.started(rank, unit)
        if self.running.get(rank) == unit:
            self.running[rank] = None
            self._set_left(rank, 0.0)

    def handed_back(self, rank: int, unit: int) -> None:
        """A worker handed back its prefetched ``unit`` unstarted (taken back, or the run stops)."""
        if self.reserved.get(rank) == unit:
            del self.reserved[rank]
            self.reserved_cost -= self.cost[unit]
            self.counts["handed_back"] += 1
            self.requeue(unit)
        self.taking_back.discard(unit)

    # ------------------------------------------------------------------------------------------ state
    def has_work(self, stopping: bool) -> bool:
        return not stopping and bool(self.queue)

    def workers_not_heard(self) -> bool:
        """Whether some worker has neither work nor a pending request (at start-up: not asked yet)."""
        return any(self.running[r] is None and r not in self.reserved and r not in self.finished
                   and r not in self.waiting for r in range(1, self.ranks))

    def all_finished(self) -> bool:
        """Whether every worker has been told to finish."""
        return len(self.finished) == self.ranks - 1
