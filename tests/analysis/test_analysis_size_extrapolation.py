"""``qmc analyze --extrapolate``: per-point fits y(L) = c_0 + sum_k c_k L^-p_k of a run's observables.

Synthetic tasks (invented data with known limits, Gaussian noise from fixed seeds) check the grouping by the
other scan parameters, the choice of beta, --min-L, the default powers, the full-vector m_s and the files;
a tiny real run goes through the command line and is compared with published values; bad input exits 2.
"""

from __future__ import annotations

import csv
import json
import math
import shutil
import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
from helpers.cli import assert_user_error, invoke
from helpers.configs import write_config

from qmc.analysis import AnalysisError, analyze_run, format_result
from qmc.analysis.powerfit import drop_smallest_shift
from qmc.analysis.size_extrapolation import default_powers, parse_powers

SIZES = (8, 12, 16, 24, 32)
NBINS = 400


def m2_exact(g: float, L: float) -> float:
    """Invented m_stag2(L) with limit 0.03 g: spin-wave-like 1/L and 1/L^2 corrections."""
    return 0.03 * g * (1.0 + 1.6 / L + 2.0 / L**2)


def e_exact(g: float, L: float, dim: int = 2) -> float:
    """Invented energy per site with limit -0.6 - 0.1 g and an L^-3 (2D) or L^-2 (1D) correction."""
    return -0.6 - 0.1 * g + (-1.2 / L**3 if dim == 2 else -0.8 / L**2)


def task(L: int, beta: float, params: dict, seed: int, *, dim: int = 2, shift: float = 0.0,
         noise: float = 1e-3, stiffness: bool = False) -> SimpleNamespace:
    """A TaskData-like object whose uncorrelated bins have the exact means above (+ ``shift``)."""
    rng = np.random.default_rng(seed)
    g = params.get("g", 1.0)
    bins = {
        "m_stag2": m2_exact(g, L) + shift + noise * 0.1 * rng.standard_normal(NBINS),
        "energy": e_exact(g, L, dim) + shift + noise * rng.standard_normal(NBINS),
    }
    if stiffness:
        bins["stiffness"] = 0.18 + 0.1 / L + noise * rng.standard_normal(NBINS)
    return SimpleNamespace(
        task_id=f"L{L}_b{beta:g}_" + "_".join(f"{k}{v}" for k, v in params.items()),
        params={"L": L, "beta": beta, "replica": 0, "lattice": "square", "size": [L] * dim, **params},
        bins=bins, steps_per_bin=10, n_sites=L**dim, linear_size=L, beta=float(beta),
        vbs_histogram=None, vbs_hist_range=None, status="done", exchange=None)


def coupling_scan() -> list[SimpleNamespace]:
    """g = 0.5 and 1.0 at every size, beta = 2L; at L = 8 also beta = 4L (used) and beta = L with a shifted
    value (must be ignored: the largest beta of each size is the ground-state estimate)."""
    tasks = []
    for k, g in enumerate((0.5, 1.0)):
        for L in SIZES:
            tasks.append(task(L, 2 * L, {"g": g}, seed=100 * L + k))
        tasks.append(task(8, 4 * 8, {"g": g}, seed=7000 + k))
        tasks.append(task(8, 8, {"g": g}, seed=8000 + k, shift=0.05))
    return tasks


def by_observable(result: dict, name: str) -> list[dict]:
    return [r for r in result["extrapolations"] if r["observable"] == name]


