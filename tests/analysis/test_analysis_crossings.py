"""Finite-size scaling: crossings, extrapolation of g*(L), 1/nu from slopes, data collapse.

Synthetic curves R_L(g) = f((g - gc) L^(1/nu)) + c L^(-omega) with known gc, nu, omega, independent
Gaussian noise of known width (invented data for the test; fixed seeds).
"""

import numpy as np
import pytest
from scipy.optimize import brentq

from qmc.analysis.collapse import data_collapse, scaling_variable
from qmc.analysis.crossings import find_crossing, find_crossings, inverse_nu, size_pairs
from qmc.analysis.extrapolate import extrapolate

GC, NU, OMEGA = 0.5, 0.8, 1.2
SIZES = (8, 16, 32, 64, 128)


def f(x):
    return 1.2 + 0.5 * np.tanh(0.8 * x + 0.3)


def R(g, L, c):
    return f((g - GC) * L ** (1 / NU)) + c * L ** (-OMEGA)


def curves(c: float, sigma: float, seed: int, x_half: float = 3.0, n: int = 31) -> dict:
    rng = np.random.default_rng(seed)
    out = {}
    for L in SIZES:
        g = GC + np.linspace(-x_half, x_half, n) / L ** (1 / NU)
        out[L] = (g, R(g, L, c) + sigma * rng.standard_normal(n), np.full(n, sigma))
    return out


def true_crossing(L1, L2, c):
    width = 1.0 / L1 ** (1 / NU)
    return brentq(lambda g: R(g, L1, c) - R(g, L2, c), GC - 0.5 * width, GC + 1.5 * width)


def test_size_pairs():
    assert size_pairs([8, 12, 16, 24, 32]) == [(8, 16), (12, 24), (16, 32)]
    assert size_pairs([6, 10, 14]) == [(6, 10), (10, 14)]
    assert size_pairs([16, 8]) == [(8, 16)]


def test_inverse_nu_formula():
    assert inverse_nu(2.0, 2.0 * 2**1.25, 8, 16) == pytest.approx(1.25)
    assert inverse_nu(-1.0, -3.0, 10, 30) == pytest.approx(1.0)
    assert np.isnan(inverse_nu(1.0, -1.0, 8, 16))


def test_crossing_with_corrections_found_within_errors():
    data = curves(c=0.4, sigma=0.003, seed=1)
    found = find_crossings(data, rng=np.random.default_rng(7))
    assert [(x.L1, x.L2) for x in found] == [(8, 16), (16, 32), (32, 64), (64, 128)]
    for x in found:
        assert x.ok and x.n_boot_ok == x.n_boot
        assert abs(x.g - true_crossing(x.L1, x.L2, 0.4)) < 3 * x.g_err
        # the crossing value of the tanh curves is near f(0) = 1.2 + 0.5 tanh(0.3)
        assert abs(x.value - R(x.g, x.L1, 0.4)) < 4 * x.value_err + 0.003


def test_crossing_is_deterministic_and_none_without_crossing():
    data = curves(c=0.4, sigma=0.003, seed=1)
    a = find_crossing(data[16], data[32], 16, 32, rng=np.random.default_rng(3))
    b = find_crossing(data[16], data[32], 16, 32, rng=np.random.default_rng(3))
    assert a == b
    g = np.linspace(0, 1, 20)
    flat = (g, np.zeros(20), np.full(20, 0.01))
    shifted = (g, np.ones(20), np.full(20, 0.01))
    assert find_crossing(flat, shifted, 8, 16, rng=np.random.default_rng(0)) is None


def test_extrapolation_recovers_gc():
    data = curves(c=0.4, sigma=0.003, seed=2)
    found = find_crossings(data, rng=np.random.default_rng(11))
    ex = extrapolate([x.L1 for x in found], [x.g for x in found], [x.g_err for x in found])
    assert ex.omega_fitted and ex.n_points == 4
    assert ex.limit_err < 2e-4
    assert abs(ex.limit - GC) < 3 * ex.limit_err
    # leading drift exponent of (L, 2L) crossings is omega + 1/nu = 2.45 (standard FSS; common practice)
    assert abs(ex.omega - (OMEGA + 1 / NU)) < 3 * ex.omega_err


def test_extrapolation_exact_power_law():
    L = np.array([8.0, 16, 32, 64, 128])
    y = 0.3 + 2.0 * L**-1.5
    ex = extrapolate(L, y, np.full(5, 1e-6))
    assert ex.limit == pytest.approx(0.3, abs=1e-6)
    assert ex.omega == pytest.approx(1.5, rel=1e-4)
    fixed = extrapolate(L[:3], 0.3 + 2.0 * L[:3] ** -1.0, np.full(3, 1e-3))
    assert not fixed.omega_fitted and fixed.limit == pytest.approx(0.3, abs=1e-9)


def test_inverse_nu_from_slopes_without_corrections():
    data = curves(c=0.0, sigma=0.002, seed=3)
    found = find_crossings(data, rng=np.random.default_rng(5))
    assert len(found) == 4
    for x in found:
        assert abs(x.g - GC) < 3 * x.g_err
        assert abs(x.inv_nu - 1 / NU) < 3 * x.inv_nu_err
    w = np.array([1 / x.inv_nu_err**2 for x in found])
    mean = np.sum(w * [x.inv_nu for x in found]) / w.sum()
    assert abs(mean - 1 / NU) < 3 / np.sqrt(w.sum())
    assert 1 / np.sqrt(w.sum()) < 0.03


def test_data_collapse_recovers_gc_and_nu():
    data = curves(c=0.0, sigma=0.002, seed=4, x_half=1.0, n=15)
    # deliberately poor start: 0.01 off in g_c is about 4 scaling widths for L = 128
    col = data_collapse(data, 0.49, 1.0, degree=4)
    assert col.success
    assert col.chi2 / col.dof < 1.5
    assert abs(col.g_c - GC) < 3 * col.g_c_err and col.g_c_err < 1e-3
    assert abs(col.nu - NU) < 3 * col.nu_err and col.nu_err < 0.02
    x = scaling_variable(data[32][0], 32, col.g_c, col.nu)
    assert np.max(np.abs(col.master_curve(x) - f(x))) < 0.01


def test_data_collapse_too_few_points():
    with pytest.raises(ValueError, match="too few"):
        data_collapse({8: (np.r_[0.1, 0.2], np.r_[1.0, 2.0], np.r_[0.1, 0.1])}, 0.1, 1.0)
