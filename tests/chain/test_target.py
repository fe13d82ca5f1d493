"""Precision targets (``[sampling] target``): a task stops at the first bin count n >= 64 at which every
listed observable's binning error meets its goal, and its bins are then exactly the first n bins of the same
chain run without a target -- uninterrupted, stopped and resumed, or as a replica-exchange ladder on teams of
any size (the ladder stops at the first meeting at which all its chains meet the target).

The expected stopping points are computed here by brute force from reference runs without a target, with
the plateau rule of qmc.chain.binning, so every test can fail: a stop one bin early or late, a bin that
differs, a ladder that stops before all its chains are done.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from helpers.exchange_ladder import stored
from helpers.exchange_ladder import write_config as write_ladder_config
from helpers.stopping import StopAfter
from helpers.team_threads import run_team

from qmc.chain.binning import error_estimate
from qmc.chain.target import MIN_TARGET_BINS, TargetWatch, check_goals
from qmc.cli.main import cli
from qmc.config.parser import load_config
from qmc.errors import UserError
from qmc.exchange.ladder import Ladder
from qmc.run.ladder_run import run_group
from qmc.run.outcome import StopFlag
from qmc.run.single import run_task
from qmc.run.units import work_units
from qmc.storage.task_file import read_task, task_path

HEIS = """
[run]
seed = 11
output = "run"
[lattice]
kind = "square"
size = [4, 4]
[[terms]]
type = "heisenberg"
bonds = "nn"
coupling = 1.0
[scan]
beta = 1.0
[sampling]
warmup_steps = 100
measure_steps = {measure}
bins = {bins}
checkpoint_seconds = 0.2
{target}
"""


def heis(tmp: Path, name: str, target: str = "", measure: int = 3000, bins: int = 600) -> Path:
    path = tmp / name
    path.write_text(HEIS.format(measure=measure, bins=bins, target=target))
    return path


def table_of(path: Path) -> np.ndarray:
    return stored(path)[0]


def first_met(goals, table: np.ndarray, names) -> int | None:
    """Brute force: the first n >= 64 at which every goal holds for the first n rows (None: never)."""
    for n in range(MIN_TARGET_BINS, table.shape[0] + 1):
        if all(c.met for c in check_goals(goals, table[:n], names)):
            return n
    return None


# ------------------------------------------------------------------------------------------- the rule


def test_watch_stops_at_the_first_bin_count_that_meets_every_goal():
    rng = np.random.default_rng(3)
    n = 400
    x = np.zeros(n)
    for i in range(1, n):  # AR(1), tau_int = (1 + 0.1) / (2 (1 - 0.1)) = 0.61 bins
        x[i] = 0.1 * x[i - 1] + rng.normal()
    y = 5.0 + rng.normal(size=n)
    table = np.column_stack([x, y])
    names = ("a", "b")
    goal_a = error_estimate(x[:250]).error * 1.0001
    goals = [("a", goal_a, False), ("b", 0.02, True)]  # 2 % of |mean 5|: reached around 100 bins
    expected = first_met(goals, table, names)
    assert expected is not None and MIN_TARGET_BINS < expected <= 250
    watch = TargetWatch(goals, names)
    got = next(i + 1 for i, row in enumerate(table) if watch.take(row))
    assert got == expected
    assert TargetWatch(goals, names, table[:expected]).met
    assert not TargetWatch(goals, names, table[:expected - 1]).met
    # fewer than 64 bins never meet a target, however small their error
    assert not TargetWatch([("b", 1e9, False)], names, table[:MIN_TARGET_BINS - 1]).met
    assert TargetWatch([("b", 1e9, False)], names, table[:MIN_TARGET_BINS]).met
    assert not TargetWatch([], names, table).met  # no target: never met
    with pytest.raises(KeyError):
        TargetWatch([("c", 1.0, False)], names)


# ------------------------------------------------------------------------------------------- config


def test_target_is_read_absolute_and_relative(tmp_path):
    config = load_config(heis(tmp_path, "a.toml", 'target = { energy = 1e-4, m_stag2 = "0.5%" }'))
    assert config.sampling.target == (("energy", 1e-4, False), ("m_stag2", 0.005, True))
    plain = load_config(heis(tmp_path, "b.toml"))
    assert plain.sampling.target == ()
    assert config.fingerprint() != plain.fingerprint()  # a run directory remembers its target
    from qmc.run.task_identity import task_fingerprint
    assert task_fingerprint(config.tasks()[0]) == task_fingerprint(plain.tasks()[0])  # the chain is the same


@pytest.mark.parametrize("target,bins,message", [
    ("target = { energy = 1e-4 }", 20, "raise bins to at least 64"),
    ('target = { energy = "0.5" }', 600, "not a relative error"),
    ('target = { energy = "-1%" }', 600, "not a relative error"),
    ("target = { energy = 0 }", 600, "must be a positive error bar"),
    ("target = { }", 600, "must be a table of error bars"),
    ("target = 1e-4", 600, "must be a table of error bars"),
    ("target = { energy = true }", 600, "must be a number"),
])
def test_bad_targets_are_refused_with_their_key(tmp_path, target, bins, message):
    with pytest.raises(UserError) as err:
        load_config(heis(tmp_path, "c.toml", target, bins=bins))
    assert message in err.value.message
    assert "sampling.target" in err.value.where


def test_an_observable_without_bins_is_refused_before_the_run(tmp_path):
    path = heis(tmp_path, "c.toml", 'target = { binder_stag = "1%" }')
    result = CliRunner().invoke(cli, ["run", str(path), "--quiet"])
    assert result.exit_code == 2
    assert "sampling.target.binder_stag" in result.output
    assert "not an observable with bins" in result.output and "Traceback" not in result.output
    assert not (tmp_path / "run" / "tasks").exists() or not any((tmp_path / "run" / "tasks").iterdir())


# ------------------------------------------------------------------------------------------- one task


@pytest.fixture(scope="module")
def single_reference(tmp_path_factory):
    """All 600 bins of the chain without a target, and a target that is met after some 100-200 bins."""
    tmp = tmp_path_factory.mktemp("ref")
    config = load_config(heis(tmp, "ref.toml"))
    task = config.tasks()[0]
    out = run_task(task, tmp / "run", config_text=config.text)
    assert out.status == "done"
    table, data = stored(task_path(tmp / "run", task.task_id))
    assert table.shape[0] == 600
    e = error_estimate(table[:200, data.bin_names.index("energy")])
    m = error_estimate(table[:200, data.bin_names.index("m_stag2")])
    assert e.plateau_ok and m.plateau_ok
    target = f'target = {{ energy = {e.error * 1.0001!r}, m_stag2 = "{100 * m.error / m.mean * 1.0001!r}%" }}'
    return table, data.bin_names, target


def test_a_task_stops_at_its_target_with_the_bins_of_the_run_without_one(tmp_path, single_reference):
    table, names, target = single_reference
    config = load_config(heis(tmp_path, "t.toml", target))
    expected = first_met(config.sampling.target, table, names)
    assert expected is not None and MIN_TARGET_BINS <= expected <= 200
    task = config.tasks()[0]
    out = run_task(task, tmp_path / "run", config_text=config.text)
    assert out.status == "done" and out.bins_done == expected and out.steps_done == 100 + 5 * expected
    d = read_task(task_path(tmp_path / "run", task.task_id))
    assert d.target_met and d.status == "done"
    assert np.array_equal(table_of(task_path(tmp_path / "run", task.task_id)), table[:expected])
    # qmc summary: met, at how many bins
    result = CliRunner().invoke(cli, ["summary", str(tmp_path / "run")])
    assert result.exit_code == 0, result.output
    assert f"precision target met at {expected} bins" in result.output
    assert "tau_int[steps]" in result.output
    js = json.loads(CliRunner().invoke(cli, ["summary", str(tmp_path / "run"), "--json"]).output)[0]
    assert js["target"]["met"] and js["target"]["bins"] == expected
    assert all(c["met"] for c in js["target"]["checks"])
    e = js["observables"]["energy"]
    assert e["tau_int_steps"] == pytest.approx(e["tau_int"] * 5)


def test_a_stopped_task_resumes_to_the_same_stop(tmp_path, single_reference):
    table, names, target = single_reference
    config = load_config(heis(tmp_path, "t.toml", target))
    expected = first_met(config.sampling.target, table, names)
    task = config.tasks()[0]
    for steps in (60, 100 + 5 * 40 + 3, 100 + 5 * (expected - 1) + 2):  # warm-up, mid-bin, last bin
        flag = StopFlag()
        out = run_task(task, tmp_path / "run", stop_flag=flag, progress=StopAfter(flag, steps),
                       config_text=config.text)
        assert out.status in ("stopped", "done")
    out = run_task(task, tmp_path / "run", config_text=config.text)
    assert out.status == "done" and out.bins_done == expected
    assert np.array_equal(table_of(task_path(tmp_path / "run", task.task_id)), table[:expected])


def test_an_unreachable_target_runs_to_measure_steps(tmp_path, single_reference):
    table, _, _ = single_reference
    config = load_config(heis(tmp_path, "t.toml", "target = { energy = 1e-9 }"))
    task = config.tasks()[0]
    out = run_task(task, tmp_path / "run", config_text=config.text)
    assert out.status == "done" and out.bins_done == 600
    d = read_task(task_path(tmp_path / "run", task.task_id))
    assert not d.target_met
    assert np.array_equal(table_of(task_path(tmp_path / "run", task.task_id)), table)
    text = CliRunner().invoke(cli, ["summary", str(tmp_path / "run")]).output
    assert "precision target NOT met: measure_steps used up at 600 bins" in text


# ------------------------------------------------------------------------------------------- a ladder

EVERY = 7  # meetings every 7 steps, bins of 10 steps: the ladder decides between bin boundaries


def jq2_ladder(tmp: Path, name: str, target: str = "") -> Path:
    path = write_ladder_config(tmp, seed=23, q=[0.5, 1.0, 1.5], warmup=200, measure=4000, bins=400,
                               replicas=1, every=EVERY, name=name)
    text = path.read_text()
    assert "checkpoint_seconds = 0.2\n" in text
    path.write_text(text.replace("checkpoint_seconds = 0.2\n", f"checkpoint_seconds = 0.2\n{target}\n"))
    return path


@pytest.fixture(scope="module")
def ladder_reference(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("ladder")
    config = load_config(jq2_ladder(tmp, "ref.toml"))
    (unit,) = work_units(config.tasks())
    rows = Ladder(unit).advance(10**9)
    names = Ladder(unit).sims[0].bin_names
    col = names.index("energy")
    worst = max(error_estimate(r[:150, col]).error for r in rows)
    return rows, names, f"target = {{ energy = {worst * 1.0001!r} }}"


def expected_ladder_stop(goals, rows, names, warmup=200, per_bin=10, total=4200) -> int:
    """Bins at the first meeting (a multiple of EVERY after the warm-up) at which every chain's bins so far
    meet the target."""
    for s in range(EVERY * (warmup // EVERY + 1), total, EVERY):
        n = (s - warmup) // per_bin
        if n >= MIN_TARGET_BINS and all(all(c.met for c in check_goals(goals, r[:n], names)) for r in rows):
            return n
    raise AssertionError("the target is never met by all chains")


@pytest.mark.parametrize("size", [1, 2])
def test_a_ladder_stops_when_all_its_chains_meet_the_target(tmp_path, ladder_reference, size):
    rows, names, target = ladder_reference
    config = load_config(jq2_ladder(tmp_path, "t.toml", target))
    (unit,) = work_units(config.tasks())
    expected = expected_ladder_stop(config.sampling.target, rows, names)
    single = [first_met(config.sampling.target, r, names) for r in rows]
    assert min(single) < expected <= 150  # some chain met it earlier on its own: the ladder waited
    in_memory = Ladder(unit)
    got = in_memory.advance(10**9)
    assert in_memory.finished and all(len(r) == expected for r in got)
    out = run_team(unit, tmp_path / "run", size, config.text)
    assert {o.status for part in out for o in part} == {"done"}
    for i, t in enumerate(unit):
        table, d = stored(task_path(tmp_path / "run", t.task_id))
        assert np.array_equal(table, rows[i][:expected]), t.task_id
        assert d.target_met


def test_a_stopped_ladder_resumes_to_the_same_stop(tmp_path, ladder_reference):
    rows, names, target = ladder_reference
    config = load_config(jq2_ladder(tmp_path, "t.toml", target))
    (unit,) = work_units(config.tasks())
    expected = expected_ladder_stop(config.sampling.target, rows, names)
    for steps in (3 * 150, 3 * (200 + 10 * 70 + 4)):
        flag = StopFlag()
        out = run_group(unit, tmp_path / "run", stop_flag=flag, progress=StopAfter(flag, steps),
                        config_text=config.text)
        assert {o.status for o in out} == {"stopped"}
    out = run_group(unit, tmp_path / "run", config_text=config.text)
    assert {o.status for o in out} == {"done"}
    for i, t in enumerate(unit):
        assert np.array_equal(stored(task_path(tmp_path / "run", t.task_id))[0], rows[i][:expected])


def test_a_run_that_stopped_at_its_target_grows_when_the_target_goes(tmp_path, single_reference):
    """Run growth (qmc.run.changes): the same target keeps the stopped task finished; without the target
    the same chain continues to measure_steps, with the bins of the run that never had one."""
    from qmc.run.plan import prepare_run
    from qmc.run.serial import run_serial

    table, names, target = single_reference
    stopped = load_config(heis(tmp_path, "t.toml", target))
    expected = first_met(stopped.sampling.target, table, names)
    assert CliRunner().invoke(cli, ["run", str(tmp_path / "t.toml"), "--quiet"]).exit_code == 0
    tid = stopped.tasks()[0].task_id
    assert read_task(task_path(tmp_path / "run", tid)).bins_done == expected < 600
    again = prepare_run(load_config(heis(tmp_path, "t.toml", target)))
    assert again.tasks == [] and again.done == [tid] and again.grown == []
    plain = prepare_run(load_config(heis(tmp_path, "t.toml")))
    assert [t.task_id for t in plain.tasks] == [tid] and plain.grown == [tid]
    assert run_serial(plain).unfinished == []
    assert np.array_equal(table_of(task_path(tmp_path / "run", tid)), table)
