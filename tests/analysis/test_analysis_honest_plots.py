"""Plots and fits that say what they show: labels with symbol, definition and the limits of the ratios
(checked by sampling the distributions they name), titles with model, lattice and beta rule, the coupling's
own name, no extrapolation from one pair of sizes, chi^2/dof with p-values (handbook chi-square table)."""

from __future__ import annotations

import numpy as np
import pytest
from helpers.configs import config_text, heisenberg_nn, plaquette_pairs
from helpers.paths import REPO
from helpers.synthetic_tasks import GS, make_task

import qmc.analysis.plots as plots
from qmc.analysis import analyze_run, extrapolate, format_result
from qmc.analysis.fit_quality import crossing_caveats, fit_quality
from qmc.analysis.labels import axis_label, coupling_label, describe, observable_note
from qmc.analysis.run_text import run_text

CONFIG = config_text(run_name="synthetic", output=None, terms=[heisenberg_nn("g"), plaquette_pairs(1.0)],
                     scan={"L": [8, 16], "g": {"start": 0.9, "stop": 1.1, "num": 9}, "beta": "L"},
                     warmup_steps=10, measure_steps=100, bins=10)
"""The configuration text the synthetic tasks carry: the titles and labels are read from it."""


def test_the_stated_limits_of_the_ratios_follow_from_their_distributions():
    """Binder ratios as stated in the labels: 9/5 (ordered O(3) vector, z component) and 3 (Gaussian);
    1 (fixed |D|) and 2 (two-dimensional Gaussian).  Sampled, fixed seed, 1% tolerance (statistical error
    of 10^6 samples about 0.3%)."""
    rng = np.random.default_rng(7)
    v = rng.standard_normal((1_000_000, 3))
    z = v[:, 2] / np.linalg.norm(v, axis=1)  # z component of a random unit vector
    assert np.mean(z**4) / np.mean(z**2) ** 2 == pytest.approx(9 / 5, rel=0.01)
    assert np.mean(v[:, 2] ** 4) / np.mean(v[:, 2] ** 2) ** 2 == pytest.approx(3, rel=0.01)
    r2 = np.sum(v[:, :2] ** 2, axis=1)
    assert np.mean(r2**2) / np.mean(r2) ** 2 == pytest.approx(2, rel=0.01)
    assert "9/5 with Neel order, 3 without order" in observable_note("binder_stag")
    assert "1 with valence-bond order, 2 without order" in observable_note("binder_vbs")


def test_labels_give_symbol_definition_and_units():
    assert axis_label("binder_stag") == "R_m = <m_z^4>/<m_z^2>^2  [dimensionless]"
    assert axis_label("stiffness_L").startswith("rho_s L = L <w_a^2>/(beta N)")
    assert axis_label("stiffness/x").startswith("rho_x = <w_x^2>/(beta N)")
    assert axis_label("term_energy/q2") == "E_q2/N = <H_q2>/N  [units of the couplings]"
    assert axis_label("made_up") == "made_up" and observable_note("made_up") == ""
    assert all(describe(n).units for n in ("energy", "chi_uniform", "corr_length", "vbs_cos4"))
    assert coupling_label("J", "Heisenberg coupling on nn bonds") == "J  (Heisenberg coupling on nn bonds)"


def test_run_text_of_a_demo_config():

    text = run_text((REPO / "configs" / "jq2-sweep.toml").read_text())
    assert text.hamiltonian == "H = J sum_nn S_i.S_j - 1 sum_plaquette-pair PP"
    assert text.lattice == "square lattice of L x L unit cells, periodic boundaries"
    assert text.beta_rule == "beta = L" and text.couplings == {"J": "Heisenberg coupling on the nn bonds"}
    # hand-written on purpose: text that is not TOML at all, which the builder cannot produce
    assert run_text("not [ toml").description.startswith("the configuration text could not be read")


