"""The loop (improved) estimators (qmc/engine/loop_estimators.py) against exact diagonalization, against the
plain estimators of the same chain, and their selection in the configuration.

Exact side: qmc/validation/exact/ (independent of the engine), through the cluster tables of
tests/test_engine_vs_exact.py (S = 1/2) and tests/test_colour_vs_exact.py (SU(N)); m_stag4 = <(M_s/N)^4>
and s_q = N m_stag2 are added here from the same spectra.  Criterion: |QMC - exact| < 4 error bars (fixed
seeds), with a relative error bar on m_stag2 small enough (< 1%) for the comparison to have power.
"""

from __future__ import annotations

import importlib.util
import itertools
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from helpers.chains import SIGMAS, off_by_more_than_sigmas, run_qmc
from helpers.chains import mean_err as _mean_err
from helpers.colour_clusters import CASES as COLOUR_CASES
from helpers.colour_clusters import exact_colour_case as colour_exact
from helpers.exact_clusters import CASES
from helpers.exact_clusters import exact_case as _exact
from qmc.models import HeisenbergTerm, build_lattice, compile_model

from qmc.chain.simulation import Simulation, uses_loop_estimators
from qmc.cli.main import cli
from qmc.config.parser import build_model, load_config, measures_with_loops
from qmc.engine.colour import colour_moments
from qmc.engine.kinds import kind_record
from qmc.engine.rng import stream_seed
from qmc.errors import UserError
from qmc.run.task_identity import task_fingerprint

LOOP_OBSERVABLES = ("chi_uniform", "m_stag2", "m_stag4", "chi_stag", "s_q", "s_q_shifted")


def _exact_values(name: str, beta: float) -> tuple[object, dict[str, float]]:
    """(model, exact values of the six loop-estimated observables) of a cluster of either table."""
    if name in CASES:
        ex = _exact(name)
        out = dict(ex.values(beta))
        out["m_stag4"] = ex.spec.expect_diag(beta, (ex.ms / ex.n) ** 4)
        n = ex.n
        model = CASES[name][0]()
    else:
        ex = colour_exact(name)
        out = dict(ex.values(beta))
        out["m_stag4"] = ex.spec.diagonal(beta, (ex.ms_total / ex.n) ** 4)
        n = ex.n
        model = COLOUR_CASES[name][0]()
    out["s_q"] = n * out["m_stag2"]
    return model, {k: out[k] for k in LOOP_OBSERVABLES if k in out}


EXACT_POINTS = [("chain12", 2.0, 40_000), ("chain12", 8.0, 40_000), ("square4", 4.0, 40_000),
                ("jq2_4", 1.0, 40_000), ("jq3_4", 2.0, 40_000),
                ("su3_chain6", 2.0, 60_000), ("su4_chain6", 4.0, 60_000), ("su3_jq_chain8", 2.0, 60_000),
                ("su3_jq2_open3", 1.5, 60_000)]


@pytest.mark.parametrize(("name", "beta", "steps"), [pytest.param(*p, id=f"{p[0]}-beta{p[1]}")
                                                     for p in EXACT_POINTS])
def test_loop_estimators_match_exact(name: str, beta: float, steps: int) -> None:
    model, exact = _exact_values(name, beta)
    bins = run_qmc(model, beta, steps=steps, seed_key=f"loop-{name}-{beta}", estimators="improved")
    results = {k: _mean_err(bins[k]) for k in exact}
    m, dm = results["m_stag2"]
    assert dm / m < 1e-2, f"m_stag2 error bar too large to be a test: {dm / m:.2%}"
    # 1e-7 absolute floor: chi_uniform of a gapped cluster at low T can be ~0 with no fluctuation at all
    bad = off_by_more_than_sigmas(results, exact, 1e-7)
    assert not bad, f"{name} beta={beta}: (QMC mean, error) vs exact: {bad}"


