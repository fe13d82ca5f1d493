"""Identity and cost of a task: the fingerprint of its Markov chain, its relative weight, its step count,
and how a stored task file relates to a task of the configuration (:func:`stored_relation`).

A task's chain is one endless stream of Monte Carlo steps: the warm-up, then bins of ``measure_steps /
bins`` steps each.  ``measure_steps`` only says where the stream stops, so a file of the same chain with a
different number of bins *of the same length* is the same stream cut elsewhere: it continues (more bins)
or is already done (fewer asked).  A different bin length, warm-up, model, beta, seed or exchange ladder
is another chain; the other kind of estimators (``[sampling] estimators``) is the same chain with other
bins, which cannot be continued either.

Shared by the task files (:mod:`qmc.run.task_book`), the run planning (:mod:`qmc.run.plan`) and the MPI
farm's queue (:mod:`qmc.mpi.schedule`).
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math

from qmc.config.parser import Task, measures_with_loops

__all__ = ["task_fingerprint", "task_weight", "steps_total", "steps_per_bin", "SAME", "LENGTH",
           "BIN_LENGTH", "WARMUP", "ESTIMATORS", "CHAIN", "finished", "stored_relation", "with_length",
           "mismatch_text"]

SAME = "same"
"""The file was written for exactly this task."""
LENGTH = "length"
"""The same chain with bins of the same length, only the number of bins differs: it continues."""
BIN_LENGTH = "bin length"
"""The same chain except the number of steps per bin: the stored bins cannot be continued."""
WARMUP = "warm-up"
"""The same chain except the warm-up: the stored bins were measured after another warm-up."""
ESTIMATORS = "estimators"
"""The same chain measured with the other kind of estimators (``[sampling] estimators``): its bins cannot be
continued with these."""
CHAIN = "chain"
"""Another model, lattice, beta, seed or exchange ladder."""


def task_fingerprint(task: Task) -> str:
    """SHA-256 of everything that determines a task's Markov chain (model, beta, sampling, random stream;
    with replica exchange also the exchanged parameter, the ladder and the exchange interval; with beta
    doubling its beta ladder and the observables that decide when it ends; with the loop estimators that
    choice, which changes the bins, not the chain).  A precision target does not enter: it decides only how
    many of the chain's bins are made, never what they are."""
    s = task.sampling
    content = {"seed": task.seed, "seed_key": task.seed_key, "lattice": task.lattice_kind,
               "size": list(task.size), "boundary": task.boundary, "explicit": task.explicit,
               "terms": task.terms, "beta": repr(float(task.beta)), "warmup_steps": s.warmup_steps,
               "measure_steps": s.measure_steps, "bins": s.bins}
    if task.exchange is not None:  # only then: fingerprints of plain tasks stay what they were
        content["exchange"] = [task.exchange, task.exchange_group, s.exchange_every]
    if task.colors != 2:  # likewise: S = 1/2 tasks keep their fingerprints
        content["colors"] = task.colors
    if task.ground_state is not None:  # likewise
        g = task.ground_state
        content["ground_state"] = [repr(float(g.start_beta)), repr(float(g.max_beta)), list(g.observables)]
    if measures_with_loops(task):  # likewise: bins of the plain estimators keep their fingerprints
        content["estimators"] = "loop"
    text = json.dumps(content, sort_keys=True, separators=(",", ":"), default=list)
    return hashlib.sha256(text.encode()).hexdigest()


def task_weight(task: Task) -> float:
    """Relative cost of one Monte Carlo step of ``task``: (cells) * beta, as a step costs ~ N beta (for a
    ground-state search, max_beta: its stages cost most at the largest beta they may reach)."""
    gs = getattr(task, "ground_state", None)  # scheduling tests pass plain stand-ins without it
    beta = gs.max_beta if gs is not None else task.beta
    return float(math.prod(task.size)) * float(beta)


def steps_total(task: Task) -> int:
    """Monte Carlo steps of ``task`` in all: warm-up plus measurement."""
    return task.sampling.warmup_steps + task.sampling.measure_steps


def steps_per_bin(task: Task) -> int:
    """Monte Carlo steps averaged in one bin: ``measure_steps / bins``."""
    return task.sampling.measure_steps // max(task.sampling.bins, 1)