def test_limits_per_coupling_with_the_largest_beta(tmp_path):
    result = analyze_run(coupling_scan(), tmp_path, extrapolate=("m_stag2", "energy"))
    assert result["coupling"] == "g"
    assert {r["observable"] for r in result["extrapolations"]} == {"m_stag2", "energy"}
    for r in by_observable(result, "m_stag2") + by_observable(result, "energy"):
        g = r["params"]["g"]
        assert set(r["params"]) == {"g"} and r["n_sizes"] == 5 and r["sizes"] == list(SIZES)
        assert r["betas"] == [32.0, 24.0, 32.0, 48.0, 64.0]  # L = 8: beta = 4L, the largest one
        exact = 0.03 * g if r["observable"] == "m_stag2" else -0.6 - 0.1 * g
        assert abs(r["limit"] - exact) < 4 * r["limit_err"]
        assert 0.0 < r["limit_err"] < (2e-4 if r["observable"] == "m_stag2" else 2e-3)
        assert r["chi2_dof"] is not None and r["chi2_dof"] < 4.0
        # the stability column is the same change of c_0 the fit module computes
        shift = drop_smallest_shift(r["sizes"], r["values"], r["errors"], r["powers"])
        assert r["drop_smallest_shift"] == pytest.approx(shift.value, rel=1e-9)
        assert r["drop_smallest_shift_err"] == pytest.approx(shift.error, rel=1e-9) and shift.error > 0
    m2 = {r["params"]["g"]: r for r in by_observable(result, "m_stag2")}
    assert m2[1.0]["powers"] == [1.0, 2.0] and "spin-wave" in m2[1.0]["powers_origin"]
    assert by_observable(result, "energy")[0]["powers"] == [3.0, 4.0]
    fv = m2[1.0]["full_vector"]  # m_s = sqrt(3 c_0) with the propagated error
    assert fv["m_s2"] == pytest.approx(3 * m2[1.0]["limit"], rel=1e-12)
    assert fv["m_s"] == pytest.approx(math.sqrt(3 * m2[1.0]["limit"]), rel=1e-12)
    assert fv["m_s_err"] == pytest.approx(3 * m2[1.0]["limit_err"] / (2 * fv["m_s"]), rel=1e-12)
    assert abs(fv["m_s"] - math.sqrt(0.09)) < 4 * fv["m_s_err"]
    assert by_observable(result, "energy")[0]["full_vector"] is None
    text = format_result(result)
    assert "m_s = sqrt(3 c_0)" in text and "m_stag2 [g=0.5]" in text


def test_files_table_and_plots(tmp_path):
    result = analyze_run(coupling_scan(), tmp_path, extrapolate=("m_stag2,energy",), plot=True)
    with open(tmp_path / "extrapolation.csv") as f:
        rows = list(csv.DictReader(f))
    assert len(rows) == 4 and {r["observable"] for r in rows} == {"m_stag2", "energy"}
    for row, rec in zip(rows, result["extrapolations"], strict=True):
        assert float(row["limit"]) == pytest.approx(rec["limit"], rel=1e-12)
        assert float(row["g"]) == rec["params"]["g"] and row["powers"] in ("1 2", "3 4")
        assert (row["m_s=sqrt(3*limit)"] != "") == (row["observable"] == "m_stag2")
        if row["observable"] == "m_stag2":
            assert float(row["m_s=sqrt(3*limit)"]) == pytest.approx(math.sqrt(3 * rec["limit"]), rel=1e-12)
    saved = json.loads((tmp_path / "analysis.json").read_text())
    assert saved["extrapolations"] == result["extrapolations"]
    for name in ("m_stag2", "energy"):
        for ext in ("png", "pdf"):
            assert (tmp_path / "plots" / f"extrapolation_{name}.{ext}").stat().st_size > 1000


def test_fixed_temperature_scan_is_extrapolated_per_beta(tmp_path):
    tasks = [task(L, b, {}, seed=10 * L + b) for L in SIZES for b in (1, 2)]
    result = analyze_run(tasks, tmp_path, extrapolate=("energy",), powers=(2.0,))
    assert sorted(r["params"]["beta"] for r in result["extrapolations"]) == [1, 2]
    for r in result["extrapolations"]:
        assert r["betas"] == [float(r["params"]["beta"])] * 5
        assert r["powers_origin"] == "given by the user" and r["powers"] == [2.0]


def test_min_L_and_a_parameter_that_follows_the_size(tmp_path):
    tasks = [task(L, 2 * L, {"g": 1.0, "Lz": 2 * L}, seed=L) for L in SIZES]
    result = analyze_run(tasks, tmp_path, extrapolate=("energy",), min_L=12)
    (r,) = result["extrapolations"]
    assert r["sizes"] == [12, 16, 24, 32] and r["n_sizes"] == 4 and r["params"] == {"g": 1.0}
    assert any("Lz follow(s) the size L" in w for w in result["warnings"])
    assert r["drop_smallest_shift"] is None  # 3 sizes left for 3 parameters: no degree of freedom


