"""Which rank runs which unit: the farm's queue and its rules, with no MPI in it.

Rank 0 keeps one :class:`Schedule` and carries out its answers (:mod:`qmc.mpi.coordinator`).  The rules:

* units (single tasks and whole ladders, :func:`qmc.run.units.work_units`) are queued largest first by
  :func:`unit_cost`, and the queue order is kept: a ladder at the front holds back the units behind it
  until its team can be formed;
* a worker waiting for work (:meth:`Schedule.wait`) gets the front unit if it is a single task, or a place
  in the front ladder's team once enough ranks wait (:meth:`Schedule.dispatch`); when the queue is empty
  or the run stops it is told to finish;
* rank 0 takes the front unit itself between its rounds of answering (:meth:`Schedule.own`), or a place
  in a ladder's team when, with itself, enough ranks wait;
* a worker that has just started a single task may ask for its next one ("prefetch", hiding the delay
  of rank 0's answer, which comes between two chunks of rank 0's own work); granted only for a single
  task while at least as many units are queued as there are ranks (:meth:`Schedule.prefetch`), so that
  near the end no unit waits behind another one while a rank is idle.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

from qmc.config.parser import Task
from qmc.run.task_identity import steps_total, task_weight

__all__ = ["unit_cost", "Placement", "Schedule"]


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
    ranks a unit needs (1 for a single task, the team size of a ladder)."""

    def __init__(self, units: Sequence[list[Task]], index: dict[str, Any] | None, ranks: int,
                 members: Callable[[list[Task]], int]) -> None:
        order = sorted(range(len(units)), key=lambda i: (-unit_cost(units[i], index), i))
        self.units = [units[i] for i in order]
        self.ranks = ranks
        self._members = members
        self.queue: deque[int] = deque(range(len(self.units)))
        self.waiting: list[int] = []  # workers whose request for work is not answered yet, oldest first
        self.held: dict[int, set[int]] = {r: set() for r in range(1, ranks)}  # units handed to each worker
        self.finished: set[int] = set()  # workers told to finish

    def members(self, unit: int) -> int:
        return self._members(self.units[unit])

    def _place(self, ranks: tuple[int, ...]) -> Placement:
        unit = self.queue.popleft()
        for r in ranks:
            if r != 0:
                self.held[r].add(unit)
        return Placement(unit, ranks)

    # ------------------------------------------------------------------------------------------ requests
    def wait(self, rank: int) -> None:
        """A worker asks for work (it has none): answered by :meth:`dispatch`."""
        self.waiting.append(rank)

    def prefetch(self, rank: int, stopping: bool) -> Placement | None:
        """A worker that has just started a unit asks for its next one: the front unit if granted."""
        if stopping or len(self.queue) < self.ranks or self.members(self.queue[0]) != 1:
            return None
        return self._place((rank,))

    def dispatch(self, stopping: bool) -> tuple[list[Placement], list[int]]:
        """Answer the waiting workers as far as possible: units placed, and workers to finish."""
        placed: list[Placement] = []
        while self.waiting:
            if stopping or not self.queue:
                done, self.waiting = self.waiting, []
                self.finished.update(done)
                return placed, done
            need = self.members(self.queue[0])
            if need == 1:
                placed.append(self._place((self.waiting.pop(0),)))
            elif len(self.waiting) >= need:
                ranks = tuple(sorted(self.waiting[:need]))
                del self.waiting[:need]
                placed.append(self._place(ranks))
            else:
                break
        return placed, []

    def own(self, stopping: bool) -> Placement | None:
        """What rank 0 runs now: the front single task, or the front ladder with rank 0 as member 0 and
        waiting workers as the others; None when there is nothing it can start."""
        if stopping or not self.queue:
            return None
        need = self.members(self.queue[0])
        if need == 1:
            return self._place((0,))
        if len(self.waiting) + 1 < need:
            return None
        ranks = (0, *sorted(self.waiting[:need - 1]))
        del self.waiting[:need - 1]
        return self._place(ranks)

    def returned(self, rank: int, unit: int) -> None:
        """A worker reported ``unit`` (done, or handed back unstarted)."""
        self.held[rank].discard(unit)

    # ------------------------------------------------------------------------------------------ state
    def has_work(self, stopping: bool) -> bool:
        return not stopping and bool(self.queue)

    def workers_not_heard(self) -> bool:
        """Whether some worker has neither work nor a pending request (at start-up: not asked yet)."""
        return any(not units and r not in self.finished and r not in self.waiting
                   for r, units in self.held.items())

    def all_finished(self) -> bool:
        """Whether every worker has been told to finish."""
        return len(self.finished) == self.ranks - 1