def finished(task: Task, status: str, steps_done: int, target: list | None = None,
             target_met: bool = False) -> bool:
    """Whether a file of ``task`` (status, checkpoint step, precision target and whether the run ended
    with it met, as stored) is finished for the task: it has all the steps the task asks for, or it ended
    because it met exactly the target the task still sets.  A file finished for fewer steps, or stopped by
    another target (or by a target the task no longer has), continues: the same chain, judged by the
    task's target from its stored bins on."""
    if status != "done":
        return False
    if steps_done >= steps_total(task):
        return True
    return bool(target_met) and target is not None and [list(g) for g in target] == [
        list(g) for g in task.sampling.target]


def with_length(task: Task, *, bins: int, measure_steps: int, warmup_steps: int | None = None) -> Task:
    """``task`` with another number of bins and measured steps (and warm-up steps, if given)."""
    s = task.sampling
    sampling = dataclasses.replace(s, bins=int(bins), measure_steps=int(measure_steps),
                                   warmup_steps=s.warmup_steps if warmup_steps is None else int(warmup_steps))
    return dataclasses.replace(task, sampling=sampling)


def stored_relation(task: Task, fingerprint: str, stored_steps_per_bin: int, stored_bins: int,
                    stored_steps_total: int) -> str:
    """How a task file relates to ``task``: :data:`SAME`, :data:`LENGTH`, :data:`BIN_LENGTH`,
    :data:`WARMUP` or :data:`CHAIN` (see the module docstring).

    ``fingerprint`` is the file's task fingerprint (that of the task it was written for), the other
    arguments are the sampling it records: steps per bin, bins asked for, steps asked for in all (warm-up
    plus measurement).  The file's task is rebuilt from ``task`` with those numbers and fingerprinted.
    """
    if fingerprint == task_fingerprint(task):
        return SAME
    measure = int(stored_steps_per_bin) * int(stored_bins)
    warmup = int(stored_steps_total) - measure
    if stored_bins > 0 and fingerprint == task_fingerprint(with_length(task, bins=stored_bins,
                                                                       measure_steps=measure)):
        return LENGTH if stored_steps_per_bin == steps_per_bin(task) else BIN_LENGTH
    if stored_bins > 0 and warmup >= 0 and fingerprint == task_fingerprint(
            with_length(task, bins=stored_bins, measure_steps=measure, warmup_steps=warmup)):
        return WARMUP
    other = _with_estimators(task, "plain" if task.sampling.estimators == "improved" else "improved")
    if measures_with_loops(other) != measures_with_loops(task) and (
            fingerprint == task_fingerprint(other) or (stored_bins > 0 and fingerprint == task_fingerprint(
                with_length(other, bins=stored_bins, measure_steps=measure)))):
        return ESTIMATORS
    return CHAIN


def _with_estimators(task: Task, estimators: str) -> Task:
    return dataclasses.replace(task, sampling=dataclasses.replace(task.sampling, estimators=estimators))


def mismatch_text(relation: str, task: Task, stored_steps_per_bin: int, stored_bins: int,
                  stored_steps_total: int) -> str:
    """Why a file of ``relation`` (:func:`stored_relation`, not SAME or LENGTH) cannot continue ``task``."""
    s = task.sampling
    if relation == BIN_LENGTH:
        return (f"holds bins of {stored_steps_per_bin} Monte Carlo steps each, this configuration asks for "
                f"bins of {steps_per_bin(task)} (measure_steps / bins = {s.measure_steps} / {s.bins}); every "
                "bin is an average over its own number of steps, so a series cannot change its bin length")
    if relation == WARMUP:
        warmup = stored_steps_total - stored_steps_per_bin * stored_bins
        return (f"was measured after {warmup} warm-up steps, this configuration asks for {s.warmup_steps}; "
                "its bins cannot count as measured after another warm-up")
    if relation == ESTIMATORS:
        used, other = ("plain", "improved") if measures_with_loops(task) else ("improved", "plain")
        return (f"was measured with the {used} estimators, this configuration asks for the {other} ones "
                f"([sampling] estimators); a series of bins cannot change its estimators, so set "
                f'estimators = "{used}" to continue it')
    return "was written for a different model, lattice, beta, seed or exchange ladder than this task"
