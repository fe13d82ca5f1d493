"""Replica exchange along a coupling (qmc.exchange, qmc.run.ladder_run): exact results, bookkeeping, files,
resuming.

Physics: on the 4x4 J-Q2 model (J = 1, beta = 2) at four values of Q, the energy per site and m_stag2 with
exchange agree with exact diagonalization (qmc/validation/exact, independent of the engine) within 4 error
bars, and with independent chains (no exchange) within 4 combined error bars.  The exact numbers are
stored below; ``test_stored_exact_values`` (slow) recomputes them.

Bookkeeping: attempt counts follow the even/odd pair schedule, round trips follow their definition on
scripted walks, and a ladder's bins do not depend on how its work is chunked, stopped, resumed, or on a
kill between the rewrites of its task files.
"""

from __future__ import annotations

import json
import random
import shutil

import numpy as np
import pytest
from helpers.exchange_ladder import Q_VALUES, ladder_of, reference, stored, write_config
from helpers.stopping import StopAfter

from qmc.chain.simulation import Simulation
from qmc.config.parser import build_model, load_config
from qmc.engine.rng import stream_seed
from qmc.errors import UserError
from qmc.exchange.ladder import GROUP_STATE_KEYS, Ladder, check_ladders
from qmc.exchange.records import exchange_summary
from qmc.run.ladder_run import run_group
from qmc.run.outcome import StopFlag
from qmc.run.single import run_task
from qmc.run.units import work_units
from qmc.storage.task_file import read_task, task_path

# 4x4 periodic J-Q2 model, J = 1, beta = 2: (energy per site, <(M_s/N)^2>) computed with
# qmc/validation/exact (ExactSpectrum with translations); test_stored_exact_values recomputes them.
EXACT = {
    0.5: (-1.1001222488325018, 0.0842630108155485),
    0.75: (-1.3215782069398796, 0.08150908238259098),
    1.0: (-1.5419989407099006, 0.07921662692196214),
    1.25: (-1.7615211513838562, 0.07742456296524099),
}


# ------------------------------------------------------------------------------------------- grouping


def test_work_units_keep_ladders_together_in_ladder_order(tmp_path):
    config = load_config(write_config(tmp_path, q=[1.25, 0.5, 1.0], replicas=2))
    tasks = config.tasks()
    units = work_units(tasks)
    assert len(units) == 2
    for unit in units:
        assert [t.params["Q"] for t in unit] == [0.5, 1.0, 1.25]
        assert len({t.exchange_group for t in unit}) == 1
    # a selection of one task still brings its whole ladder
    units = work_units([tasks[-1]], tasks)
    assert len(units) == 1 and len(units[0]) == 3 and tasks[-1] in units[0]


def test_zero_coupling_that_drops_terms_is_refused(tmp_path):
    config = load_config(write_config(tmp_path, q=[0.0, 0.5, 1.0]))
    with pytest.raises(UserError) as info:
        check_ladders(config.tasks())
    msg = str(info.value)
    assert "exchange.along" in info.value.where and "same terms" in msg and "zero coupling" in msg


# ------------------------------------------------------------------------------------------- ladder logic


def test_chunking_does_not_change_anything(tmp_path):
    _, unit = ladder_of(write_config(tmp_path, measure=1000, bins=10, every=3))
    rows, walk, state = reference(unit)
    lad = Ladder(unit)
    got = [[] for _ in unit]
    rng = random.Random(5)
    while not lad.done:
        for i, r in enumerate(lad.advance(rng.randint(1, 40))):
            got[i].extend(r)
    for i in range(len(unit)):
        assert np.array_equal(np.array(got[i]), rows[i])
        assert lad.walker_rows[i] == walk[i] and len(walk[i]) == 10
    for k in GROUP_STATE_KEYS:
        assert np.array_equal(lad.group_state()[k], state[k]), k


