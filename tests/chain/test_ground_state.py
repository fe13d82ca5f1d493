"""Ground state by beta doubling (``[ground_state]``): the doubled configuration, the stopping rule, the
files, resuming, and the physics against exact diagonalization.

Physics references (qmc/validation/exact, independent of the engine): ground-state energy per site and
<(M_s/N)^2> of the 4x4 periodic Heisenberg model and of the 4x4 J-Q2 model at J = Q = 1, stored below
(``test_stored_exact_values``, slow, recomputes them; the 4x4 Heisenberg energy is the well-known
-0.7017802 per site, from memory).  The 8x8 Heisenberg ground-state energy per site -0.673487(4) is from
Sandvik, Phys. Rev. B 56, 11678 (1997), value from memory (slow test).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

import qmc.chain.doubling as doubling
from qmc.chain.binning import error_estimate
from qmc.chain.convergence import CONVERGED, DOUBLE, NOT_REACHED, search_outcome, separation
from qmc.chain.doubling import double_beta, mirrored_state
from qmc.chain.simulation import Simulation
from qmc.cli.main import cli
from qmc.config.parser import build_model, load_config
from qmc.engine.rng import stream_seed
from qmc.engine.vertices import OP_TERM_SHIFT
from qmc.errors import UserError
from qmc.run.outcome import StopFlag
from qmc.run.single import run_task
from qmc.storage.search_record import read_search
from qmc.storage.task_file import read_task, task_path

# qmc/validation/exact (ExactSpectrum with translations), ground state of the 4x4 periodic cluster:
# (energy per site, <(M_s/N)^2>); recomputed by test_stored_exact_values
EXACT_GROUND_STATE = {
    "heisenberg": (-0.7017802005268036, 0.09217571203774924),
    "jq2": (-1.5474076156867165, 0.07899690220628236),  # J = 1, Q = 1
}
SANDVIK_1997_L8 = (-0.673487, 0.000004)  # Sandvik, PRB 56, 11678 (1997), 8x8 energy per site (from memory)

CONFIG = """
[run]
seed = {seed}
output = "run"
[lattice]
kind = "square"
size = [{L}, {L}]
[[terms]]
type = "heisenberg"
bonds = "nn"
coupling = 1.0
{q_term}
{scan}
[sampling]
warmup_steps = {warmup}
measure_steps = {measure}
bins = {bins}
checkpoint_seconds = 0.2
{extra}
[ground_state]
start_beta = {start}
max_beta = {top}
observables = ["energy", "m_stag2"]
"""

Q_TERM = """[[terms]]
type = "projector-product"
shape = "plaquette-pair"
coupling = 1.0"""


def write(tmp: Path, name: str = "gs.toml", *, seed=7, L=4, q=False, scan="", warmup=200, measure=4000,
          bins=40, extra="", start=2.0, top=64.0) -> Path:
    path = tmp / name
    path.write_text(CONFIG.format(seed=seed, L=L, q_term=Q_TERM if q else "", scan=scan, warmup=warmup,
                                  measure=measure, bins=bins, extra=extra, start=start, top=top))
    return path


def run(path: Path, **kw):
    config = load_config(path)
    (task,) = config.tasks()
    out = run_task(task, path.parent / "run", config_text=config.text, **kw)
    return task, out, read_task(task_path(path.parent / "run", task.task_id))


# ------------------------------------------------------------------------------------------- config


def test_config_without_beta_gives_one_task_per_point(tmp_path):
    config = load_config(write(tmp_path))
    (task,) = config.tasks()
    assert task.task_id == "c0" and task.beta == 2.0 and "beta" not in task.params
    assert task.ground_state.max_beta == 64.0 and task.ground_state.observables == ("energy", "m_stag2")
    scanned = load_config(write(tmp_path, "b.toml", scan="[scan]\nL = [4]", L='"L"'))
    assert [t.task_id for t in scanned.tasks()] == ["L4_c0"]


@pytest.mark.parametrize("kw,key,message", [
    ({"scan": "[scan]\nbeta = 4.0"}, "scan.beta", "remove beta from [scan]"),
    ({"top": 7.9}, "ground_state.max_beta", "at least 8"),
    ({"start": 0}, "ground_state.start_beta", "must be positive"),
    ({"extra": "[exchange]\nalong = \"J\""}, "ground_state", "cannot be combined"),
])
def test_bad_ground_state_configs_are_refused(tmp_path, kw, key, message):
    with pytest.raises(UserError) as err:
        load_config(write(tmp_path, **kw))
    assert message in err.value.message and err.value.where.endswith(key)


def test_unknown_observable_is_refused_before_the_run(tmp_path):
    path = write(tmp_path)
    path.write_text(path.read_text().replace('"m_stag2"]', '"binder_stag"]'))
    result = CliRunner().invoke(cli, ["run", str(path), "--quiet"])
    assert result.exit_code == 2 and "ground_state.observables" in result.output
    assert "binder_stag" in result.output and "Traceback" not in result.output


# ------------------------------------------------------------------------------------------- doubling


def _walk(model, spins: np.ndarray, ops: np.ndarray) -> np.ndarray:
    """Propagate ``spins`` through the string; every bond an operator acts on must be antiparallel."""
    s = spins.astype(int).copy()
    sites = np.asarray(model.bond_sites).reshape(-1, 2)
    for op in ops[ops >= 0]:
        t, mask = int(op) >> OP_TERM_SHIFT, int(op) & ((1 << OP_TERM_SHIFT) - 1)
        for a, b in enumerate(model.term_bonds[model.term_start[t]:model.term_start[t + 1]]):
            i, j = sites[b]
            assert s[i] == -s[j], "an operator acts on a parallel bond"
            if mask >> a & 1:
                s[i], s[j] = -s[i], -s[j]
    return s


def test_the_mirrored_string_is_a_configuration_at_twice_beta(tmp_path):
    (task,) = load_config(write(tmp_path, q=True)).tasks()
    model = build_model(task)
    sim = Simulation(model, 1.5, warmup_steps=50, measure_steps=40, bins=4, seed_words=stream_seed(1, "x"))
    sim.advance(50)
    state = sim.state()
    assert np.any(state["ops"] >= 0) and np.any((state["ops"] >= 0) & (state["ops"] & 7 > 0))
    assert np.array_equal(_walk(model, state["spins"], state["ops"]), state["spins"])
    new = mirrored_state(state)
    n = int(np.sum(state["ops"] >= 0))
    assert new["ops"].shape[0] == 2 * state["ops"].shape[0] and int(new["counters"][0]) == 2 * n
    mid = _walk(model, state["spins"], new["ops"][: state["ops"].shape[0]])
    assert np.array_equal(mid, state["spins"])  # half way: back at |a_0>
    assert np.array_equal(_walk(model, state["spins"], new["ops"]), state["spins"])  # periodic
    twice = double_beta(sim)
    assert twice.beta == 3.0 and twice.steps_done == 0 and twice.n_ops == 2 * n
    assert np.array_equal(twice.rng, sim.rng) and not twice.acc.any()
    twice.advance(30)  # runs
    assert twice.steps_done == 30


def test_doubling_refuses_a_kind_not_checked_for_mirroring(tmp_path, monkeypatch):
    (task,) = load_config(write(tmp_path)).tasks()
    sim = Simulation(build_model(task), 1.0, warmup_steps=5, measure_steps=4, bins=2,
                     seed_words=stream_seed(1, "x"))
    monkeypatch.setattr(doubling, "MIRROR_SAFE_KINDS", frozenset())
    with pytest.raises(ValueError, match="not available for the vertex kind"):
        double_beta(sim)


def test_the_stopping_rule():
    assert separation(1.0, 0.3, 1.5, 0.4) == pytest.approx(1.0)
    assert separation(1.0, 0.0, 1.0, 0.0) == 0.0 and separation(1.0, 0.0, 2.0, 0.0) == np.inf
    assert np.isnan(separation(1.0, np.nan, 1.0, 0.1))
    assert search_outcome([], 2.0, 64.0) == DOUBLE
    assert search_outcome([True], 4.0, 64.0) == DOUBLE  # one agreement is not enough
    assert search_outcome([False, True], 8.0, 64.0) == DOUBLE
    assert search_outcome([True, False, True, True], 32.0, 64.0) == CONVERGED
    assert search_outcome([True, True, False], 64.0, 64.0) == NOT_REACHED
    assert search_outcome([True, False], 32.0, 64.0) == DOUBLE  # 2 * 32 <= 64


# ------------------------------------------------------------------------------------------- physics


@pytest.mark.parametrize("model,q,start", [("heisenberg", False, 2.0), ("jq2", True, 0.5)])
def test_converged_stage_matches_the_exact_ground_state(tmp_path, model, q, start):
    path = write(tmp_path, q=q, start=start, top=128.0, measure=20000, bins=100, seed=41)
    task, out, d = run(path)
    assert out.status == "done"
    search = read_search(d.ground_state)
    assert search.outcome == CONVERGED
    betas = [s.beta for s in search.stages]
    assert betas == [start * 2**k for k in range(len(betas))] and len(betas) >= 3
    assert d.beta == betas[-1] and search.stages[-1].agree and search.stages[-2].agree
    # the analysis reads the converged (last) stage: /bins are its bins
    last = search.stages[-1]
    assert np.array_equal(d.bins["energy"], last.bins[:, last.names.index("energy")])
    e0, m0 = EXACT_GROUND_STATE[model]
    for name, exact in (("energy", e0), ("m_stag2", m0)):
        est = error_estimate(d.bins[name])
        assert est.plateau_ok
        assert abs(est.mean - exact) < 4 * est.error, (name, est.mean, est.error, exact)
        assert est.error < 0.01 * abs(exact)  # small enough to matter


@pytest.mark.slow
def test_stored_exact_values():
    from qmc.validation.exact import (
        ExactSpectrum,
        build_hamiltonian,
        q2_plaquette_pairs,
        square_bonds,
        square_translations,
        staggered_signs_square,
        sz_diagonal,
    )

    n = 16
    xb, yb = square_bonds(4, 4)
    ms = sz_diagonal(n, staggered_signs_square(4, 4))
    for model, q in (("heisenberg", 0.0), ("jq2", 1.0)):
        qterms = [(q, pair) for pair in q2_plaquette_pairs(4, 4)] if q else []
        spec = ExactSpectrum(build_hamiltonian(n, [(1.0, i, j) for i, j in xb + yb], qterms), n,
                             translations=square_translations(4, 4))
        energy, mstag2 = EXACT_GROUND_STATE[model]
        assert spec.ground_state_energy() / n == pytest.approx(energy, abs=1e-10)
        # beta = 500 is the ground state to double precision (the lowest gaps are 0.58 and 2.16)
        assert spec.expect_diag(500.0, (ms / n) ** 2) == pytest.approx(mstag2, abs=1e-10)


# ------------------------------------------------------------------------------------------- files


class StopAtStage:
    """Progress sink that stops the run in the ``stage``-th stage this call starts (0: the first), as soon as
    it has done ``steps`` steps (0: right when it starts, i.e. right after a doubling)."""

    def __init__(self, flag: StopFlag, stage: int, steps: int = 0) -> None:
        self.flag, self.stage, self.steps, self.started = flag, stage, steps, -1

    def task_started(self, *a):
        self.started += 1
        if self.started == self.stage and self.steps == 0:
            self.flag.set("test stop")

    def task_advanced(self, steps_done, bins_done):
        if self.started == self.stage and steps_done >= self.steps > 0:
            self.flag.set("test stop")

    def task_finished(self, status):
        pass


def _stages(d):
    return read_search(d.ground_state).stages


def test_a_stopped_search_resumes_bit_identically(tmp_path):
    ref_dir, run_dir = tmp_path / "ref", tmp_path / "resumed"
    ref_dir.mkdir()
    run_dir.mkdir()
    _, out, ref = run(write(ref_dir, start=0.5, top=16.0, measure=600, bins=20, warmup=50))
    ref_stages = _stages(ref)
    assert len(ref_stages) >= 3
    path = write(run_dir, start=0.5, top=16.0, measure=600, bins=20, warmup=50)
    stops = []
    for stage, steps in ((1, 0), (0, 10), (0, 300), (2, 0), (1, 100)):  # after a doubling, in the warm-up,
        flag = StopFlag()                                                # in the measurement
        task, out, d = run(path, stop_flag=flag, progress=StopAtStage(flag, stage, steps))
        assert out.status == "stopped" and d.ground_state["outcome"] == "running"
        stops.append((d.beta, d.steps_done))
    assert len(set(stops)) == len(stops) and len({b for b, _ in stops}) >= 3
    steps = [s for _, s in stops]
    assert 0 in steps and any(0 < s < 50 for s in steps) and any(s > 50 for s in steps)
    task, out, d = run(path)
    assert out.status == "done"
    got = _stages(d)
    assert [s.beta for s in got] == [s.beta for s in ref_stages]
    for a, b in zip(got, ref_stages, strict=True):
        assert np.array_equal(a.bins, b.bins) and a.agree == b.agree
    for name in ref.bin_names:
        assert np.array_equal(d.bins[name], ref.bins[name])
    assert d.ground_state["outcome"] == ref.ground_state["outcome"]


def test_not_reached_is_said(tmp_path):
    path = write(tmp_path, start=0.25, top=1.0, measure=2000, bins=40)
    task, out, d = run(path)
    assert out.status == "done"
    search = read_search(d.ground_state)
    assert search.outcome == NOT_REACHED and [s.beta for s in search.stages] == [0.25, 0.5, 1.0]
    assert not search.stages[1].agree  # beta 0.25 and 0.5 are far apart on 4x4
    text = CliRunner().invoke(cli, ["summary", str(tmp_path / "run")]).output
    assert "NOT reached up to max_beta = 1" in text and "beta ladder: 0.25 -> 0.5 -> 1" in text
    assert "warning: c0: ground state not reached" in text
    js = json.loads(CliRunner().invoke(cli, ["summary", str(tmp_path / "run"), "--json"]).output)[0]
    assert js["ground_state"]["outcome"] == NOT_REACHED and js["info"]["beta"] == 1.0
    assert len(js["ground_state"]["stages"]) == 3


def test_summary_and_analyze_use_the_last_stage(tmp_path):
    path = write(tmp_path, scan="[scan]\nL = [4, 6]", L='"L"', start=1.0, top=32.0, measure=2000, bins=40)
    result = CliRunner().invoke(cli, ["run", str(path), "--quiet"])
    assert result.exit_code == 0, result.output
    finals = {}
    for t in load_config(path).tasks():
        d = read_task(task_path(tmp_path / "run", t.task_id))
        finals[d.linear_size] = d.beta
        assert d.beta == _stages(d)[-1].beta
    text = CliRunner().invoke(cli, ["summary", str(tmp_path / "run")]).output
    assert "ground state by beta doubling: converged" in text and "beta ladder: 1 -> 2 -> 4" in text
    result = CliRunner().invoke(cli, ["analyze", str(tmp_path / "run"), "--json"])
    assert result.exit_code == 0, result.output
    points = json.loads((tmp_path / "run" / "analysis" / "observables.json").read_text())["points"]
    assert {(p["L"], p["beta"]) for p in points} == set(finals.items())


@pytest.mark.slow
def test_8x8_heisenberg_ground_state_energy_matches_the_published_value(tmp_path):
    path = write(tmp_path, L=8, start=4.0, top=128.0, warmup=2000, measure=200000, bins=200, seed=88)
    task, out, d = run(path)
    search = read_search(d.ground_state)
    assert out.status == "done" and search.outcome == CONVERGED
    est = error_estimate(d.bins["energy"])
    ref, ref_err = SANDVIK_1997_L8
    assert est.error < 2e-4
    assert abs(est.mean - ref) < 4 * np.hypot(est.error, ref_err), (est, d.beta)