@pytest.mark.parametrize(("name", "beta"), [("chain12", 2.0), ("jq2_4", 1.0), ("su3_chain6", 2.0)])
def test_plain_and_loop_estimators_agree_and_loops_are_sharper(name: str, beta: float) -> None:
    """The same chain (same seed) measured both ways: every other column bit-identical, the six agree within
    4 combined error bars, and the loop estimator's error bar is the smaller one."""
    model = (CASES if name in CASES else COLOUR_CASES)[name][0]()
    plain = run_qmc(model, beta, steps=40_000, seed_key=f"pair-{name}", estimators="plain")
    loop = run_qmc(model, beta, steps=40_000, seed_key=f"pair-{name}", estimators="improved")
    for key in plain:
        if key not in LOOP_OBSERVABLES:
            np.testing.assert_array_equal(plain[key], loop[key], err_msg=key)
    for key in LOOP_OBSERVABLES:
        (a, da), (b, db) = _mean_err(plain[key]), _mean_err(loop[key])
        assert abs(a - b) < SIGMAS * np.hypot(da, db), f"{key}: plain {a} +- {da}, loop {b} +- {db}"
        assert db < 0.8 * da, f"{key}: loop error bar {db} not below plain {da}"


def test_colour_moments_by_enumeration() -> None:
    """E[x^2], E[x^4] of x = delta(c, 0) - 1/N, and E[M^4] = 3 mu2^2 (sum n^2)^2 + (mu4 - 3 mu2^2) sum n^4
    for M = sum_l n_l x_l, against the average over every colouring of a few loops (exact enumeration)."""
    for n_col in range(2, 7):
        x = np.array([(c == 0) - 1.0 / n_col for c in range(n_col)])
        mu2, mu4 = colour_moments(n_col)
        assert mu2 == pytest.approx(np.mean(x**2), rel=1e-14)
        assert mu4 == pytest.approx(np.mean(x**4), rel=1e-14)
        sizes = np.array([3, 1, 4, 2])
        m = np.array([sizes @ x[list(c)] for c in itertools.product(range(n_col), repeat=len(sizes))])
        q2, q4 = np.sum(sizes**2), np.sum(sizes**4)
        assert np.mean(m**2) == pytest.approx(mu2 * q2, rel=1e-12)
        assert np.mean(m**4) == pytest.approx(3 * mu2**2 * q2**2 + (mu4 - 3 * mu2**2) * q4, rel=1e-12)
    assert colour_moments(2) == (0.25, 0.0625)  # S^z = +-1/2


def test_free_sites_and_empty_string() -> None:
    """Beta so small that most configurations have no operator or a few, and most sites none: the loop
    estimators' n = 0 branch and their loops of one free site agree with the exact values."""
    model = compile_model(build_lattice("chain", (12,)), [HeisenbergTerm("nn", 1.0)])
    beta = 0.05
    ex = CASES["chain12"][1]()  # a fresh copy of the exact cluster (the shared one is prepared for others)
    want = {"chi_uniform": ex.spec.chi_uniform(beta), "chi_stag": ex.spec.kubo_diag(beta, ex.ms),
            "m_stag2": ex.spec.expect_diag(beta, (ex.ms / 12) ** 2),
            "m_stag4": ex.spec.expect_diag(beta, (ex.ms / 12) ** 4)}
    bins = run_qmc(model, beta, steps=20_000, seed_key="loop-free", estimators="improved")
    for key, value in want.items():
        mean, err = _mean_err(bins[key])
        assert abs(mean - value) < SIGMAS * err + 1e-9, (key, mean, err, value)


def _config(tmp_path: Path, extra: str = "", terms: str = 'type = "heisenberg"\nbonds = "nn"\ncoupling = 1.0',
            model: str = "") -> Path:
    path = tmp_path / "c.toml"
    path.write_text(f"""
[run]
seed = 5
output = "out"
{model}
[lattice]
kind = "chain"
size = [8]
[[terms]]
{terms}
[scan]
beta = [1.0]
[sampling]
warmup_steps = 100
measure_steps = 200
bins = 4
{extra}
""")
    return path


