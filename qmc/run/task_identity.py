"""Identity and cost of a task: the fingerprint of its Markov chain, its relative weight, its step count.

Shared by the task files (:mod:`qmc.run.task_book`), the run planning (:mod:`qmc.run.plan`) and the MPI
farm's queue (:mod:`qmc.mpi.schedule`).
"""

from __future__ import annotations

import hashlib
import json
import math

from qmc.config.parser import Task

__all__ = ["task_fingerprint", "task_weight", "steps_total"]


def task_fingerprint(task: Task) -> str:
    """SHA-256 of everything that determines a task's Markov chain (model, beta, sampling, random stream;
    with replica exchange also the exchanged parameter, the ladder and the exchange interval; with beta
    doubling its beta ladder and the observables that decide when it ends).  A precision target does not
    enter: it decides only how many of the chain's bins are made, never what they are."""
    s = task.sampling
    content = {"seed": task.seed, "seed_key": task.seed_key, "lattice": task.lattice_kind,
               "size": list(task.size), "boundary": task.boundary, "explicit": task.explicit,
               "terms": task.terms, "beta": repr(float(task.beta)), "warmup_steps": s.warmup_steps,
               "measure_steps": s.measure_steps, "bins": s.bins}
    if task.exchange is not None:  # only then: fingerprints of plain tasks stay what they were
        content["exchange"] = [task.exchange, task.exchange_group, s.exchange_every]
    if task.ground_state is not None:  # likewise
        g = task.ground_state
        content["ground_state"] = [repr(float(g.start_beta)), repr(float(g.max_beta)), list(g.observables)]
    text = json.dumps(content, sort_keys=True, separators=(",", ":"), default=list)
    return hashlib.sha256(text.encode()).hexdigest()


def task_weight(task: Task) -> float:
    """Relative cost of one Monte Carlo step of ``task``: (cells) * beta, as a step costs ~ N beta (for a
    ground-state search, max_beta: its stages cost most at the largest beta they may reach)."""
    beta = task.ground_state.max_beta if task.ground_state is not None else task.beta
    return float(math.prod(task.size)) * float(beta)


def steps_total(task: Task) -> int:
    """Monte Carlo steps of ``task`` in all: warm-up plus measurement."""
    return task.sampling.warmup_steps + task.sampling.measure_steps
