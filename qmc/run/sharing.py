"""A run directory shared with other processes: claims on units of work and the index entries kept here.

Every runner -- the serial one (:mod:`qmc.run.serial`) and rank 0 of an MPI farm (:mod:`qmc.mpi`) -- goes
through one :class:`SharedRun`: it claims a unit before running it (one claim per task, in ladder order,
:mod:`qmc.storage.claims`), skips units that a live process holds, keeps its claims alive
(:meth:`SharedRun.beat`), writes ``index.json`` keeping the entries of other processes' tasks
(:func:`qmc.storage.run_index.write_index` with ``mine``), and releases a unit's claims once its outcome is
in the index.  So the processes of a job array, MPI jobs and serial jobs can run on one run directory
together: nothing runs twice at once, and a unit whose process died is taken over (at once on the same
host, after :data:`~qmc.storage.claims.STALE_SECONDS` otherwise) and resumed from its checkpoint.
"""

from __future__ import annotations

import logging
import os
from collections.abc import Iterable, Sequence

from qmc.config.parser import Task
from qmc.run.plan import RunPlan
from qmc.storage.claims import ClaimBook, Holder
from qmc.storage.processes import this_host
from qmc.storage.run_index import write_index

__all__ = ["INDEX_SECONDS", "ClaimLost", "SharedRun", "describe"]

INDEX_SECONDS = 2.0
"""Least number of seconds between two writes of ``index.json`` while a unit runs (the counters of running
tasks are rewritten at this pace; writes for started and finished units come on top)."""


class ClaimLost(BaseException):
    """Another process took over the claim of the running unit (this one was frozen beyond the stale
    limit): the unit is left to it, nothing more is written.  A BaseException, so that no task-level
    handler records it as a failure of the task."""


class SharedRun:
    """This process's side of a shared run directory for ``plan`` (see the module docstring)."""

    def __init__(self, plan: RunPlan, log: logging.Logger, book: ClaimBook | None = None) -> None:
        self.plan, self.log = plan, log
        self.book = book if book is not None else ClaimBook(plan.run_dir)
        self.book.sweep()
        self.process = f"{this_host()}:{os.getpid()}"

    def claim(self, unit: Sequence[Task]) -> bool:
        """Claim every task of ``unit`` (in order) for this process; False, holding none of them, if a live
        process holds one, or if the index (as last read) says another process has finished them all."""
        entries = self.plan.index["tasks"]
        if all(entries[t.task_id].get("status") == "done" for t in unit):
            return False
        taken: list[str] = []
        for t in unit:
            if not self.book.claim(t.task_id):
                for tid in taken:
                    self.book.release(tid)
                return False
            taken.append(t.task_id)
        return True

    def release(self, unit: Iterable[Task]) -> None:
        """Give up the claims of ``unit`` (after its outcome is in the index file)."""
        for t in unit:
            self.book.release(t.task_id)

    def holds(self, unit: Iterable[Task]) -> bool:
        return all(t.task_id in self.book.held for t in unit)

    def write_index(self) -> None:
        """Write ``index.json``: this process's entries for the tasks it holds, the file's for all others
        (which also refreshes this process's view of them)."""
        write_index(self.plan.run_dir, self.plan.index, mine=set(self.book.held))

    def beat(self) -> list[str]:
        """Keep the claims alive (a heartbeat when due); the task ids of claims lost to other processes."""
        lost = self.book.beat()
        for tid in lost:
            self.log.warning("task %s: this process was silent beyond the stale limit and another process "
                             "took the task over; it is left to that process", tid)
        return lost

    def elsewhere(self, task_ids: Iterable[str]) -> dict[str, Holder]:
        """Those of ``task_ids`` that live other processes hold, with their holders."""
        live = self.book.live()
        mine = self.book.owner
        return {tid: live[tid] for tid in task_ids if tid in live and live[tid].get("owner") != mine}

    def close(self) -> None:
        """Release every claim of this process and remove its heartbeat."""
        self.book.close()


def describe(holders: dict[str, Holder], limit: int = 3) -> str:
    """``"host:pid, host:pid"`` of the distinct holders (at most ``limit``, then "...")."""
    names = sorted({f"{h.get('host', '?')}:{h.get('pid', '?')}" for h in holders.values()})
    return ", ".join(names[:limit]) + (", ..." if len(names) > limit else "")