def test_first_steps_equal_an_independent_chain(tmp_path):
    """Before the first exchange point (and the warm-up end) every chain is its task's chain alone."""
    _, unit = ladder_of(write_config(tmp_path, warmup=100, measure=400, bins=20, every=50))
    lad = Ladder(unit)
    lad.advance(40)
    for t, got in zip(unit, lad.local_sims, strict=True):
        s = t.sampling
        sim = Simulation(build_model(t), t.beta, warmup_steps=s.warmup_steps, measure_steps=s.measure_steps,
                         bins=s.bins, seed_words=stream_seed(t.seed, t.seed_key))
        sim.advance(40)
        mine, theirs = got.state(), sim.state()
        assert all(np.array_equal(mine[k], theirs[k]) for k in theirs)


def test_attempt_counts_follow_the_even_odd_schedule(tmp_path):
    warmup, measure, every = 100, 600, 7
    _, unit = ladder_of(write_config(tmp_path, warmup=warmup, measure=measure, bins=10, every=every))
    _, _, st = reference(unit)
    m = len(unit)
    expected = {"warmup": np.zeros(m - 1, int), "measure": np.zeros(m - 1, int)}
    for s in range(every, warmup + measure, every):  # exchange points strictly inside the run
        r = s // every
        phase = "measure" if s >= warmup else "warmup"
        for i in range(m - 1):
            if i % 2 == (r - 1) % 2:
                expected[phase][i] += 1
    assert np.array_equal(st["attempted"], expected["measure"])
    assert np.array_equal(st["warmup_attempted"], expected["warmup"])
    assert np.all(st["accepted"] <= st["attempted"]) and np.all(st["accepted"] > 0)
    assert sorted(st["labels"].tolist()) == list(range(m))
    assert np.all(st["n_up"] + st["n_down"] <= len(range(warmup, warmup + measure, every)))


def test_cutoffs_are_equal_after_the_warm_up(tmp_path):
    _, unit = ladder_of(write_config(tmp_path, warmup=200, measure=100, bins=10))
    lad = Ladder(unit)
    lad.advance(199)
    lad.advance(1)
    assert len({sim.cutoff for sim in lad.local_sims}) == 1
    assert max(sim.n_ops for sim in lad.local_sims) < lad.local_sims[0].cutoff


def test_round_trips_on_scripted_walks(tmp_path):
    _, unit = ladder_of(write_config(tmp_path, q=[0.5, 0.75, 1.0], measure=100, bins=10))
    lad = Ladder(unit)  # fresh: configuration 0 at the bottom (moving up), 2 at the top (never at the bottom)
    st = lad.state
    for labels in ([1, 2, 0], [0, 1, 2], [2, 1, 0], [1, 0, 2], [0, 2, 1], [1, 2, 0], [0, 1, 2]):
        st["labels"][:] = labels
        lad._walk(count=True)
    # configuration 0: bottom, top (1), bottom (2: one), top (3), bottom (5: two), top (6), bottom (7: three)
    # configuration 1: middle, bottom (1), top (5), bottom (6: one)
    # configuration 2: top first (never at the bottom before), bottom (3: not counted), top (4)
    assert st["round_trips"].tolist() == [3, 1, 0]
    # last extremes: 0 the bottom (moving up), 1 the bottom, 2 the top after having been at the bottom
    assert st["direction"].tolist() == [1, 1, -1]


def test_exchange_summary_rates():
    info = {"attempted": np.array([10, 20, 0]), "accepted": np.array([5, 2, 0]), "position": 1,
            "values": [1.0, 2.0, 3.0, 4.0], "value": 2.0, "parameter": "g",
            "round_trips": np.array([1, 0, 2, 0])}
    s = exchange_summary(info)
    assert s["acceptance"][:2] == [0.5, 0.1] and np.isnan(s["acceptance"][2])
    assert s["acceptance_up"] == 0.1 and s["acceptance_down"] == 0.5 and s["round_trips"] == 3
    assert exchange_summary(None) is None and exchange_summary({"parameter": "g"}) is None


