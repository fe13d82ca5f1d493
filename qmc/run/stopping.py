"""What ends a task before its last step: the precision target of each chain, and the checks of the
observables that a target or a ground-state search (``[ground_state] observables``) names.

The rule itself -- at least 64 bins and every goal's binning error within its bound -- is
:mod:`qmc.chain.target`; here it meets the tasks: :func:`target_watch` gives a task's chain its
:class:`~qmc.chain.target.TargetWatch`, :func:`check_observables` refuses names without bins in the task's
model (before anything runs, :func:`check_run_observables`), and :func:`target_attrs` is what a task file
records about the target.
"""

from __future__ import annotations

import json
from collections.abc import Iterable
from typing import Any

import numpy as np

from qmc.chain.observables import bin_names
from qmc.chain.target import TargetWatch
from qmc.config.parser import RunConfig, Task, distinct_models
from qmc.errors import UserError, did_you_mean
from qmc.models.compiled import CompiledModel

__all__ = ["check_observables", "check_run_observables", "target_watch", "target_attrs"]


def check_observables(task: Task, model: CompiledModel) -> None:
    """UserError (located in the configuration) for an observable of ``[sampling] target`` or
    ``[ground_state] observables`` that has no bins in ``model``."""
    names = bin_names(model)
    wanted = [(f"sampling.target.{name}", name) for name, _, _ in task.sampling.target]
    if task.ground_state is not None:
        wanted += [("ground_state.observables", name) for name in task.ground_state.observables]
    for key, name in wanted:
        if name not in names:
            hint = did_you_mean(name, names)
            raise UserError(f"'{name}' is not an observable with bins in this model{hint}"
                            f" (task {task.task_id}); choose from: {', '.join(names)} (derived quantities "
                            "such as binder_stag are formed from several observables and have no bins of "
                            "their own)", f"{task.source}: {key}")


def check_run_observables(config: RunConfig) -> None:
    """:func:`check_observables` for every distinct model of a run that has a target or ``[ground_state]``."""
    if config.sampling.target or config.ground_state is not None:
        for task, model in distinct_models(config):
            check_observables(task, model)


def target_watch(task: Task, model: CompiledModel, rows: Iterable[np.ndarray] = ()) -> TargetWatch:
    """The watch of ``task``'s precision target (inactive without one), fed with ``rows``."""
    check_observables(task, model)
    return TargetWatch(task.sampling.target, bin_names(model), rows)


def target_attrs(watch: TargetWatch, met: bool) -> dict[str, Any]:
    """What a task file records about its target (attributes of ``/bins``): ``target``, the goals as JSON
    ``[[observable, value, relative], ...]``, and ``target_met`` (1 when the run ended because the target
    was met, at the file's number of bins); nothing without a target."""
    if not watch.active:
        return {}
    return {"target": json.dumps([list(g) for g in watch.goals]), "target_met": int(bool(met))}