def test_default_powers_follow_the_dimension_and_the_observable(tmp_path):
    chain = [task(L, 2 * L, {}, seed=L, dim=1, stiffness=True) for L in (16, 24, 32, 48, 64)]
    result = analyze_run(chain, tmp_path, extrapolate=("energy", "stiffness"))
    energy, stiff = result["extrapolations"]
    assert energy["powers"] == [2.0] and "conformal" in energy["powers_origin"]
    assert abs(energy["limit"] - (-0.7)) < 4 * energy["limit_err"]
    assert stiff["powers"] == [1.0, 2.0] and "common practice, no source" in stiff["powers_origin"]
    assert default_powers("term_energy/nn", 2)[0] == (3.0, 4.0)
    assert default_powers("term_energy/nn", 1)[0] == (2.0,)
    assert default_powers("m_stag2", 3)[1].endswith("(common practice, no source)")


def test_two_independent_couplings_are_analysed_for_each_value_of_the_other(tmp_path):
    tasks = [task(L, 2 * L, {"g": g, "h": h}, seed=L + 10 * k) for L in SIZES
             for k, (g, h) in enumerate([(0.5, 0.1), (0.5, 0.2), (1.0, 0.1), (1.0, 0.2)])]
    result = analyze_run(tasks, tmp_path)
    assert result["coupling"] == "g" and [c["group"] for c in result["crossing_groups"]] == [{"h": 0.1},
                                                                                            {"h": 0.2}]
    assert any(w.startswith("coupling g; h also varies") for w in result["warnings"])
    result = analyze_run(tasks, tmp_path, extrapolate=("m_stag2",))
    assert sorted((r["params"]["g"], r["params"]["h"]) for r in result["extrapolations"]) == [
        (0.5, 0.1), (0.5, 0.2), (1.0, 0.1), (1.0, 0.2)]


def test_a_smallest_size_off_the_fitted_form_is_flagged(tmp_path):
    tasks = [task(L, 2 * L, {}, seed=L, shift=0.05 if L == 8 else 0.0) for L in SIZES]  # 1000 error bars
    result = analyze_run(tasks, tmp_path, extrapolate=("energy",))
    (r,) = result["extrapolations"]
    assert abs(r["drop_smallest_shift"]) > 2 * r["drop_smallest_shift_err"] > 0
    assert any("L = 8 does not follow the fitted form" in w for w in result["warnings"])
    clean = analyze_run([task(L, 2 * L, {}, seed=L) for L in SIZES], tmp_path, extrapolate=("energy",))
    assert not any("fitted form" in w for w in clean["warnings"])


@pytest.mark.parametrize("kwargs, where, fragment", [
    (dict(powers=(1.0,)), "--powers", "only used with --extrapolate"),
    (dict(min_L=8), "--min-L", "only used with --extrapolate"),
    (dict(extrapolate=("m_stag3",)), "--extrapolate", "unknown observable 'm_stag3'; available: energy"),
    (dict(extrapolate=("energy",), min_L=24), "--extrapolate",
     "energy: too few sizes: at most 2 usable size(s) of L >= 24"),
    (dict(extrapolate=("energy",), powers=(1.0, 2.0, 3.0, 4.0, 5.0)), "--extrapolate", "needs 6"),
])
def test_bad_requests(tmp_path, kwargs, where, fragment):
    with pytest.raises(AnalysisError) as info:
        analyze_run(coupling_scan(), tmp_path / "out", **kwargs)
    assert info.value.where == where and fragment in str(info.value)
    assert not (tmp_path / "out" / "analysis.json").exists()  # nothing written


def test_a_run_with_one_size_is_refused(tmp_path):
    with pytest.raises(AnalysisError, match=r"one system size \(L = 8\)"):
        analyze_run([task(8, 16, {"g": g}, seed=k) for k, g in enumerate((0.5, 1.0))], tmp_path,
                    extrapolate=("energy",))


@pytest.mark.parametrize("text, expected", [("1,2", (1.0, 2.0)), (" 3, 4.5 ", (3.0, 4.5)), (None, None)])
def test_parse_powers(text, expected):
    assert parse_powers(text) == expected


@pytest.mark.parametrize("text", ["1,x", "1,1", "0,2", "-1", ""])
def test_parse_powers_refuses(text):
    with pytest.raises(AnalysisError) as info:
        parse_powers(text)
    assert info.value.where == "--powers"


