"""Checkpoint layout versions (qmc.chain.checkpoint): a chain's state carries its layout number; a state of
the unnumbered layout 1 (every task file written before layouts were numbered) is migrated and continues
bit-identically; a layout this program cannot read is refused with a message naming both layouts and what
to do (a layout check, common practice, no source)."""

from __future__ import annotations

from pathlib import Path

import h5py
import numpy as np
import pytest
from qmc.models import HeisenbergTerm, ProjectorProductTerm, build_lattice, compile_model

import qmc.run.pacing as pacing
from qmc.chain.checkpoint import CHECKPOINT_LAYOUT, LAYOUT_KEY, STATE_KEYS
from qmc.chain.simulation import Simulation
from qmc.config.parser import load_config
from qmc.engine.rng import stream_seed
from qmc.engine.slots import ACC_LAYOUT
from qmc.errors import UserError
from qmc.run.outcome import StopFlag
from qmc.run.single import run_task
from qmc.storage.task_file import read_task

KW = dict(warmup_steps=200, measure_steps=600, bins=6)


def _model():
    return compile_model(build_lattice("square", (4, 4)),
                         [HeisenbergTerm("nn", 1.0), ProjectorProductTerm("plaquette-pair", 0.7)])


def _sim():
    return Simulation(_model(), 2.0, seed_words=stream_seed(3, "layout"), **KW)


def test_the_layout_is_pinned_to_what_the_checkpoint_holds():
    """Changing the accumulator slots or the state arrays without raising CHECKPOINT_LAYOUT (and adding a
    migration or a refusal for the old layout) fails here."""
    assert CHECKPOINT_LAYOUT == 5
    assert _sim().state()["counters"].shape == (4,)
    assert STATE_KEYS == ("spins", "ops", "counters", "rng", "acc", "hist", "steps", "above")
    assert ACC_LAYOUT == ("n_ops", "n_ops_sq", "mz2", "ms2", "ms4", "chi_stag", "sq_shifted", "dx2", "dy2",
                          "d4", "cos4", "w2_0", "w2_1", "w2_2")


def test_state_carries_the_layout_and_restores_bit_identically():
    whole = _sim().advance(800)
    sim = _sim()
    first = sim.advance(450)
    state = sim.state()
    assert int(state[LAYOUT_KEY]) == CHECKPOINT_LAYOUT and set(state) == {LAYOUT_KEY, *STATE_KEYS}
    rest = Simulation.restore(_model(), 2.0, state=state, **KW).advance(800)
    assert np.array_equal(np.vstack([first, rest]), whole)


def test_an_unnumbered_layout_1_state_is_migrated():
    whole = _sim().advance(800)
    sim = _sim()
    first = sim.advance(450)
    old = {k: v for k, v in sim.state().items() if k != LAYOUT_KEY}  # what files written before hold
    old["counters"] = old["counters"][:1]
    resumed = Simulation.restore(_model(), 2.0, state=old, **KW)
    assert int(resumed.state()[LAYOUT_KEY]) == CHECKPOINT_LAYOUT
    assert np.array_equal(np.vstack([first, resumed.advance(800)]), whole)


def test_a_layout_2_state_without_per_slot_colours_is_migrated():
    whole = _sim().advance(800)
    sim = _sim()
    first = sim.advance(450)
    old = {k: v for k, v in sim.state().items() if k != "above"}
    old[LAYOUT_KEY] = np.asarray(2)  # what task files written before SU(N) models hold
    old["counters"] = old["counters"][:1]
    resumed = Simulation.restore(_model(), 2.0, state=old, **KW)
    assert resumed.state()["above"].shape == (0,)
    assert resumed.state()["counters"].shape == (4,)
    assert np.array_equal(np.vstack([first, resumed.advance(800)]), whole)


def test_a_layout_3_state_gets_the_directed_loop_counters():
    """Layout 3 (one counter) continues bit-identically as layout 4 (four counters, zeros added)."""
    whole = _sim().advance(800)
    sim = _sim()
    first = sim.advance(450)
    old = {**sim.state(), LAYOUT_KEY: np.asarray(3)}
    old["counters"] = old["counters"][:1]
    resumed = Simulation.restore(_model(), 2.0, state=old, **KW)
    assert resumed.state()["counters"].shape == (4,)
    assert np.array_equal(np.vstack([first, resumed.advance(800)]), whole)


def test_a_layout_4_state_is_migrated():
    """Layout 4 had no profile block; its states continue bit-identically under layout 5."""
    whole = _sim().advance(800)
    sim = _sim()
    first = sim.advance(450)
    old = {**sim.state(), LAYOUT_KEY: np.asarray(4, dtype=np.int64)}
    resumed = Simulation.restore(_model(), 2.0, state=old, **KW)
    assert int(resumed.state()[LAYOUT_KEY]) == CHECKPOINT_LAYOUT
    assert np.array_equal(np.vstack([first, resumed.advance(800)]), whole)


