"""The Hamiltonian of a task: build and compile its model, with model errors located in the config file."""

from __future__ import annotations

import json
import re
from collections.abc import Iterator
from typing import Any

import qmc.models as models
from qmc.config.run_config import RunConfig
from qmc.config.tasks import Task
from qmc.errors import UserError
from qmc.models import CompiledModel, ModelError

__all__ = ["build_model", "distinct_models", "validate", "measures_with_loops"]

DIRECTED_TERM_TYPES = ("xxz", "field")
"""Term types whose S = 1/2 models run on directed loops (``models.compile``: xxz and field terms, and the
heisenberg terms of a model with a field), which are not updated loop by loop independently."""


def measures_with_loops(task: Task) -> bool:
    """Whether the task's chain measures with the loop estimators: ``[sampling] estimators = "improved"``
    and a model whose loops are updated independently (no directed loops: N > 2 colours, or no xxz or field
    term).  The chain layer decides the same from the compiled model
    (:func:`qmc.chain.simulation.uses_loop_estimators`); tests/engine/test_loop_estimators.py checks that
    they agree."""
    if task.sampling.estimators != "improved":
        return False
    return task.colors > 2 or not any(t["type"] in DIRECTED_TERM_TYPES for t in task.terms)


def build_model(task: Task) -> CompiledModel:
    """Compile the Hamiltonian of one task.

    A ``models.ModelError`` becomes a UserError located in the configuration file, e.g.
    ``"configs/x.toml: terms[2].bonds"`` (``[[terms]]`` blocks counted from 0).
    """
    try:
        if task.explicit is not None:
            lat = _explicit_lattice(task.explicit)
        else:
            lat = models.build_lattice(task.lattice_kind, task.size, task.boundary)
    except ModelError as exc:
        raise _located(exc.within("lattice"), task) from None
    terms = []
    classes = {"heisenberg": models.HeisenbergTerm, "projector": models.ProjectorTerm,
               "projector-product": models.ProjectorProductTerm, "xxz": models.XXZTerm,
               "field": models.FieldTerm}
    for i, d in enumerate(task.terms):
        kwargs = {k: v for k, v in d.items() if k != "type"}
        cls = classes[d["type"]]
        try:
            terms.append(cls(**kwargs))
        except ModelError as exc:
            raise _located(exc.within(f"terms[{i}]"), task) from None
    wall = None
    if task.domain_wall is not None:
        d = task.domain_wall
        wall = models.DomainWall(wall=d["wall"], pin=d["pin"], pattern=d["pattern"])
    try:
        return models.compile_model(lat, terms, colours=task.colors, wall=wall)
    except ModelError as exc:
        raise _located(exc, task) from None


def _explicit_lattice(spec: dict[str, Any]) -> models.Lattice:
    n, bonds, classes = spec["sites"], spec["bonds"], spec["classes"]
    if classes is None:
        return models.Lattice.from_bonds(n, [list(b) for b in bonds])
    if bonds is None:
        return models.Lattice.from_bonds(n, {k: [list(b) for b in v] for k, v in classes.items()})
    owner = {frozenset(b): name for name, members in classes.items() for b in members}
    return models.Lattice.from_bonds(n, [list(b) for b in bonds], [owner[frozenset(b)] for b in bonds])


def _located(exc: ModelError, task: Task) -> UserError:
    key = exc.where or ""
    if task.explicit is not None:  # models names a class of the bond mapping as bonds['name']
        key = re.sub(r"^lattice\.bonds\['([^']*)'\]", r"lattice.classes.\1", key)
    where = f"{task.source}: {key}" if key else task.source
    return UserError(f"{exc.message} (task {task.task_id})", where)


def distinct_models(config: RunConfig) -> Iterator[tuple[Task, CompiledModel]]:
    """Every distinct model of the run, built once (one after the other), with the first task that has it."""
    seen: set[str] = set()
    for task in config.tasks():
        key = json.dumps([task.lattice_kind, task.size, task.boundary, task.explicit, task.terms,
                          task.colors, task.domain_wall], sort_keys=True, default=list)
        if key not in seen:
            seen.add(key)
            yield task, build_model(task)


def validate(config: RunConfig) -> int:
    """Build every distinct model of the run once, so that model errors surface before any run starts.

    Returns the number of distinct models built.
    """
    return sum(1 for _ in distinct_models(config))
