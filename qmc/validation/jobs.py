"""Work items of the validation suite: simulations and exact calculations, run in worker processes.

A :class:`SimJob` is one Markov chain (model recipe, beta, warm-up / measurement steps, bins); its random
stream is ``stream_seed(MASTER_SEED, key)``, so every result is reproducible and independent of the order
and the process in which jobs run.  An :class:`ExactJob` calls a module-level function of the exact
reference with keyword arguments.  Both are plain picklable data.

Cost estimates (seconds, used only for the progress ETA; the runner rescales them by the measured rate):
a Monte Carlo step costs about ``SECONDS_PER_OP`` per operator of the expansion, whose mean order is
``<n> ~ density * beta * N``; an exact job carries its own estimate.
"""

from __future__ import annotations

import math
import signal
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

__all__ = [
    "MASTER_SEED",
    "SECONDS_PER_OP",
    "ExactJob",
    "Job",
    "ModelSpec",
    "SimJob",
    "SimResult",
    "execute",
    "worker_init",
    "worker_run",
]

MASTER_SEED = 20_240_517
"""Master seed of every validation stream (fixed: the suite is deterministic)."""

SECONDS_PER_OP = 1.0e-7
"""Rough wall time per operator per Monte Carlo step (measured order of magnitude; only sets the ETA)."""


@dataclass(frozen=True)
class ModelSpec:
    """Recipe for :func:`models.compile_model`: lattice kind and size, the terms (plain data) and the number
    of colours per site."""

    lattice: str
    size: tuple[int, ...]
    terms: tuple[Any, ...]
    colours: int = 2

    def build(self):  # -> models.CompiledModel (imported lazily: workers import the engine themselves)
        from qmc.models import build_lattice, compile_model

        return compile_model(build_lattice(self.lattice, self.size), list(self.terms), colours=self.colours)


@dataclass(frozen=True)
class SimJob:
    """One simulation; ``n_sites`` and ``density`` (<n> / (beta N)) only enter the cost estimate."""

    key: str
    model: ModelSpec
    beta: float
    warmup: int
    measure: int
    bins: int
    n_sites: int
    density: float = 1.0

    def __post_init__(self) -> None:
        if self.bins < 1 or self.measure < self.bins or self.measure % self.bins:
            raise ValueError(f"{self.key}: measure steps ({self.measure}) must be a positive multiple of "
                             f"bins ({self.bins})")

    @property
    def cost(self) -> float:
        ops = max(self.density * self.beta * self.n_sites, 10.0)
        return (self.warmup + self.measure) * ops * SECONDS_PER_OP


@dataclass(frozen=True)
class ExactJob:
    """``func(**kwargs)`` returning a dict of floats; ``seconds`` is a rough cost estimate."""

    key: str
    func: Callable[..., dict[str, float]]
    kwargs: dict[str, Any] = field(default_factory=dict)
    seconds: float = 1.0

    @property
    def cost(self) -> float:
        return float(self.seconds)


Job = SimJob | ExactJob


@dataclass(frozen=True)
class SimResult:
    """Bins of one simulation: ``bins[name]`` is the series of bin averages of observable ``name``."""

    bins: dict[str, np.ndarray]
    n_sites: int
    linear_size: int
    beta: float
    seconds: float


def _run_sim(job: SimJob, report: Callable[[str, float], None]) -> SimResult:
    from qmc.chain.simulation import Simulation
    from qmc.engine.rng import stream_seed

    t0 = time.perf_counter()
    model = job.model.build()
    sim = Simulation(model, job.beta, warmup_steps=job.warmup, measure_steps=job.measure, bins=job.bins,
                     seed_words=stream_seed(MASTER_SEED, job.key))
    chunk = max(1, math.ceil(sim.total_steps / 40))
    rows = []
    while not sim.done:
        rows.append(sim.advance(chunk))
        report(job.key, sim.steps_done / sim.total_steps)
    table = np.concatenate(rows, axis=0)
    bins = {name: table[:, k].copy() for k, name in enumerate(sim.bin_names)}
    return SimResult(bins, model.n_sites, int(model.linear_size), float(job.beta), time.perf_counter() - t0)


def execute(job: Job, report: Callable[[str, float], None] | None = None) -> SimResult | dict[str, float]:
    """Run ``job``; ``report(key, fraction_done)`` is called as it progresses."""
    report = report or (lambda key, fraction: None)
    if isinstance(job, SimJob):
        return _run_sim(job, report)
    out = job.func(**job.kwargs)
    report(job.key, 1.0)
    return out


# ------------------------------------------------------------------------------------------ worker processes
_QUEUE: Any = None


def worker_init(progress_queue: Any) -> None:
    """Initializer of a worker process: progress goes to ``progress_queue``; Ctrl-C is left to the parent."""
    global _QUEUE
    _QUEUE = progress_queue
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _queue_report(key: str, fraction: float) -> None:
    _QUEUE.put((key, fraction))


def worker_run(job: Job) -> SimResult | dict[str, float]:
    """Run ``job`` in a worker process set up by :func:`worker_init`."""
    return execute(job, _queue_report)