# ---------------------------------------------------------------------------------- a real run, command line
def square_heisenberg(sizes, *, output="run", seed=7, warmup_steps=300, measure_steps=3000, bins=30) -> dict:
    """Keywords of helpers.configs.write_config: the square-lattice Heisenberg model at beta = 2L."""
    return dict(seed=seed, output=output, scan={"L": sizes, "beta": "2*L"}, warmup_steps=warmup_steps,
                measure_steps=measure_steps, bins=bins)





@pytest.fixture(scope="module")
def heisenberg_run(tmp_path_factory) -> Path:
    tmp = tmp_path_factory.mktemp("square")
    write_config(tmp, "c.toml", **square_heisenberg([4, 6, 8, 10, 12]))
    result = invoke("run", tmp / "c.toml", "--quiet")
    assert result.exit_code == 0, result.output
    return tmp / "run"


def test_cli_extrapolation_of_a_real_run(heisenberg_run, tmp_path):
    """Square-lattice Heisenberg model, L = 4..12 at beta = 2L, 3000 steps per size (seconds).  The limits
    must agree with the published e_0 = -0.669437(5) (Sandvik, Phys. Rev. B 56, 11678 (1997)) and
    m_s = 0.30743(1) (Sandvik and Evertz, Phys. Rev. B 82, 024407 (2010)) (values from memory) within four
    error bars plus the drop-smallest shift (these small sizes are not yet asymptotic)."""
    out = tmp_path / "an"
    result = invoke("analyze", heisenberg_run, "--extrapolate", "energy", "--extrapolate", "m_stag2",
                    "--json", "--plot", "--out", out)
    assert result.exit_code == 0, result.output
    data = json.loads(result.stdout)
    fields = {"observable", "params", "limit", "limit_err", "powers", "chi2_dof", "n_sizes",
              "drop_smallest_shift"}
    energy, m2 = data["extrapolations"]
    for r in (energy, m2):
        assert fields <= set(r) and r["params"] == {} and r["sizes"] == [4, 6, 8, 10, 12]
        assert r["n_sizes"] == 5
        assert r["betas"] == [8.0, 12.0, 16.0, 20.0, 24.0]
        assert r["limit_err"] > 0 and 0 <= r["chi2_dof"] < 5 and r["drop_smallest_shift"] is not None
    assert abs(energy["limit"] + 0.669437) < 4 * energy["limit_err"] + abs(energy["drop_smallest_shift"])
    fv = m2["full_vector"]
    assert abs(fv["m_s"] - 0.30743) < 4 * fv["m_s_err"] + abs(fv["m_s_drop_smallest_shift"])
    # the fit inputs are the per-size means of `qmc summary`, and the limit is numpy's weighted polyfit
    summary = json.loads(invoke("summary", heisenberg_run, "--json").stdout)
    means = {s["params"]["L"]: s["observables"]["energy"] for s in summary}
    assert energy["values"] == [means[L]["mean"] for L in energy["sizes"]]
    assert energy["errors"] == [means[L]["error"] for L in energy["sizes"]]
    x = 1.0 / np.array(m2["sizes"], dtype=float)
    assert m2["limit"] == pytest.approx(np.polyfit(x, m2["values"], 2, w=1 / np.array(m2["errors"]))[-1],
                                        rel=1e-9)
    assert (out / "extrapolation.csv").exists() and (out / "plots" / "extrapolation_m_stag2.png").exists()
    text = invoke("analyze", heisenberg_run, "--extrapolate", "m_stag2", "--out", tmp_path / "t").stdout
    assert "m_s = sqrt(3 c_0)" in text and "powers = 1,2" in text


def test_cli_bad_input_exits_2(heisenberg_run, tmp_path):
    out = ("--out", tmp_path / "x")
    assert_user_error(invoke("analyze", heisenberg_run, "--extrapolate", "m_stagg2", *out),
                      "--extrapolate", "unknown observable 'm_stagg2'")
    assert_user_error(invoke("analyze", heisenberg_run, "--extrapolate", "energy", "--min-L", 9, *out),
                      "--extrapolate", "too few sizes", "L >= 9", "needs 3")
    assert_user_error(invoke("analyze", heisenberg_run, "--extrapolate", "energy", "--powers", "1,a", *out),
                      "--powers", "'1,a'")
    assert_user_error(invoke("analyze", heisenberg_run, "--extrapolate", "energy", "--min-L", 0, *out),
                      "--min-L")
    write_config(tmp_path, "one.toml", **square_heisenberg([4], output="one"))
    assert invoke("run", tmp_path / "one.toml", "--quiet").exit_code == 0
    assert_user_error(invoke("analyze", tmp_path / "one", "--extrapolate", "energy"),
                      "--extrapolate", "one system size (L = 4)", "scan L over several sizes")