def test_estimators_key(tmp_path: Path) -> None:
    assert load_config(_config(tmp_path)).sampling.estimators == "improved"
    assert load_config(_config(tmp_path, 'estimators = "plain"')).sampling.estimators == "plain"
    with pytest.raises(UserError) as err:
        load_config(_config(tmp_path, 'estimators = "loops"'))
    assert "sampling.estimators" in str(err.value) and "improved" in str(err.value)
    with pytest.raises(ValueError, match="estimators"):
        Simulation(build_model(load_config(_config(tmp_path)).tasks()[0]), 1.0, warmup_steps=1,
                   measure_steps=2, bins=2, seed_words=stream_seed(1, "x"), estimators="loops")


@pytest.mark.parametrize(("terms", "model", "loops"), [
    ('type = "heisenberg"\nbonds = "nn"\ncoupling = 1.0', "", True),
    ('type = "projector"\nbonds = "nn"\ncoupling = 1.0', "[model]\ncolors = 3", True),
    ('type = "xxz"\nbonds = "nn"\ncoupling = 1.0\ndelta = 0.5', "", False),
])
def test_which_tasks_measure_with_loops(tmp_path: Path, terms: str, model: str, loops: bool) -> None:
    """The task-level rule (fingerprints) and the chain-level rule (compiled model) agree; the fingerprint of
    a task changes with the choice exactly when its bins do, and plain tasks keep their old fingerprints."""
    task = load_config(_config(tmp_path, terms=terms, model=model)).tasks()[0]
    plain = load_config(_config(tmp_path, 'estimators = "plain"', terms=terms, model=model)).tasks()[0]
    assert measures_with_loops(task) == loops
    assert uses_loop_estimators("improved", kind_record(build_model(task))) == loops
    assert not measures_with_loops(plain)
    assert (task_fingerprint(task) != task_fingerprint(plain)) == loops


def test_switching_estimators_on_a_run_is_refused(tmp_path: Path) -> None:
    """Bins of one kind of estimators are never continued with the other (UserError, exit code 2)."""
    path = _config(tmp_path, 'estimators = "plain"')
    result = CliRunner().invoke(cli, ["run", str(path), "--quiet"])
    assert result.exit_code == 0, result.output
    more = path.read_text().replace("measure_steps = 200", "measure_steps = 400")
    more = more.replace("bins = 4", "bins = 8")
    path.write_text(more.replace('estimators = "plain"', 'estimators = "improved"'))
    result = CliRunner().invoke(cli, ["run", str(path), "--quiet"])
    assert result.exit_code == 2, result.output
    assert "estimators" in result.output and "plain" in result.output
    path.write_text(more)  # back to plain: the same run grows
    result = CliRunner().invoke(cli, ["run", str(path), "--quiet"])
    assert result.exit_code == 0, result.output


def _chain_benchmark():
    """benchmarks/chain_susceptibility.py (the bar's run and its two reference values)."""
    path = Path(__file__).resolve().parents[1] / "benchmarks" / "chain_susceptibility.py"
    spec = importlib.util.spec_from_file_location("chain_susceptibility", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.mark.slow
def test_chain_susceptibility_bar() -> None:
    """The bar of the loop estimators: chi_uniform of the 128-site Heisenberg chain at T = 0.6408 after 1e5
    steps with a relative error below 0.25%, within 4 error bars of the infinite chain's Bethe-ansatz value
    (Johnston et al., PRB 61, 9558 (2000), from memory) and of a plain-estimator run of 1e8 steps."""
    bench = _chain_benchmark()
    out = bench.run("improved", 100_000)
    assert out["plateau"]
    assert out["relative_error"] < 2.5e-3, out
    assert abs(out["sigmas_from_literature"]) < SIGMAS, out
    ref, ref_err = bench.CHI_LONG_PLAIN
    assert np.isfinite(ref) and ref_err < 0.5 * out["error"], "the long plain run is no sharper reference"
    assert abs(out["sigmas_from_long_plain"]) < SIGMAS, out
