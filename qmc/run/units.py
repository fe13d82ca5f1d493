"""Units of work: a single task, or a whole exchange ladder; and running one unit in this process.

The serial runner and every rank of the MPI farm take units, never parts of a ladder: a ladder's chains
advance in lockstep, so they run together (on one process, or side by side on a team of ranks).
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from typing import Any

from qmc.config.parser import Task
from qmc.exchange.ladder import ladder_tasks
from qmc.exchange.team import LadderTeam
from qmc.run.ladder_run import run_group
from qmc.run.outcome import TaskOutcome
from qmc.run.single import run_task

__all__ = ["work_units", "is_ladder", "run_unit"]


def work_units(tasks: Sequence[Task], all_tasks: Sequence[Task] | None = None) -> list[list[Task]]:
    """Split ``tasks`` into units of work: a single task, or a whole exchange ladder.

    A ladder is complete: every task of ``all_tasks`` (default ``tasks``) in the same exchange group joins
    it, in ladder order, at the place of its first member in ``tasks`` (the order of ``tasks`` is kept).
    """
    pool = list(all_tasks) if all_tasks is not None else list(tasks)
    members: dict[str, list[Task]] = {}
    for t in pool:
        if t.exchange_group is not None:
            members.setdefault(t.exchange_group, []).append(t)
    units: list[list[Task]] = []
    seen: set[str] = set()
    for t in tasks:
        if t.exchange_group is None:
            units.append([t])
        elif t.exchange_group not in seen:
            seen.add(t.exchange_group)
            group = members.get(t.exchange_group, [t])
            if t not in group:
                group = [*group, t]
            units.append(ladder_tasks(group))
    return units


def is_ladder(unit: Sequence[Task]) -> bool:
    """Whether a unit of :func:`work_units` is an exchange ladder (else a single task)."""
    return not (len(unit) == 1 and unit[0].exchange_group is None)


def run_unit(unit: Sequence[Task], run_dir: str | os.PathLike, *, team: LadderTeam | None = None,
             **kwargs: Any) -> list[TaskOutcome]:
    """Run one unit: :func:`qmc.run.single.run_task` for a single task, :func:`qmc.run.ladder_run.run_group`
    for a ladder (on ``team``, default this process alone).  Keyword arguments are those of ``run_task``.
    Returns the outcome of every task of the unit run here."""
    if not is_ladder(unit):
        return [run_task(unit[0], run_dir, **kwargs)]
    return run_group(unit, run_dir, team=team, **kwargs)