# ---------------------------------------------------------------------------------- published values (slow)
SQUARE_E0 = -0.669437  # Sandvik, Phys. Rev. B 56, 11678 (1997): -0.669437(5) J per site (from memory)
SQUARE_MS = 0.30743  # Sandvik and Evertz, Phys. Rev. B 82, 024407 (2010): 0.30743(1) (from memory)


@pytest.mark.slow
def test_square_lattice_thermodynamic_limit_matches_published_values(tmp_path):
    """Square-lattice Heisenberg model, L = 8..32 at beta = 2L, through `qmc run` and `qmc analyze
    --extrapolate m_stag2 --extrapolate energy` with the default powers (1/L, 1/L^2 and 1/L^3, 1/L^4):
    m_s within 1 % of 0.30743 and e_0 within 2e-4 of -0.669437 (the bars of the issue).

    beta = 2L keeps the spin waves (gap ~ 2 pi c / L, c ~ 1.66 J) frozen out (beta * gap ~ 21); the
    rotor ('tower of states') levels are partly populated, but their energy per site is a function of 1/L
    that the 1/L^3 + 1/L^4 fit absorbs: for a rotor with chi_perp = 0.0669 (from memory) the bias of e_0
    is below 1e-7.  The small sizes are cheap and weigh as much in c_0 as the large ones, so they run
    longer: two runs (L <= 16: 400 000 steps, L >= 20: 150 000 steps; about 14 CPU minutes in all, 20 minutes
    of wall time on a shared 2-core machine) side by side, their task files gathered in one folder for
    `qmc analyze`.  Measured (seed as below): m_s = 0.30701(99), e_0 = -0.669458(20).  The test asks the
    error bars to be small enough that the bars mean something (m_s: 1 % >= 3 sigma; e_0: 2e-4 >= 4 sigma)."""
    runs = []
    plan = (("small", [8, 12, 16], 400_000, 21), ("large", [20, 24, 32], 150_000, 22))
    for name, sizes, measure, seed in plan:
        keywords = square_heisenberg(sizes, output=name, seed=seed, warmup_steps=5000, measure_steps=measure,
                                     bins=200)
        write_config(tmp_path, f"{name}.toml", **keywords)
        runs.append(subprocess.Popen([sys.executable, "-m", "qmc", "run", str(tmp_path / f"{name}.toml"),
                                      "--quiet"], cwd=tmp_path))
    assert [p.wait() for p in runs] == [0, 0]
    (tmp_path / "all" / "tasks").mkdir(parents=True)
    for name in ("small", "large"):
        for f in (tmp_path / name / "tasks").glob("*.h5"):
            shutil.copy(f, tmp_path / "all" / "tasks" / f.name)
    result = invoke("analyze", tmp_path / "all", "--extrapolate", "m_stag2", "--extrapolate", "energy",
                    "--json", "--plot")
    assert result.exit_code == 0, result.output
    m2, energy = json.loads(result.stdout)["extrapolations"]
    assert m2["sizes"] == [8, 12, 16, 20, 24, 32] and m2["betas"] == [16.0, 24.0, 32.0, 40.0, 48.0, 64.0]
    fv = m2["full_vector"]
    print(f"m_s = {fv['m_s']:.5f} +- {fv['m_s_err']:.5f} (shift {fv['m_s_drop_smallest_shift']:+.5f}, "
          f"chi2/dof {m2['chi2_dof']:.2f}); e_0 = {energy['limit']:.6f} +- {energy['limit_err']:.6f} "
          f"(shift {energy['drop_smallest_shift']:+.6f}, chi2/dof {energy['chi2_dof']:.2f})")
    assert fv["m_s_err"] < 0.01 * SQUARE_MS / 3 and energy["limit_err"] < 2e-4 / 4
    assert abs(fv["m_s"] - SQUARE_MS) < 0.01 * SQUARE_MS
    assert abs(energy["limit"] - SQUARE_E0) < 2e-4
