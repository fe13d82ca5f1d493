"""Jackknife, derived observables and combination of chains."""

import numpy as np
import pytest

from qmc.analysis.binning import error_estimate, rebin
from qmc.analysis.chains import concatenate_chains, merge_bin_dicts, weighted_mean
from qmc.analysis.derived import (
    binder_stag,
    corr_length,
    derived_estimates,
    derived_observables,
    specific_heat,
)
from qmc.analysis.jackknife import jackknife, jackknife_pseudovalues


def test_linear_function_gives_plain_standard_error():
    rng = np.random.default_rng(1)
    a, b = rng.normal(1.0, 0.5, 500), rng.normal(-2.0, 1.5, 500)
    r = jackknife(lambda x: x, a)
    assert r.value == pytest.approx(a.mean(), rel=1e-14)
    assert r.error == pytest.approx(a.std(ddof=1) / np.sqrt(a.size), rel=1e-12)
    assert r.bias_corrected == pytest.approx(a.mean(), rel=1e-12)
    c = 2 * a - 3 * b
    r2 = jackknife(lambda x, y: 2 * x - 3 * y, a, b)
    assert r2.error == pytest.approx(c.std(ddof=1) / np.sqrt(c.size), rel=1e-12)


def test_ratio_matches_delta_method():
    # delta method (common practice, no source):
    # var(A/B) = [s_aa / mb^2 - 2 ma s_ab / mb^3 + ma^2 s_bb / mb^4] / n
    rng = np.random.default_rng(2024)
    n = 20000
    mean = np.array([1.0, 2.0])
    sa, sb, corr = 0.3, 0.4, 0.6
    cov = np.array([[sa**2, corr * sa * sb], [corr * sa * sb, sb**2]])
    ab = rng.multivariate_normal(mean, cov, size=n)
    a, b = ab[:, 0], ab[:, 1]
    r = jackknife(lambda x, y: x / y, a, b)

    def delta(ma, mb, c):
        return np.sqrt((c[0, 0] / mb**2 - 2 * ma * c[0, 1] / mb**3 + ma**2 * c[1, 1] / mb**4) / n)

    # population moments: the jackknife error itself scatters by ~1/sqrt(2n) = 0.5 %
    assert r.error == pytest.approx(delta(1.0, 2.0, cov), rel=0.05)
    # sample moments: agreement up to O(1/n) terms
    assert r.error == pytest.approx(delta(a.mean(), b.mean(), np.cov(a, b)), rel=0.01)
    assert abs(r.bias_corrected - 0.5) < 4 * r.error


def test_bias_correction_of_square_is_exact():
    # f = x^2: the jackknife bias-corrected value is mean^2 - s^2/n exactly (s^2 with ddof=1)
    x = np.random.default_rng(3).normal(0.3, 1.0, 200)
    r = jackknife(lambda m: m**2, x)
    assert r.bias_corrected == pytest.approx(x.mean() ** 2 - x.var(ddof=1) / x.size, rel=1e-10)


def test_block_option_and_vector_series():
    rng = np.random.default_rng(4)
    x = rng.normal(size=(103, 3))
    f = lambda m: m[:2] / m[2]  # noqa: E731
    blocked = jackknife(f, x + 5.0, block=10)
    manual = jackknife(f, rebin(x + 5.0, 10))
    np.testing.assert_allclose(blocked.error, manual.error, rtol=1e-12)
    assert np.shape(blocked.value) == (2,)
    vec = jackknife(lambda m: m[..., :2] / m[..., 2:3], x + 5.0, vectorized=True)
    np.testing.assert_allclose(vec.error, jackknife(f, x + 5.0).error, rtol=1e-10)


