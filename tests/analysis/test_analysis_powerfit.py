"""The weighted power-law fit y(L) = c_0 + sum_k c_k L^-p_k (qmc.analysis.powerfit) against general-purpose
fitters (numpy.polyfit in x = 1/L, scipy.optimize.curve_fit), its error bar against the spread of the limit
over many synthetic noisy data sets, and the drop-smallest-size shift.  All data are synthetic with known
limits; noise comes from fixed seeds."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import curve_fit

from qmc.analysis.powerfit import drop_smallest_shift, fit_powers

L = np.array([8.0, 10.0, 12.0, 16.0, 20.0, 24.0, 32.0])


def test_limit_coefficients_and_covariance_agree_with_numpy_polyfit():
    rng = np.random.default_rng(11)
    dy = 1e-4 * (1 + rng.random(L.size))  # unequal error bars: the weights matter
    y = 0.0945 + 0.2 / L - 0.3 / L**2 + dy * rng.standard_normal(L.size)
    fit = fit_powers(L, y, dy, (1, 2))
    # polyfit in x = 1/L: highest power first; w = 1/sigma; 'unscaled' = the plain (A^T W A)^-1
    p, cov = np.polyfit(1.0 / L, y, 2, w=1.0 / dy, cov="unscaled")
    assert fit.coef == pytest.approx(p[::-1], rel=1e-9, abs=1e-13)
    scale = max(1.0, fit.chi2 / fit.dof)
    assert fit.errors == pytest.approx(np.sqrt(np.diag(cov)[::-1] * scale), rel=1e-8)
    assert fit.dof == L.size - 3
    assert fit.chi2 == pytest.approx(np.sum(((y - np.polyval(p, 1.0 / L)) / dy) ** 2), rel=1e-9)
    assert fit(L) == pytest.approx(np.polyval(p, 1.0 / L), rel=1e-12)


def test_non_integer_powers_agree_with_curve_fit():
    rng = np.random.default_rng(12)
    dy = np.full(L.size, 2e-5)
    y = -0.6694 + 0.5 * L**-3.0 - 1.1 * L**-4.5 + dy * rng.standard_normal(L.size)
    fit = fit_powers(L, y, dy, (3.0, 4.5))

    def model(x, c0, c1, c2):
        return c0 + c1 * x**-3.0 + c2 * x**-4.5

    def jac(x, *_):  # analytic: with finite differences curve_fit stops ~1e-5 short of the minimum
        return np.column_stack([np.ones_like(x), x**-3.0, x**-4.5])

    p, cov = curve_fit(model, L, y, p0=[-0.67, 0.0, 0.0], sigma=dy, absolute_sigma=True, jac=jac)
    assert fit.coef == pytest.approx(p, rel=1e-7, abs=1e-10)
    assert fit.limit_err == pytest.approx(np.sqrt(cov[0, 0]) * np.sqrt(max(1.0, fit.chi2_dof)), rel=1e-5)


def test_error_of_the_limit_matches_the_spread_over_noisy_data_sets():
    """2000 data sets with Gaussian noise of the stated error bars: the spread of c_0 must equal the
    (unscaled) error bar from the covariance.  The stated error of the spread's estimate is
    1/sqrt(2 n) = 1.6 %, so a 7 % tolerance is 4 sigma; the mean of c_0 must sit on the true limit."""
    rng = np.random.default_rng(2024)
    c0, n = 0.0945, 2000
    dy = 3e-4 * (L / 8.0) ** -1.0  # errors shrinking with L, as in simulations of fixed length
    exact = c0 + 0.25 / L - 0.4 / L**2
    limits, errs = [], []
    for _ in range(n):
        fit = fit_powers(L, exact + dy * rng.standard_normal(L.size), dy, (1, 2))
        limits.append(fit.limit)
        errs.append(np.sqrt(fit.errors[0] ** 2 / max(1.0, fit.chi2_dof)))  # undo the chi^2 inflation
    limits = np.array(limits)
    sigma = errs[0]
    assert np.allclose(errs, sigma, rtol=1e-9)  # the unscaled error does not depend on the noise
    assert limits.std(ddof=1) == pytest.approx(sigma, rel=0.07)
    assert abs(limits.mean() - c0) < 4 * sigma / np.sqrt(n)
    # the reported (chi^2-inflated) error is never smaller and covers the truth at the usual rate
    pulls = np.abs(limits - c0) / sigma
    assert 0.63 < np.mean(pulls < 1.0) < 0.73


def test_error_of_the_shift_matches_its_spread_over_noisy_data_sets():
    """var(c_0 without the smallest L - c_0 of all) = var(reduced) - var(full) for nested fits: checked
    against 2000 noisy data sets (4-sigma tolerance 7 %, as above); the mean shift is zero when the
    fitted form is exact."""
    rng = np.random.default_rng(77)
    dy = 2e-4 * (L / 8.0) ** -0.5
    exact = -0.67 + 0.5 / L**3 - 2.0 / L**4
    shifts, errs = [], []
    for _ in range(2000):
        y = exact + dy * rng.standard_normal(L.size)
        s = drop_smallest_shift(L, y, dy, (3, 4))
        shifts.append(s.value)
        errs.append(s.error)
    sigma = errs[0]
    assert np.allclose(errs, sigma, rtol=1e-6) and sigma > 0
    assert np.std(shifts, ddof=1) == pytest.approx(sigma, rel=0.07)
    assert abs(np.mean(shifts)) < 4 * sigma / np.sqrt(2000)


def test_exact_data_are_reproduced_and_the_shift_is_zero():
    y = 0.3 - 0.8 / L**2 + 3.0 / L**3
    fit = fit_powers(L, y, np.full(L.size, 1e-4), (2, 3))
    assert fit.limit == pytest.approx(0.3, abs=1e-12) and fit.chi2 < 1e-16
    assert drop_smallest_shift(L, y, np.full(L.size, 1e-4), (2, 3)).value == pytest.approx(0.0, abs=1e-12)


def test_drop_smallest_shift_measures_an_unfitted_correction():
    """Data with an L^-3 term fitted with (1, 2) only: the shift is the change of c_0 computed by
    polyfit on the points without the smallest L (the order of the points must not matter)."""
    y = 0.0945 + 0.2 / L - 0.3 / L**2 + 4.0 / L**3
    dy = np.full(L.size, 1e-5)
    order = np.array([3, 0, 6, 1, 5, 2, 4])
    shift = drop_smallest_shift(L[order], y[order], dy[order], (1, 2)).value
    full = np.polyfit(1.0 / L, y, 2, w=1.0 / dy)[-1]
    reduced = np.polyfit(1.0 / L[1:], y[1:], 2, w=1.0 / dy[1:])[-1]
    assert shift == pytest.approx(reduced - full, rel=1e-8)
    assert abs(shift) > 1e-4  # the neglected term shows up
    # the fitted limit itself is biased by the neglected term by more than the shift's order of magnitude
    assert abs(full - 0.0945) > 0.3 * abs(shift)


def test_shift_needs_a_degree_of_freedom_after_dropping():
    y = 1.0 + 1.0 / L[:4]
    dy = np.full(4, 1e-3)
    assert np.all(np.isnan(drop_smallest_shift(L[:4], y, dy, (1, 2))))  # 3 points left for 3 parameters
    assert np.all(np.isfinite(drop_smallest_shift(L[:5], 1.0 + 1.0 / L[:5], np.full(5, 1e-3), (1, 2))))


@pytest.mark.parametrize("args, fragment", [
    ((L[:2], [1.0, 1.1], [0.1, 0.1], (1, 2)), "2 points for 3 parameters"),
    ((L[:3], [1.0, 1.1, 1.2], [0.1, 0.0, 0.1], (1,)), "error bars positive"),
    ((L[:3], [1.0, np.nan, 1.2], [0.1, 0.1, 0.1], (1,)), "finite"),
    (([8.0, 8.0, 16.0], [1.0, 1.1, 1.2], [0.1, 0.1, 0.1], (1, 2)), "do not determine"),
    ((L[:3], [1.0, 1.1], [0.1, 0.1, 0.1], (1,)), "differ in length"),
])
def test_bad_input_raises(args, fragment):
    with pytest.raises(ValueError, match=fragment):
        fit_powers(*args)
