"""Task summaries, merging of copies, coupling detection, ground-state check and analyze_run end to end.

The tasks are synthetic TaskData-like objects (invented data for the test): a Binder ratio
R_L(g) = 1.5 - 0.4 tanh(0.4 (g - 1) L) (g_c = 1, nu = 1) built from per-bin m_stag2, m_stag4 series.
"""

import csv
import json

import numpy as np
import pytest
from helpers.synthetic_tasks import GS, make_task

from qmc.analysis import AnalysisError, analyze_run, format_result, group_copies, summarize_task
from qmc.analysis.groundstate import beta_doubling_check
from qmc.analysis.scan import detect_coupling, scan_points
from qmc.errors import UserError


def run_tasks(full=True):
    tasks = []
    for L in (8, 16, 32):
        for k, g in enumerate(GS):
            seed = 1000 * L + k
            tasks.append(make_task(L, g, L, seed=seed, full=full))
            if L == 16:  # second copy
                tasks.append(make_task(L, g, L, copy=1, seed=seed + 500, full=full))
            if L == 8:  # beta doubling with identical data, except an energy shift at one point
                tasks.append(
                    make_task(L, g, 2 * L, seed=seed, full=full, energy_shift=0.05 if k == 4 else 0.0)
                )
    return tasks


def test_summary_structure():
    s = summarize_task(make_task(8, 1.0, 8, seed=1))
    assert s["task"] == "L8_g1.0000_b8_c0"
    assert s["params"]["size"] == (8, 8) and s["params"]["L"] == 8
    for name in (
        "energy",
        "m_stag2",
        "stiffness/x",
        "binder_stag",
        "specific_heat",
        "corr_length",
        "xi_over_L",
        "binder_vbs",
        "stiffness_L",
    ):
        o = s["observables"][name]
        assert set(o) >= {"mean", "error", "tau_int"} and o["error"] > 0
    assert s["observables"]["binder_stag"]["mean"] == pytest.approx(1.5, abs=0.02)
    assert s["observables"]["xi_over_L"]["mean"] == pytest.approx(1 / np.pi, rel=0.01)  # sqrt(5 - 1) / 2 pi
    assert s["vbs"]["cos4_hist"] > 0.5
    assert isinstance(s["warnings"], list)


def test_group_copies_concatenates():
    a, b = make_task(16, 1.0, 16, 0, seed=1), make_task(16, 1.0, 16, 1, seed=2)
    c = make_task(16, 1.05, 16, 0, seed=3)
    merged = group_copies([a, b, c])
    assert len(merged) == 2
    m = merged[0]
    assert m.copies == (a.task_id, b.task_id) and "copy" not in m.params
    np.testing.assert_array_equal(m.bins["energy"], np.r_[a.bins["energy"], b.bins["energy"]])
    assert m.vbs_histogram.sum() == a.vbs_histogram.sum() + b.vbs_histogram.sum()
    s = summarize_task(m)
    assert s["info"]["n_bins"] == 400 and s["info"]["copies"] == [a.task_id, b.task_id]


def test_copies_of_files_from_earlier_releases_merge_too():
    # task files of earlier releases number their copies by "replica"
    a, b = make_task(8, 1.0, 8, 0, seed=1), make_task(8, 1.0, 8, 1, seed=2)
    for t in (a, b):
        t.params["replica"] = t.params.pop("copy")
    (m,) = group_copies([a, b])
    assert m.copies == (a.task_id, b.task_id) and "replica" not in m.params


def test_group_copies_incompatible_bins_weighted():
    a, b = make_task(8, 1.0, 8, 0, seed=1), make_task(8, 1.0, 8, 1, seed=2)
    b.steps_per_bin = 150
    (m,) = group_copies([a, b])
    assert len(m.parts) == 2
    s = summarize_task(m)
    e1 = summarize_task(a)["observables"]["energy"]
    e2 = summarize_task(b)["observables"]["energy"]
    w1, w2 = e1["error"] ** -2, e2["error"] ** -2
    assert s["observables"]["energy"]["mean"] == pytest.approx(
        (w1 * e1["mean"] + w2 * e2["mean"]) / (w1 + w2)
    )


