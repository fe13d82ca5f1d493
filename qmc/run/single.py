"""One task on its own: :func:`run_task`, the unit of work of every run without replica exchange.

It builds the task's model, resumes from the task file's checkpoint if there is one (keeping its first
``bins_done`` bins; a finished file continues when the configuration now asks for more bins of the same
length), and advances the chain along the shared path of :mod:`qmc.run.task_run`: every chunk
boundary is a decision point, and chunks are shortened near a deadline.  A precision target is judged by
the chain itself after every bin it completes (:meth:`Simulation.advance` with ``until``), so that it stops
exactly at the first bin that meets it, whatever the chunks.  A task with ``[ground_state]`` runs in stages
of doubling beta (:class:`~qmc.run.ground_state.GroundStateSearch`): when a stage is done the search decides
whether another one follows.  It never touches the run index,
so an MPI task farm may call it for different tasks on different ranks and let one rank update the index
from the returned :class:`~qmc.run.outcome.TaskOutcome`.
"""

from __future__ import annotations

import logging
import os
from collections.abc import Sequence
from typing import Any

import numpy as np

from qmc.chain.simulation import Simulation
from qmc.config.parser import Task, build_model
from qmc.errors import UserError
from qmc.run.ground_state import GroundStateSearch
from qmc.run.outcome import StopSignal, TaskOutcome
from qmc.run.pacing import Pacer
from qmc.run.progress import ProgressSink
from qmc.run.task_identity import finished
from qmc.run.task_run import Decision, RunContext, TaskRun, run_guarded

__all__ = ["SingleRun", "run_task"]


class SingleRun(TaskRun):
    """One chain with its task file."""

    def __init__(self, task: Task, ctx: RunContext) -> None:
        super().__init__([task], [build_model(task)], ctx)
        self.task = task
        self.label = f"task {task.task_id}"
        self.sim: Simulation | None = None
        self.search: GroundStateSearch | None = None

    def _load(self) -> bool:
        task, s, book, model = self.task, self.task.sampling, self.books[0], self.models[0]
        kw = dict(warmup_steps=s.warmup_steps, measure_steps=s.measure_steps, bins=s.bins,
                  estimators=s.estimators)
        data = book.read()
        log = self.ctx.log
        beta = task.beta
        if task.ground_state is not None:
            self.search = GroundStateSearch(task, data.ground_state if data is not None else None,
                                            str(book.path))
            beta = self.search.beta
        stage = f", stage {self.search.stage} of the beta doubling" if self.search is not None else ""
        if data is not None:
            if finished(task, data.status, data.steps_done, data.target, data.target_met):
                return False
            if self.search is not None and data.beta != beta:
                raise UserError(f"damaged task file: its checkpoint is at beta {data.beta:g}, but its "
                                f"finished stages of the beta doubling lead to beta {beta:g}", str(book.path))
            sim = Simulation.restore(model, beta, state=data.checkpoint, **kw)
            book.resume(data, sim)
            self.fresh = False
            grown = " (more steps asked for than before)" if data.status == "done" else ""
            log.info("task %s: resuming at step %d of %d (%d of %d bins%s)%s", task.task_id, sim.steps_done,
                     sim.total_steps, sim.bins_done, s.bins, stage, grown)
        else:
            sim = Simulation(model, beta, seed_words=book.seed_words, **kw)
            log.info("task %s: starting (%d sites, beta %g, %d steps%s)", task.task_id, model.n_sites,
                     beta, sim.total_steps, stage)
        self.sim = sim
        book.begin_session(sim.steps_done)
        return True

    def _chains(self) -> list[Simulation]:
        assert self.sim is not None
        return [self.sim]

    @property
    def steps_done(self) -> int:
        return self._chains()[0].steps_done

    @property
    def total_steps(self) -> int:
        return self._chains()[0].total_steps

    @property
    def target_reached(self) -> bool:
        return self.watches[0].met

    def done_text(self) -> str:
        return f"{self._chains()[0].bins_done} bins"

    def _decision(self) -> Decision:
        """Every chunk boundary: stop now if asked or out of time, else write when due."""
        return Decision(self.local_stop(0.0), self.write_is_due())

    def _chunk(self, pacer: Pacer) -> int:
        """The pacer's chunk, shortened so that it ends before the deadline."""
        left = self.seconds_left()
        if left is None or pacer.step_seconds <= 0:
            return pacer.chunk
        return max(1, min(pacer.chunk, int(left / pacer.step_seconds)))

    def _advance(self, n: int) -> list[Sequence[np.ndarray]]:
        watch = self.watches[0]
        return [self._chains()[0].advance(n, until=watch.take if watch.active else None)]

    def _next_stage(self) -> bool:
        """The stage is done: let the ground-state search decide; on to the next stage (True) or not."""
        if self.search is None:
            return False
        book, sim = self.books[0], self._chains()[0]
        nxt = self.search.finish_stage(sim, book.rows, self.target_reached)
        if nxt is None:
            betas = ", ".join(f"{st.beta:g}" for st in self.search.stages)
            self.ctx.log.info("%s: ground-state search %s at beta %g (betas %s)", self.label,
                              self.search.outcome, sim.beta, betas)
            return False
        self.ctx.log.info("%s: beta %g done (%d bins), doubling to beta %g", self.label, sim.beta,
                          sim.bins_done, nxt.beta)
        self.sim = nxt
        book.rows = []
        self.watches[0].reset([])
        self.pending = True
        self.ctx.sink.task_started(self.task.task_id, 0, nxt.total_steps, self.task.sampling.bins)
        return True

    def _extras(self, j: int, sim: Simulation) -> dict[str, Any]:
        if self.search is None:
            return {}
        return {"ground_state": self.search.record()}


def run_task(
    task: Task,
    run_dir: str | os.PathLike,
    *,
    stop_flag: StopSignal | None = None,
    progress: ProgressSink | None = None,
    logger: logging.Logger | None = None,
    deadline: float | None = None,
    config_text: str | None = None,
    config_fingerprint: str = "",
    checkpoint_seconds: float | None = None,
) -> TaskOutcome:
    """Run (or resume) one task until it is done, ``stop_flag.is_set()``, or ``time.time() >= deadline``.

    The task file is ``RUN_DIR/tasks/<task_id>.h5`` (the ``tasks`` folder is created if needed).
    ``config_text`` is stored in the file; by default it is read from ``RUN_DIR/config.toml`` (or the task's
    source file).  ``checkpoint_seconds`` defaults to ``task.sampling.checkpoint_seconds``.  Never raises
    for a problem of the task itself: that is returned as status ``failed``.
    """
    ctx = RunContext.of(run_dir, stop_flag=stop_flag, progress=progress, logger=logger, deadline=deadline,
                        config_text=config_text, config_fingerprint=config_fingerprint,
                        checkpoint_seconds=checkpoint_seconds)
    return run_guarded(f"task {task.task_id}", lambda: SingleRun(task, ctx), lambda: [task], ctx)[0]