# ------------------------------------------------------------------------------------------- files


def run_until(unit, run_dir, steps, text):
    flag = StopFlag()
    return run_group(unit, run_dir, stop_flag=flag, progress=StopAfter(flag, steps), config_text=text)


def test_files_hold_bins_walks_and_rates(tmp_path):
    config, unit = ladder_of(write_config(tmp_path, measure=2000, bins=10))
    rows, walk, state = reference(unit)
    out = run_group(unit, tmp_path / "run", config_text=config.text)
    assert [o.status for o in out] == ["done"] * len(unit)
    for i, t in enumerate(unit):
        table, d = stored(task_path(tmp_path / "run", t.task_id))
        assert np.array_equal(table, rows[i])
        ex = d.exchange
        assert ex["parameter"] == "Q" and ex["position"] == i and ex["value"] == t.params["Q"]
        assert list(np.asarray(ex["values"]).reshape(-1)) == Q_VALUES
        assert list(np.asarray(ex["walker"]).reshape(-1)) == walk[i]
        assert np.array_equal(np.asarray(ex["attempted"]).reshape(-1), state["attempted"])
        assert np.array_equal(np.asarray(ex["accepted"]).reshape(-1), state["accepted"])
        summary = exchange_summary(ex)
        assert summary["position"] == i and len(summary["acceptance"]) == len(unit) - 1
    # a second call finds everything done and changes nothing
    before = [task_path(tmp_path / "run", t.task_id).stat().st_mtime_ns for t in unit]
    again = run_group(unit, tmp_path / "run", config_text=config.text)
    assert [o.status for o in again] == ["done"] * len(unit)
    assert [task_path(tmp_path / "run", t.task_id).stat().st_mtime_ns for t in unit] == before