def test_detect_coupling():
    tasks = [make_task(L, g, L, full=False) for L in (8, 16) for g in (0.9, 1.0) for _ in range(2)]
    sums = [summarize_task(t) for t in tasks]
    assert detect_coupling(sums) == "g"  # L, beta (= L), copy, size, lattice are never the coupling
    for s in sums:  # a second parameter that is a one-to-one function of g is fine
        s["params"]["J"] = 1.0 - s["params"]["g"]
    assert detect_coupling(sums) == "J"
    for s in sums:  # a parameter that only follows L is not a coupling
        s["params"]["N"] = s["params"]["L"] ** 2
    assert detect_coupling(sums) == "J"
    for i, s in enumerate(sums):  # independent parameters: the one with most values, then the first name
        s["params"]["h"] = float(i % 2)
    assert detect_coupling(sums) == "J"
    for i, s in enumerate(sums):
        s["params"]["h"] = float(i % 3)
    assert detect_coupling(sums) == "h"
    assert detect_coupling(sums, "g") == "g"
    with pytest.raises(AnalysisError, match="not set in every task"):
        detect_coupling(sums, "Q")


def test_beta_doubling_flags_the_shifted_point():
    tasks = [make_task(8, g, 8, seed=k) for k, g in enumerate(GS[:3])]
    tasks += [make_task(8, g, 16, seed=k, energy_shift=0.05 if k == 1 else 0.0) for k, g in enumerate(GS[:3])]
    pts = scan_points([summarize_task(t) for t in tasks], "g")
    out = beta_doubling_check(pts)
    assert out["pairs_checked"] == 3
    assert [(f["g"], f["observable"]) for f in out["flags"]] == [(GS[1], "energy")]
    assert out["flags"][0]["beta"] == 8 and out["flags"][0]["beta2"] == 16


def test_analyze_run_results(tmp_path):
    res = analyze_run(run_tasks(full=True), tmp_path / "out")
    assert res["coupling"] == "g" and res["sizes"] == [8, 16, 32] and res["n_points"] == 36
    assert res["n_tasks"] == 45
    cr = res["crossings"]
    assert [(p["L1"], p["L2"]) for p in cr["pairs"]] == [(8, 16), (16, 32)]
    for p in cr["pairs"]:
        assert abs(p["g"] - 1.0) < 3 * p["g_err"]
        assert abs(p["inv_nu"] - 1.0) < 3 * p["inv_nu_err"]
    assert abs(cr["collapse"]["g_c"] - 1.0) < 3 * cr["collapse"]["g_c_err"]
    assert abs(cr["collapse"]["nu"] - 1.0) < 3 * cr["collapse"]["nu_err"]
    flags = res["ground_state"]["flags"]
    assert res["ground_state"]["pairs_checked"] == 9
    assert [(f["L"], f["g"], f["observable"]) for f in flags] == [(8, GS[4], "energy")]
    with open(tmp_path / "out" / "observables.csv") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 36
    for col in (
        "L",
        "beta",
        "g",
        "binder_stag",
        "binder_stag_err",
        "binder_stag_tau_int[bins]",
        "xi_over_L",
        "stiffness_L",
        "specific_heat",
        "binder_vbs",
        "stiffness/x",
        "cos4_hist",
    ):
        assert col in rows[0]
    assert {r["copies"] for r in rows if r["L"] == "16"} == {"2"}
    saved = json.loads((tmp_path / "out" / "analysis.json").read_text())
    assert saved == res
    table = json.loads((tmp_path / "out" / "observables.json").read_text())
    assert table["coupling"] == "g" and len(table["points"]) == 36
    assert "g_c" in format_result(res)