def test_pseudovalues_reproduce_jackknife():
    rng = np.random.default_rng(6)
    a, b = rng.normal(2, 0.2, 300), rng.normal(3, 0.2, 300)
    f = lambda x, y: x * x / y  # noqa: E731
    r = jackknife(f, a, b)
    theta, p = jackknife_pseudovalues(f, a, b)
    assert theta == pytest.approx(r.value)
    assert p.mean() == pytest.approx(r.bias_corrected, rel=1e-10)
    assert p.std(ddof=1) / np.sqrt(p.size) == pytest.approx(r.error, rel=1e-8)


def test_bad_input_is_reported():
    with pytest.raises(ValueError, match="equal n_bins"):
        jackknife(lambda x, y: x / y, np.ones(5), np.ones(6))
    with pytest.raises(ValueError, match="at least 2"):
        jackknife(lambda x: x, np.ones(1))


def test_derived_observables_formulas():
    rng = np.random.default_rng(8)
    n = 400
    bins = {
        "n_ops": rng.normal(100.0, 1.0, n),
        "n_ops_sq": rng.normal(10150.0, 10.0, n),
        "m_stag2": rng.normal(0.1, 0.005, n),
        "m_stag4": rng.normal(0.015, 0.001, n),
        "s_q": rng.normal(5.0, 0.1, n),
        "s_q_shifted": rng.normal(1.0, 0.02, n),
        "stiffness": rng.normal(0.05, 0.002, n),
    }
    N, L = 64, 8
    d = derived_observables(bins, N, L)
    assert set(d) == {"specific_heat", "binder_stag", "corr_length", "xi_over_L", "stiffness_L"}
    m = {k: v.mean() for k, v in bins.items()}
    assert d["specific_heat"][0] == pytest.approx((m["n_ops_sq"] - m["n_ops"] ** 2 - m["n_ops"]) / N)
    assert d["binder_stag"][0] == pytest.approx(m["m_stag4"] / m["m_stag2"] ** 2)
    xi = L / (2 * np.pi) * np.sqrt(m["s_q"] / m["s_q_shifted"] - 1)
    assert d["corr_length"][0] == pytest.approx(xi)
    assert d["xi_over_L"][0] == pytest.approx(xi / L)
    # linear in the bins: pseudo-values are exactly L * stiffness bins
    assert d["stiffness_L"][1] == pytest.approx(L * error_estimate(bins["stiffness"]).error, rel=1e-10)
    assert all(np.isfinite(v[1]) and v[1] > 0 for v in d.values())
    est = derived_estimates(bins, N, L)
    assert est["binder_stag"].tau_int == pytest.approx(0.5, abs=0.15)


def test_derived_function_values():
    assert specific_heat(10.0, 130.0, 4) == pytest.approx((130 - 100 - 10) / 4)
    assert binder_stag(3.0, 1.0) == 3.0
    assert np.isnan(corr_length(0.9, 1.0, 8))
    vbs = derived_observables(
        {"vbs4": np.array([2.0, 2.0]), "vbs_x2": np.array([0.5, 0.5]), "vbs_y2": np.array([0.5, 0.5])}, 4, 2
    )
    assert vbs["binder_vbs"][0] == pytest.approx(2.0)


def test_chains_concatenate_and_weight():
    a, b = np.arange(4.0), np.arange(8.0)
    np.testing.assert_allclose(concatenate_chains([a, a]), np.r_[a, a])
    # b has bins half as long as a: pairs are averaged first
    np.testing.assert_allclose(
        concatenate_chains([a, b], bin_lengths=[200, 100]), np.r_[a, [0.5, 2.5, 4.5, 6.5]]
    )
    with pytest.raises(ValueError, match="do not divide"):
        concatenate_chains([a, b], bin_lengths=[300, 200])
    merged, spb = merge_bin_dicts([{"e": a, "x": a}, {"e": a}], [10, 10])
    assert set(merged) == {"e"} and spb == 10 and merged["e"].size == 8
    m, e = weighted_mean([1.0, 2.0], [1.0, 2.0])
    assert m == pytest.approx((1.0 + 2.0 / 4) / 1.25) and e == pytest.approx(1 / np.sqrt(1.25))