def test_stop_resume_and_a_kill_between_file_rewrites_are_bit_identical(tmp_path):
    config, unit = ladder_of(write_config(tmp_path, measure=3000, bins=30, every=4))
    rows, walk, _ = reference(unit)
    run_dir = tmp_path / "run"
    m, total = len(unit), unit[0].sampling.warmup_steps + unit[0].sampling.measure_steps
    out = run_until(unit, run_dir, m * total // 3, config.text)
    assert {o.status for o in out} == {"stopped"}
    s1 = out[0].steps_done
    assert s1 % 4 == 0 and all(o.steps_done == s1 for o in out)
    backup = tmp_path / "backup"
    shutil.copytree(run_dir, backup)
    out = run_until(unit, run_dir, 2 * m * total // 3, config.text)
    s2 = out[0].steps_done
    assert s2 > s1
    # a kill after rewriting only some files: positions 0 and 2 still hold step s1
    for i in (0, 2):
        shutil.copy(task_path(backup, unit[i].task_id), task_path(run_dir, unit[i].task_id))
    out = run_group(unit, run_dir, config_text=config.text)
    assert {o.status for o in out} == {"done"}
    for i, t in enumerate(unit):
        table, d = stored(task_path(run_dir, t.task_id))
        assert np.array_equal(table, rows[i]), t.task_id
        assert list(np.asarray(d.exchange["walker"]).reshape(-1)) == walk[i]
        ended = [s["ended"] for s in d.provenance["sessions"]]
        assert ended == (["stopped", "done"] if i in (0, 2) else ["stopped", "stopped", "done"])


def test_a_ladder_stopped_in_its_warm_up_resumes(tmp_path):
    # no bins yet at the stop: the files hold an empty bin table (c48469a failed here on resuming)
    config, unit = ladder_of(write_config(tmp_path, warmup=500, measure=1000, bins=10, every=5))
    rows, walk, _ = reference(unit)
    run_dir = tmp_path / "run"
    out = run_until(unit, run_dir, len(unit) * 100, config.text)
    assert {o.status for o in out} == {"stopped"} and 0 < out[0].steps_done < 500 and out[0].bins_done == 0
    out = run_group(unit, run_dir, config_text=config.text)
    assert {o.status for o in out} == {"done"}, out[0].message
    for i, t in enumerate(unit):
        table, d = stored(task_path(run_dir, t.task_id))
        assert np.array_equal(table, rows[i]), t.task_id
        assert list(np.asarray(d.exchange["walker"]).reshape(-1)) == walk[i]


def test_a_missing_file_restarts_the_ladder(tmp_path):
    config, unit = ladder_of(write_config(tmp_path, measure=1000, bins=10))
    rows, _, _ = reference(unit)
    run_dir = tmp_path / "run"
    run_until(unit, run_dir, len(unit) * 700, config.text)
    task_path(run_dir, unit[1].task_id).unlink()
    out = run_group(unit, run_dir, config_text=config.text)
    assert {o.status for o in out} == {"done"}
    for i, t in enumerate(unit):
        assert np.array_equal(stored(task_path(run_dir, t.task_id))[0], rows[i])


def test_a_file_written_without_exchange_is_not_resumed(tmp_path):
    config, unit = ladder_of(write_config(tmp_path, measure=1000, bins=10))
    flag = StopFlag()
    flag.set("test")
    run_task(unit[0], tmp_path / "run", stop_flag=flag, config_text=config.text)  # a plain-chain file
    out = run_group(unit, tmp_path / "run", config_text=config.text)
    assert {o.status for o in out} == {"failed"}
    assert "replica exchange" in out[0].message


# ------------------------------------------------------------------------------------------- physics


def _mean_err(x: np.ndarray) -> tuple[float, float]:
    return float(np.mean(x)), float(np.std(x, ddof=1) / np.sqrt(len(x)))


def test_exchange_matches_exact_and_independent_chains(tmp_path):
    config, unit = ladder_of(write_config(tmp_path, seed=2024, warmup=2000, measure=40000, bins=40))
    names = Simulation(build_model(unit[0]), 2.0, warmup_steps=0, measure_steps=2, bins=2,
                       seed_words=stream_seed(1, "x")).bin_names
    col = {n: k for k, n in enumerate(names)}
    lad = Ladder(unit)
    rows = lad.advance(10**12)
    st = lad.group_state()
    rates = st["accepted"] / st["attempted"]
    print("acceptance", rates.tolist(), "round trips", st["round_trips"].tolist())
    assert np.all(rates > 0.1), rates
    assert st["round_trips"].sum() >= 10
    for i, t in enumerate(unit):
        q = t.params["Q"]
        s = t.sampling
        sim = Simulation(build_model(t), t.beta, warmup_steps=s.warmup_steps, measure_steps=s.measure_steps,
                         bins=s.bins, seed_words=stream_seed(99, t.seed_key))
        plain = sim.advance(10**12)
        for k, name in enumerate(("energy", "m_stag2")):
            x, dx = _mean_err(rows[i][:, col[name]])
            y, dy = _mean_err(plain[:, col[name]])
            print(q, name, x, dx, y, dy, EXACT.get(q))
            if q in EXACT:
                assert abs(x - EXACT[q][k]) < 4 * dx, (q, name, x, dx, EXACT[q][k])
            assert abs(x - y) < 4 * np.hypot(dx, dy), (q, name, x, dx, y, dy)
        e, de = _mean_err(rows[i][:, col["energy"]])
        assert de / abs(e) < 3e-3


@pytest.mark.slow
def test_stored_exact_values():
    from qmc.validation.exact import (
        ExactSpectrum,
        basis_states,
        build_hamiltonian,
        q2_plaquette_pairs,
        square_bonds,
        square_translations,
    )

    L, n = 4, 16
    xb, yb = square_bonds(L, L)
    s = basis_states(n)
    sz = np.array([((s >> i) & 1) - 0.5 for i in range(n)])
    phase = np.array([1 - 2 * ((x + y) % 2) for y in range(L) for x in range(L)], dtype=float)
    ms = (phase[:, None] * sz).sum(0)
    for q, (energy, mstag2) in EXACT.items():
        heisenberg = [(1.0, i, j) for i, j in xb + yb]
        H = build_hamiltonian(n, heisenberg, [(q, b) for b in q2_plaquette_pairs(L, L)])
        spec = ExactSpectrum(H, n, translations=square_translations(L, L))
        assert spec.energy_per_site(2.0) == pytest.approx(energy, abs=1e-10)
        assert spec.expect_diag(2.0, (ms / n) ** 2) == pytest.approx(mstag2, abs=1e-10)


def test_json_helpers_are_plain(tmp_path):
    config, unit = ladder_of(write_config(tmp_path, measure=200, bins=10))
    run_group(unit, tmp_path / "run", config_text=config.text)
    d = read_task(task_path(tmp_path / "run", unit[1].task_id))
    summary = exchange_summary(d.exchange)
    assert summary is not None and summary["parameter"] == "Q" and len(summary["values"]) == len(unit)
    pairs = zip(summary["accepted"], summary["attempted"], strict=True)
    assert sum(summary["attempted"]) > 0 and all(0 <= a <= n for a, n in pairs)
    finite = {k: v for k, v in summary.items() if k not in ("acceptance_up", "acceptance_down")}
    json.dumps(finite, allow_nan=False)  # plain numbers, lists and text only (NaN only at the ladder's ends)
    assert json.loads(json.dumps(summary)).keys() == summary.keys()


# ------------------------------------------------------------------------------------------- command line


def test_qmc_run_summary_and_inspect_show_the_exchange(tmp_path):
    from click.testing import CliRunner

    from qmc.cli.main import cli

    config_path = write_config(tmp_path, measure=1000, bins=10)
    config, unit = ladder_of(config_path)
    rows, _, state = reference(unit)
    run_dir = tmp_path / "run"
    result = CliRunner().invoke(cli, ["run", str(config_path), "--quiet"])
    assert result.exit_code == 0, (result.output, result.exception)
    for i, t in enumerate(unit):  # `qmc run` (serial) gives the in-memory ladder's bins
        assert np.array_equal(stored(task_path(run_dir, t.task_id))[0], rows[i])
    result = CliRunner().invoke(cli, ["summary", str(run_dir)])
    assert result.exit_code == 0, result.output
    rate = state["accepted"][0] / state["attempted"][0]
    assert f"exchange along Q: position 1 of 4, acceptance with Q = 0.75: {rate:.3f}" in result.stdout
    result = CliRunner().invoke(cli, ["summary", str(run_dir), "--json"])
    data = {d["task"]: d for d in json.loads(result.stdout)}
    for i, t in enumerate(unit):
        x = data[t.task_id]["exchange"]
        assert x["parameter"] == "Q" and x["position"] == i and x["values"] == Q_VALUES
        assert x["attempted"] == state["attempted"].tolist() and x["accepted"] == state["accepted"].tolist()
        assert x["acceptance"] == pytest.approx((state["accepted"] / state["attempted"]).tolist())
    assert data[unit[0].task_id]["exchange"]["acceptance_down"] is None  # no lower neighbour (NaN -> null)
    result = CliRunner().invoke(cli, ["inspect", str(task_path(run_dir, unit[1].task_id))])
    assert result.exit_code == 0 and "exchange along Q: position 2 of 4" in result.stdout


def test_a_zero_coupling_is_refused_by_qmc_run(tmp_path):
    from click.testing import CliRunner

    from qmc.cli.main import cli

    result = CliRunner().invoke(cli, ["run", str(write_config(tmp_path, q=[0.0, 0.5])), "--quiet"])
    assert result.exit_code == 2
    assert result.stderr.startswith("error: ") and "exchange.along" in result.stderr
    assert "zero coupling" in result.stderr and not (tmp_path / "run" / "tasks").exists()
