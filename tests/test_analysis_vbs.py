"""Angular anisotropy <cos 4 theta> of the VBS order-parameter histogram."""

import numpy as np
import pytest

from qmc.analysis.binning import error_estimate
from qmc.analysis.plots import draw_vbs_histogram, new_figure
from qmc.analysis.vbs import bin_centres, cos4_from_histogram, plot_vbs_histogram, vbs_anisotropy

R, NH = 0.5, 41


def histogram(angles: np.ndarray, radius: float, width: float, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Samples around the given angles at the given radius; returns (counts[D_x, D_y], sample cos 4 theta)."""
    rng = np.random.default_rng(seed)
    th = rng.choice(angles, size=40000)
    x = radius * np.cos(th) + width * rng.standard_normal(th.size)
    y = radius * np.sin(th) + width * rng.standard_normal(th.size)
    edges = np.linspace(-R, R, NH + 1)
    h, _, _ = np.histogram2d(x, y, bins=[edges, edges])
    return h.astype(np.int64), np.cos(4 * np.arctan2(y, x))


def test_columnar_peaks_give_plus_one():
    h, c4 = histogram(np.array([0, 0.5, 1.0, 1.5]) * np.pi, 0.3, 0.02, seed=1)
    est = cos4_from_histogram(h, R)
    assert est > 0.9
    assert est == pytest.approx(c4.mean(), abs=0.03)  # discretisation of the angle by the bins


def test_diagonal_peaks_give_minus_one():
    h, c4 = histogram(np.array([0.25, 0.75, 1.25, 1.75]) * np.pi, 0.3, 0.02, seed=2)
    est = cos4_from_histogram(h, R)
    assert est < -0.9
    assert est == pytest.approx(c4.mean(), abs=0.03)


def test_ring_gives_zero():
    h, c4 = histogram(np.linspace(0, 2 * np.pi, 3600, endpoint=False), 0.3, 0.02, seed=3)
    # statistical scatter of the mean of cos 4 theta over 40000 samples: 0.71/200 = 0.0035
    assert abs(cos4_from_histogram(h, R)) < 0.03
    assert abs(c4.mean()) < 0.015


def test_single_bin_and_origin():
    c = bin_centres(NH, R)
    np.testing.assert_allclose(c, np.linspace(-R, R, NH + 1)[:-1] + R / NH, atol=1e-15)
    h = np.zeros((NH, NH), dtype=np.int64)
    i, j = 30, 24  # D_x = c[30], D_y = c[24]  (cos 4 theta is symmetric under D_x <-> D_y)
    h[i, j] = 5
    assert cos4_from_histogram(h, R) == pytest.approx(np.cos(4 * np.arctan2(c[j], c[i])))
    centre = np.zeros((NH, NH), dtype=np.int64)
    centre[NH // 2, NH // 2] = 7  # theta undefined at the origin: left out
    assert np.isnan(cos4_from_histogram(centre, R))


def test_anisotropy_with_series_error():
    h, _ = histogram(np.array([0, 0.5, 1.0, 1.5]) * np.pi, 0.3, 0.02, seed=4)
    series = np.random.default_rng(5).normal(0.8, 0.1, 256)
    out = vbs_anisotropy(h, R, series)
    est = error_estimate(series)
    assert out["cos4"] == est.mean and out["cos4_err"] == est.error
    assert out["counts"] == h.sum() and out["cos4_hist"] > 0.9


def test_histogram_plot(tmp_path):
    h, _ = histogram(np.array([0, 0.5, 1.0, 1.5]) * np.pi, 0.3, 0.02, seed=6)
    fig, ax = new_figure()
    im = draw_vbs_histogram(ax[0, 0], h, R)
    assert tuple(im.get_extent()) == (-R, R, -R, R)
    assert ax[0, 0].get_aspect() == 1.0
    # imshow rows are D_y: the array shown is the transpose
    np.testing.assert_array_equal(im.get_array(), h.T)
    files = plot_vbs_histogram(h, R, tmp_path / "vbs")
    assert sorted(p.suffix for p in files) == [".pdf", ".png"]
    assert all(p.stat().st_size > 0 for p in files)