def _strip_model():
    model = compile_model(build_lattice("square", (4, 4), ("open", "periodic")),
                          [HeisenbergTerm("nn", 1.0), ProjectorProductTerm("column-of-three", 1.0)])
    assert model.n_columns == 4
    return model


def _strip_sim():
    return Simulation(_strip_model(), 2.0, seed_words=stream_seed(3, "profiles"), **KW)


def test_a_chain_with_profiles_restores_bit_identically():
    """The profile block of a strip open along x is part of the checkpoint."""
    whole = _strip_sim().advance(800)
    part = _strip_sim()
    first = part.advance(450)
    rest = Simulation.restore(_strip_model(), 2.0, state=part.state(), **KW).advance(800)
    assert np.array_equal(np.vstack([first, rest]), whole)


def test_a_profile_state_of_the_wall_branch_layout_3_is_migrated():
    """The domain-wall development branch numbered its profile checkpoints 3 (one counter, no ``above``):
    the steps 3 -> 4 -> 5 continue them bit-identically."""
    whole = _strip_sim().advance(800)
    sim = _strip_sim()
    first = sim.advance(450)
    old = {k: v for k, v in sim.state().items() if k != "above"}
    old[LAYOUT_KEY] = np.asarray(3)
    old["counters"] = old["counters"][:1]
    resumed = Simulation.restore(_strip_model(), 2.0, state=old, **KW)
    assert int(resumed.state()[LAYOUT_KEY]) == CHECKPOINT_LAYOUT
    assert np.array_equal(np.vstack([first, resumed.advance(800)]), whole)


@pytest.mark.parametrize("layout, words", [
    (CHECKPOINT_LAYOUT + 1, [f"newer layout {CHECKPOINT_LAYOUT + 1}", f"reads layout {CHECKPOINT_LAYOUT}",
                             "rerun the task", "newer release"]),
    (0, ["old layout 0", f"reads layout {CHECKPOINT_LAYOUT}", "rerun the task", "older release"]),
])
def test_a_layout_without_migration_is_refused_with_both_numbers(layout, words):
    state = {**_sim().state(), LAYOUT_KEY: np.asarray(layout)}
    with pytest.raises(UserError) as err:
        Simulation.restore(_model(), 2.0, state=state, **KW)
    for w in words:
        assert w in err.value.message
    assert err.value.where == "checkpoint"


def test_a_damaged_layout_entry_or_missing_array_is_named():
    state = _sim().state()
    with pytest.raises(UserError, match="not a whole number"):
        Simulation.restore(_model(), 2.0, state={**state, LAYOUT_KEY: np.asarray(2.5)}, **KW)
    with pytest.raises(UserError, match="lacks hist"):
        Simulation.restore(_model(), 2.0, state={k: v for k, v in state.items() if k != "hist"}, **KW)




class _StopAfter:
    def __init__(self, flag: StopFlag, steps: int) -> None:
        self.flag, self.steps = flag, steps

    def task_started(self, *a):
        pass

    def task_advanced(self, steps_done, bins_done):
        if steps_done >= self.steps:
            self.flag.set("test stop")

    def task_finished(self, status):
        pass


def _set_layout(path: Path, layout: int | None) -> None:
    with h5py.File(path, "r+") as f:
        del f["checkpoint"][LAYOUT_KEY]
        if layout is not None:
            f["checkpoint"].create_dataset(LAYOUT_KEY, data=np.int64(layout))


def test_task_files_of_layout_1_resume_and_unknown_layouts_fail_the_task(tmp_path, monkeypatch, make_config):
    monkeypatch.setattr(pacing, "CHUNK_SECONDS", 1e-3)  # small chunks, so that the stop lands mid-run
    cfg_path = make_config("c.toml", seed=5, size=[4, 4], scan={"beta": 1.5},
                           warmup_steps=50, measure_steps=4000, bins=20)
    task = load_config(cfg_path).tasks()[0]
    whole = run_task(task, tmp_path / "whole")
    flag = StopFlag()
    out = run_task(task, tmp_path / "run", stop_flag=flag, progress=_StopAfter(flag, 1500))
    assert out.status == "stopped"
    _set_layout(out.path, CHECKPOINT_LAYOUT + 7)
    failed = run_task(task, tmp_path / "run")
    assert failed.status == "failed" and (f"newer layout {CHECKPOINT_LAYOUT + 7}, this program reads "
                                          f"layout {CHECKPOINT_LAYOUT}") in failed.message
    assert read_task(out.path).steps_done == out.steps_done  # the file is kept as it was
    _set_layout(out.path, None)  # as written before layouts were numbered
    assert run_task(task, tmp_path / "run").status == "done"
    a, b = read_task(whole.path), read_task(out.path)
    for name in a.bin_names:
        assert np.array_equal(a.bins[name], b.bins[name]), name
