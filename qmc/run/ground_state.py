"""A task's search for its ground state by beta doubling (``[ground_state]``).

The task runs in *stages*: stage k is an ordinary chain at beta_k = start_beta 2^k with the task's
``[sampling]`` (warm-up, measurement with its bins, precision target). When a stage is done, its bins are
judged and the search converges, gives up, or starts stage k+1 from the doubled configuration (the rules:
:mod:`qmc.chain.convergence`). :class:`GroundStateSearch` keeps the finished stages and makes these
decisions; :class:`qmc.run.single.SingleRun` calls it.

The task file holds the current stage as any task's file does (``/bins`` with its beta, ``/checkpoint``) and
the search in ``/ground_state`` (:mod:`qmc.storage.search_record`): settings, outcome and the bins of every
finished stage.  When the search is over, its last stage is also the one in ``/bins``: that is what the
analysis reads.  Everything is decided from bins, so a resumed search is bit-identical to an uninterrupted
one.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from qmc.chain.convergence import (
    AGREE_SIGMAS,
    CONVERGED,
    DOUBLE,
    search_outcome,
    stage_estimates,
    stages_agree,
)
from qmc.chain.doubling import double_beta
from qmc.chain.simulation import Simulation
from qmc.config.parser import Task
from qmc.storage.search_record import SearchRecord, Stage, read_search, search_mapping

__all__ = ["RUNNING", "GroundStateSearch"]

RUNNING = "running"
"""Outcome while the search goes on."""


class GroundStateSearch:
    """The finished stages of one task's ground-state search (``saved``: the ``/ground_state`` group of its
    file, None for a new search) and what follows them."""

    def __init__(self, task: Task, saved: dict[str, Any] | None = None, where: str = "") -> None:
        spec = task.ground_state
        if spec is None:
            raise ValueError("the task has no [ground_state]")
        self.spec = spec
        self.stages: list[Stage] = []
        self.outcome = RUNNING
        if saved is not None:
            rec = read_search(saved, where)
            self.stages, self.outcome = rec.stages, rec.outcome

    @property
    def stage(self) -> int:
        """Index of the stage that runs now (the last one once the search is over)."""
        return len(self.stages) if self.outcome == RUNNING else len(self.stages) - 1

    @property
    def beta(self) -> float:
        """beta of the stage that runs now."""
        return float(self.spec.start_beta) * 2.0 ** self.stage

    @property
    def converged(self) -> bool:
        return self.outcome == CONVERGED

    def finish_stage(self, sim: Simulation, rows: list[np.ndarray], target_met: bool) -> Simulation | None:
        """The stage of chain ``sim`` is done with bins ``rows``: record it, decide, and return the chain of
        the next stage (at 2 beta), or None when the search is over (:attr:`outcome` says how)."""
        table = np.array(rows, dtype=np.float64).reshape(len(rows), len(sim.bin_names))
        stage = Stage(beta=float(sim.beta), steps_per_bin=sim.steps_per_bin, names=tuple(sim.bin_names),
                      bins=table, target_met=bool(target_met))
        if self.stages:
            stage.agree, stage.sigmas = stages_agree(self._estimates(self.stages[-1]), self._estimates(stage))
        self.stages.append(stage)
        decision = search_outcome([bool(s.agree) for s in self.stages[1:]], sim.beta, self.spec.max_beta)
        if decision == DOUBLE:
            return double_beta(sim)
        self.outcome = decision
        return None

    def _estimates(self, stage: Stage) -> dict[str, tuple[float, float]]:
        return stage_estimates(stage.bins, stage.names, self.spec.observables)

    def record(self) -> dict[str, Any]:
        """The ``/ground_state`` group of the task file."""
        s = self.spec
        return search_mapping(SearchRecord(s.start_beta, s.max_beta, tuple(s.observables), AGREE_SIGMAS,
                                           self.outcome, self.stages))
