"""Runs grow: more bins of the same length continue every task from its checkpoint.

The reference of every comparison is a run that had the final ``measure_steps`` from the start: its bins
(and, with replica exchange, the ladder's swap statistics and walks) must equal those of the short run
plus its extension bit for bit.  What cannot continue (another bin length or warm-up) is refused with the
reason, and more scan points only add tasks.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from helpers.configs import JQ2_TERMS, write_config
from helpers.stopping import StopAfter

from qmc.cli.main import cli
from qmc.config.parser import load_config
from qmc.errors import UserError
from qmc.run.ladder_run import run_group
from qmc.run.plan import prepare_run
from qmc.run.serial import run_serial
from qmc.run.task_identity import BIN_LENGTH, CHAIN, LENGTH, SAME, WARMUP, stored_relation, task_fingerprint
from qmc.run.units import work_units
from qmc.storage.run_index import load_index
from qmc.storage.task_file import read_task, task_path


def config_file(tmp: Path, name: str, *, sizes=(4, 6), q=(0.5,), warmup=100, measure=600, bins=6,
                every=0) -> Path:
    return write_config(tmp, name, seed=31, terms=JQ2_TERMS, scan={"L": sizes, "Q": q, "beta": 2.0},
                        warmup_steps=warmup, measure_steps=measure, bins=bins,
                        exchange={"along": "Q", "every": every} if every else None)


def run(config: Path, out: Path, **kw):
    plan = prepare_run(load_config(config), out, **kw)
    return plan, run_serial(plan)


def bins_of(run_dir: Path) -> dict[str, dict[str, np.ndarray]]:
    return {p.stem: read_task(p).bins for p in sorted((run_dir / "tasks").glob("*.h5"))}


def assert_same_bins(a: Path, b: Path) -> None:
    got, want = bins_of(a), bins_of(b)
    assert set(got) == set(want) and want
    for tid, cols in want.items():
        assert set(got[tid]) == set(cols)
        for name, col in cols.items():
            assert np.array_equal(got[tid][name], col), f"{tid} {name}"


def test_more_bins_of_the_same_length_continue_bit_identically(tmp_path):
    short = config_file(tmp_path, "short.toml", measure=600, bins=6)  # 100 steps per bin
    long = config_file(tmp_path, "long.toml", measure=1500, bins=15)
    _, first = run(short, tmp_path / "grown")
    assert {o.status for o in first.outcomes} == {"done"}
    plan, report = run(long, tmp_path / "grown")
    assert sorted(plan.grown) == sorted(t.task_id for t in load_config(long).tasks())
    assert {o.status for o in report.outcomes} == {"done"} and {o.bins_done for o in report.outcomes} == {15}
    run(long, tmp_path / "direct")
    assert_same_bins(tmp_path / "grown", tmp_path / "direct")
    for p in (tmp_path / "grown" / "tasks").glob("*.h5"):
        d = read_task(p)
        sessions = d.provenance["sessions"]
        assert [s["ended"] for s in sessions] == ["done", "done"] and sessions[1]["steps_start"] == 700
        assert d.bins_total == 15 and d.steps_total == 1600 and d.status == "done"
    assert not list((tmp_path / "grown").rglob("*.old"))


def test_a_grown_run_stopped_and_resumed_is_still_bit_identical(tmp_path):
    """Grown, stopped in the middle of the extension by a time budget, resumed: same bins."""
    from qmc.run.outcome import StopFlag

    short = config_file(tmp_path, "short.toml", sizes=[6], measure=400, bins=4)
    long = config_file(tmp_path, "long.toml", sizes=[6], measure=2000, bins=20)
    run(short, tmp_path / "grown")
    plan = prepare_run(load_config(long), tmp_path / "grown")
    flag = StopFlag()
    report = run_serial(plan, stop_flag=flag, progress=StopAfter(flag, 801))
    assert report.unfinished and read_task(task_path(plan.run_dir, "L6_Q0.5_beta2_c0")).status == "stopped"
    run(long, tmp_path / "grown")
    run(long, tmp_path / "direct")
    assert_same_bins(tmp_path / "grown", tmp_path / "direct")


def test_fewer_bins_asked_keeps_the_finished_tasks(tmp_path):
    long = config_file(tmp_path, "long.toml", sizes=[4], measure=1200, bins=12)
    short = config_file(tmp_path, "short.toml", sizes=[4], measure=600, bins=6)
    run(long, tmp_path / "run")
    before = task_path(tmp_path / "run", "L4_Q0.5_beta2_c0").read_bytes()
    plan, report = run(short, tmp_path / "run")
    assert not plan.tasks and plan.done == ["L4_Q0.5_beta2_c0"] and not report.unfinished
    assert task_path(tmp_path / "run", "L4_Q0.5_beta2_c0").read_bytes() == before  # all 12 bins kept
    entry = load_index(tmp_path / "run")["tasks"]["L4_Q0.5_beta2_c0"]
    assert entry["status"] == "done" and entry["bins_done"] == 12 and entry["bins_total"] == 6


def test_relation_of_stored_files(tmp_path):
    base = load_config(config_file(tmp_path, "a.toml", sizes=[4])).tasks()[0]

    def rel(**kw):
        other = load_config(config_file(tmp_path, "b.toml", sizes=[4], **kw)).tasks()[0]
        s = other.sampling
        return stored_relation(base, task_fingerprint(other), s.measure_steps // s.bins, s.bins,
                               s.warmup_steps + s.measure_steps)

    assert rel() == SAME
    assert rel(measure=1200, bins=12) == LENGTH == rel(measure=300, bins=3)
    assert rel(measure=1200, bins=6) == BIN_LENGTH
    assert rel(warmup=200) == WARMUP == rel(warmup=200, measure=1200, bins=12)
    other = load_config(config_file(tmp_path, "c.toml", sizes=[4], q=[0.6])).tasks()[0]
    assert stored_relation(base, task_fingerprint(other), 100, 6, 700) == CHAIN


def test_another_warm_up_is_refused_with_the_reason(tmp_path):
    run(config_file(tmp_path, "a.toml", sizes=[4]), tmp_path / "run")
    with pytest.raises(UserError) as info:
        prepare_run(load_config(config_file(tmp_path, "b.toml", sizes=[4], warmup=300, measure=1200,
                                            bins=12)), tmp_path / "run")
    msg = info.value.message
    assert "was measured after 100 warm-up steps, this configuration asks for 300" in msg
    assert "restore the old warmup_steps" in msg and "--force" in msg


def test_cli_grows_a_run_and_says_so(tmp_path):
    short = config_file(tmp_path, "short.toml", sizes=[4], q=[0.5])
    runner = CliRunner()
    assert runner.invoke(cli, ["run", str(short), "--out", str(tmp_path / "run")]).exit_code == 0
    long = config_file(tmp_path, "long.toml", sizes=[4, 6], q=[0.5], measure=900, bins=9)
    result = runner.invoke(cli, ["run", str(long), "--out", str(tmp_path / "run")])
    assert result.exit_code == 0, result.output
    err = result.stderr
    assert ("note: 1 finished task(s) continue from their checkpoints to 9 bins of 100 steps: "
            "L4_Q0.5_beta2_c0") in err
    assert "resuming task L4_Q0.5_beta2_c0 at step 700 of 1000 (6 of 9 bins)" in err
    assert "done: all 2 task(s) finished" in err
    # another bin length: refused, nothing changed
    index = (tmp_path / "run" / "index.json").read_bytes()
    other = config_file(tmp_path, "other.toml", sizes=[4, 6], q=[0.5], measure=900, bins=3)
    result = runner.invoke(cli, ["run", str(other), "--out", str(tmp_path / "run")])
    assert result.exit_code == 2 and "cannot change its bin length" in result.stderr
    assert "bins = 9 with measure_steps = 900" in result.stderr
    assert (tmp_path / "run" / "index.json").read_bytes() == index


# (600, 6): the old end 700 = 100 * 7 is an exchange point; (590, 59): 690 is none
@pytest.mark.parametrize("measure, bins", [(600, 6), (590, 59)])
def test_an_exchange_ladder_grows_bit_identically(tmp_path, measure, bins):
    """The ladder's last step is no exchange point: continued from there, the swap round of that step is
    held first, so bins, walks and swap counts equal those of the longer run."""
    kw = dict(sizes=[4], q=[0.5, 0.7, 0.9], every=7)
    short = config_file(tmp_path, "short.toml", measure=measure, bins=bins, **kw)
    long = config_file(tmp_path, "long.toml", measure=3 * measure, bins=3 * bins, **kw)

    def ladder(config):
        cfg = load_config(config)
        return cfg, work_units(cfg.tasks())[0]

    cfg, unit = ladder(short)
    assert {o.status for o in run_group(unit, tmp_path / "grown", config_text=cfg.text)} == {"done"}
    cfg, unit = ladder(long)
    assert {o.status for o in run_group(unit, tmp_path / "grown", config_text=cfg.text)} == {"done"}
    assert {o.status for o in run_group(unit, tmp_path / "direct", config_text=cfg.text)} == {"done"}
    assert_same_bins(tmp_path / "grown", tmp_path / "direct")
    for t in unit:
        a = read_task(task_path(tmp_path / "grown", t.task_id)).exchange
        b = read_task(task_path(tmp_path / "direct", t.task_id)).exchange
        for key in ("attempted", "accepted", "walker", "round_trips"):
            assert np.array_equal(np.asarray(a[key]), np.asarray(b[key])), key
