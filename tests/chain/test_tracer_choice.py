"""The loop update's path chosen by timing (qmc.chain.tracer_choice): the faster path is kept, the size
window is respected, and the chain is the same bit for bit whichever path runs or how the trial chunks it."""

from __future__ import annotations

import time

import numpy as np
import pytest
from qmc.models import HeisenbergTerm, build_lattice, compile_model

from qmc.chain import tracer_choice
from qmc.chain.simulation import Simulation
from qmc.chain.tracer_choice import (
    INTERLEAVED,
    SINGLE,
    TRIAL_FROM,
    TRIAL_ROUNDS,
    TRIAL_STEPS,
    TRIAL_UP_TO,
    TracerChoice,
)
from qmc.engine.interleaved import INTERLEAVE_FROM_VERTICES
from qmc.engine.rng import stream_seed


def _busy(seconds: float) -> None:
    end = time.process_time() + seconds
    while time.process_time() < end:
        pass


def _fake_chain(cost: dict[int, float], setting: np.ndarray, log: list[int]):
    """A stand-in for the kernel: each step costs ``cost[path]`` CPU seconds."""

    def call(k: int) -> int:
        for _ in range(k):
            log.append(int(setting[0]))
            _busy(cost[int(setting[0])])
        return k

    return call


@pytest.mark.parametrize("faster", [SINGLE, INTERLEAVED])
def test_the_faster_path_is_kept(faster: int) -> None:
    slower = INTERLEAVED if faster == SINGLE else SINGLE
    setting = np.array([INTERLEAVE_FROM_VERTICES], dtype=np.int64)
    log: list[int] = []
    choice = TracerChoice(True)
    done = choice.run(_fake_chain({faster: 0.002, slower: 0.006}, setting, log), 40, setting)
    assert done == 40 and choice.settled
    assert choice.setting == faster and setting[0] == faster
    trial = 2 * TRIAL_ROUNDS * TRIAL_STEPS
    assert log[:trial].count(SINGLE) == log[:trial].count(INTERLEAVED) == TRIAL_ROUNDS * TRIAL_STEPS
    assert all(p == faster for p in log[trial:])


def test_trial_spans_short_calls_and_an_early_stop() -> None:
    """Steps asked one at a time still complete the trial; a kernel that stops early (the cutoff must
    grow) ends the call with the steps it did."""
    setting = np.array([INTERLEAVE_FROM_VERTICES], dtype=np.int64)
    log: list[int] = []
    choice = TracerChoice(True)
    call = _fake_chain({SINGLE: 0.0005, INTERLEAVED: 0.003}, setting, log)
    total = 0
    while not choice.settled:
        total += choice.run(call, 1, setting)
        assert setting[0] in (SINGLE, INTERLEAVE_FROM_VERTICES)  # between calls: the choice or the default
    assert total == 2 * TRIAL_ROUNDS and choice.setting == SINGLE
    stopping = TracerChoice(True)
    assert stopping.run(lambda k: 1, 10, setting) == 1 and not stopping.settled


def test_size_window() -> None:
    small, large, middle = TracerChoice(True), TracerChoice(True), TracerChoice(True)
    assert small.settle_by_size(TRIAL_FROM) and small.setting == SINGLE
    assert large.settle_by_size(TRIAL_UP_TO + 1) and large.setting == INTERLEAVED
    assert not middle.settle_by_size(TRIAL_FROM + 1) and middle.setting == INTERLEAVE_FROM_VERTICES
    assert TracerChoice(False).settled  # kinds with one path never time


def _bins(setting: int | None, monkeypatch: pytest.MonkeyPatch) -> tuple[np.ndarray, Simulation]:
    monkeypatch.setattr(tracer_choice, "TRIAL_FROM", 0)  # time even this small chain
    model = compile_model(build_lattice("square", (16, 16)), [HeisenbergTerm(bonds="nn", coupling=1.0)])
    sim = Simulation(model, 8.0, warmup_steps=40, measure_steps=60, bins=6,
                     seed_words=stream_seed(5, "tracer-choice"), estimators="improved")
    if setting is not None:
        sim.fix_loop_tracing(setting)
    rows = np.concatenate([sim.advance(7) for _ in range(15)])
    return rows, sim


def test_same_chain_whatever_the_path(monkeypatch: pytest.MonkeyPatch) -> None:
    timed, sim = _bins(None, monkeypatch)
    assert sim._tracers.settled and all(len(t) == TRIAL_ROUNDS for t in sim._tracers.per_step.values())
    assert sim.vertices.interleave_above[0] in (SINGLE, INTERLEAVED)
    for setting in (SINGLE, INTERLEAVED):
        rows, other = _bins(setting, monkeypatch)
        assert np.array_equal(rows, timed), setting
        assert np.array_equal(other.ops, sim.ops) and np.array_equal(other.spins, sim.spins)


def test_timed_half_way_through_one_long_warm_up(monkeypatch: pytest.MonkeyPatch) -> None:
    """A warm-up run in one call still stops half-way to time both paths, so measuring starts settled."""
    monkeypatch.setattr(tracer_choice, "TRIAL_FROM", 0)
    model = compile_model(build_lattice("square", (16, 16)), [HeisenbergTerm(bonds="nn", coupling=1.0)])
    sim = Simulation(model, 8.0, warmup_steps=200, measure_steps=10, bins=1,
                     seed_words=stream_seed(6, "tracer-choice-warm-up"))
    sim.advance(200)
    assert sim.steps_done == 200 and sim._tracers.settled
    assert all(len(t) == TRIAL_ROUNDS for t in sim._tracers.per_step.values())