def test_analyze_run_plots(tmp_path):
    tasks = [
        make_task(L, g, L, seed=k, full=False, vbs=(k % 4 == 0)) for L in (8, 16) for k, g in enumerate(GS)
    ]
    res = analyze_run(tasks, tmp_path, plot=True, n_boot=50)
    names = {p.split("/")[-1] for p in res["files"]}
    for base in (
        "obs_binder_stag",
        "obs_energy",
        "crossings_binder_stag",
        "collapse_binder_stag",
        "vbs_L8",
        "vbs_L16",
    ):
        assert f"{base}.png" in names and f"{base}.pdf" in names
        assert (tmp_path / "plots" / f"{base}.png").stat().st_size > 1000
    for f in ("observables.csv", "observables.json", "analysis.json"):
        assert (tmp_path / f).is_file()


def test_analyze_run_bad_input(tmp_path):
    with pytest.raises(AnalysisError, match="no tasks"):
        analyze_run([], tmp_path)
    with pytest.raises(UserError, match="unknown quantity"):
        analyze_run([make_task(8, 1.0, 8, full=False)], tmp_path, quantity="nonsense")
    res = analyze_run([make_task(8, 1.0, 8, full=False)], tmp_path)
    assert res["coupling"] is None and res["crossings"] is None and res["warnings"]


def test_other_varying_parameters_split_the_crossing_analysis(tmp_path):
    """Two values of a second parameter J at every (L, g, beta): one crossing analysis per J, each finding
    the g_c = 1 of the synthetic Binder ratio; plots per J; beta-doubling pairs only within one J."""
    tasks = []
    for J in (0.5, 1.0):
        for L in (8, 16):
            for k, g in enumerate(GS):
                for beta in (L, 2 * L):
                    seed = int(1000 * L + 10 * k + 2 * J + beta)
                    t = make_task(L, g, beta, seed=seed, full=False, vbs=False)
                    t.params["J"] = J
                    t.task_id += f"_J{J}"
                    tasks.append(t)
    res = analyze_run(tasks, tmp_path, plot=True, n_boot=50)
    assert res["coupling"] == "g" and res["crossings"] is None
    groups = res["crossing_groups"]
    assert [c["group"] for c in groups] == [{"J": 0.5}, {"J": 1.0}]
    for c in groups:
        (pair,) = c["crossings"]["pairs"]
        assert abs(pair["g"] - 1.0) < 4 * pair["g_err"]
    assert res["ground_state"]["pairs_checked"] == 2 * 2 * len(GS)
    names = {p.split("/")[-1] for p in res["files"]}
    assert {"obs_binder_stag_J_0.5.png", "obs_binder_stag_J_1.0.png", "crossings_binder_stag_J_1.0.png"} \
        <= names
    text = format_result(res)
    assert "crossings of binder_stag at J=0.5:" in text and "crossings of binder_stag at J=1.0:" in text
    assert any(w.startswith("coupling g; J also varies") for w in res["warnings"])


def test_fewer_than_64_bins_give_one_warning_line(tmp_path):
    tasks = [make_task(L, g, L, seed=k, nbins=40) for L in (8, 16) for k, g in enumerate(GS[:4])]
    s = summarize_task(tasks[0])
    assert s["info"]["few_bins"] and not any("not converged" in w for w in s["warnings"])
    res = analyze_run(tasks, tmp_path, n_boot=20)
    few = [w for w in res["warnings"] if "fewer than 64 bins" in w]
    assert few == ["8 of 8 task(s) have fewer than 64 bins (the fewest: 40): their error bars are naive "
                   "lower bounds, as the binning analysis needs at least 64 bins; ask for more (bins = 64 "
                   "with measure_steps = 6400 keeps the bin length of 100 steps, and qmc run continues the "
                   "finished tasks)"]
    assert not any("not converged" in w for w in res["warnings"])
    # with 64 bins and more the per-task warnings are as before: none for these uncorrelated bins
    enough = [make_task(8, g, 8, seed=k, nbins=64) for k, g in enumerate(GS[:4])]
    res = analyze_run(enough, tmp_path, n_boot=20)
    assert not any("64 bins" in w for w in res["warnings"])