def test_fit_quality_uses_the_chi_square_distribution():
    # handbook chi-square table: P(chi^2_1 >= 3.841) = 0.05, P(chi^2_10 >= 23.209) = 0.01
    assert fit_quality(3.841, 1)["p_value"] == pytest.approx(0.05, abs=2e-4)
    assert fit_quality(23.209, 10)["p_value"] == pytest.approx(0.01, abs=1e-4)
    assert fit_quality(20.0, 10)["reliable"] is True
    bad = fit_quality(30.0, 10)
    assert bad["reliable"] is False and "unreliable" in bad["text"] and bad["chi2_dof"] == 3.0
    assert fit_quality(0.0, 0)["reliable"] is None and "cannot be tested" in fit_quality(0.0, 0)["text"]


def test_one_point_is_not_extrapolated():
    ex = extrapolate([8.0], [1.02], [0.01])
    assert np.isnan(ex.limit) and ex.n_points == 1
    one = crossing_caveats([(8, 16)], False, 1.0)
    three = crossing_caveats([(4, 8), (8, 16), (16, 32)], False, 1.0)
    assert "no extrapolation" in one[0] and "statistical" in one[1]
    assert "omega is fixed to 1 (assumed" in three[0]
    assert len(crossing_caveats([(4, 8)] * 4, True, 1.3)) == 1  # omega fitted: only the 1/nu caveat


@pytest.fixture
def figures(monkeypatch):
    """Every figure the analysis saves, by file name, instead of writing it."""
    saved = {}

    def keep(fig, base):
        saved[str(base).rsplit("/", 1)[-1]] = fig
        return []

    monkeypatch.setattr(plots, "save_figure", keep)
    return saved


def synthetic_run(sizes):
    tasks = [make_task(L, g, L, seed=k) for L in sizes for k, g in enumerate(GS)]
    for t in tasks:
        t.config_text = CONFIG
    return tasks


def texts(fig):
    return [t.get_text() for t in fig.texts]


def test_one_pair_of_sizes_gives_no_limit_and_says_so(tmp_path, figures):
    res = analyze_run(synthetic_run((8, 16)), tmp_path, plot=True, n_boot=50)
    cr = res["crossings"]
    assert len(cr["pairs"]) == 1 and cr["g_c"]["limit"] is None and cr["inv_nu"]["limit"] is None
    assert "no extrapolation" in cr["caveats"][0]
    assert "caveat: one pair of sizes (L = 8, 16)" in format_result(res)
    fig = figures["crossings_binder_stag"]
    left = fig.axes[0]
    assert left.lines and all(np.min(line.get_xdata()) > 0.1 for line in left.lines)  # only 1/L = 1/8
    assert any("one pair of sizes: no extrapolation" in t.get_text() for t in left.texts)
    assert "Caveats: one pair of sizes" in " ".join(texts(fig))
    assert "crossing g* of R_m (binder_stag)" in left.get_ylabel().replace("\n", " ")


def test_titles_labels_and_the_coupling_name(tmp_path, figures):
    res = analyze_run(synthetic_run((6, 8, 12, 16)), tmp_path, plot=True, n_boot=50)
    title = "H = g sum_nn S_i.S_j - 1 sum_plaquette-pair PP"
    fig = figures["obs_binder_stag"]
    assert any(title in t for t in texts(fig)) and any("beta = L" in t for t in texts(fig))
    ax = fig.axes[0]
    assert ax.get_xlabel() == "g  (Heisenberg coupling on the nn bonds)"
    assert ax.get_ylabel().replace("\n", " ").startswith("R_m = <m_z^4>/<m_z^2>^2")
    assert any("9/5 with Neel order" in t for t in texts(fig))
    collapse = figures["collapse_binder_stag"].axes[0]
    assert collapse.get_xlabel().startswith("(g - ")
    assert any("chi^2/dof" in t.get_text() for t in collapse.get_legend().get_texts())
    cr = res["crossings"]
    assert cr["g_c"]["quality"]["text"] and cr["collapse"]["quality"]["dof"] == cr["collapse"]["dof"]
    drift = figures["crossings_binder_stag"].axes[0]
    legend = " ".join(t.get_text() for t in drift.get_legend().get_texts())
    assert "g_c = " in legend and "omega" in legend
