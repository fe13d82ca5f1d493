"""Angular anisotropy <cos 4 theta> of the VBS order-parameter histogram, the lattice of allowed (D_x, D_y)
values (checked against enumerating every spin configuration of small lattices) and the display grid that
shows no binning stripes."""

import numpy as np
import pytest
from qmc.models import build_lattice

from qmc.analysis.binning import error_estimate
from qmc.analysis.plots import draw_vbs_histogram, new_figure, plot_vbs_histogram
from qmc.analysis.vbs import (
    ValueGrid,
    bin_centres,
    cos4_from_histogram,
    display_histogram,
    value_grid,
    vbs_anisotropy,
)

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
    mesh = draw_vbs_histogram(ax[0, 0], h, R)
    xe, ye, P, _ = display_histogram(h, R)
    assert ax[0, 0].get_aspect() == 1.0
    # the data reach |D| ~ 0.38 of the stored range 0.5: the plot is cropped to them
    assert 0.3 < xe[-1] < 0.45 and xe[0] == pytest.approx(-xe[-1]) and ye[-1] == xe[-1]
    np.testing.assert_allclose(mesh.get_array().reshape(P.T.shape), P.T)  # rows are D_y
    assert P.sum() == pytest.approx(1.0) and mesh.get_clim() == (0.0, P.max())
    files = plot_vbs_histogram(h, R, tmp_path / "vbs")
    assert sorted(p.suffix for p in files) == [".pdf", ".png"]
    assert all(p.stat().st_size > 0 for p in files)


def enumerate_D(lat) -> tuple[np.ndarray, np.ndarray]:
    """D_x and D_y of every spin configuration, as the engine computes them (D_a = S_a / (4N))."""
    n = lat.n_sites
    states = ((np.arange(2**n)[:, None] >> np.arange(n)) & 1) * 2 - 1
    b, d, ph = lat.vbs_bonds, lat.vbs_dir, lat.vbs_phase
    c = ph * states[:, b[:, 0]] * states[:, b[:, 1]]
    return c[:, d == 0].sum(axis=1) * 0.25 / n, c[:, d == 1].sum(axis=1) * 0.25 / n


@pytest.mark.parametrize("size,boundary", [(4, "periodic"), ((4, 3), "open")])
def test_allowed_values_match_every_configuration(size, boundary):
    lat = build_lattice("square", size, boundary)
    grid = value_grid(lat.n_sites, lat.vbs_bonds, lat.vbs_dir, lat.vbs_phase)
    for a, D in enumerate(enumerate_D(lat)):
        values = np.unique(np.round(D, 12))
        k = (values - grid.offset[a]) / grid.spacing[a]
        np.testing.assert_allclose(k, np.round(k), atol=1e-9)  # every value lies on the grid ...
        assert np.min(np.diff(values)) == pytest.approx(grid.spacing[a])  # ... and the grid is not too coarse
    if boundary == "periodic":  # D_a is a multiple of 1/N on a periodic square lattice
        assert grid.spacing == (1 / lat.n_sites, 1 / lat.n_sites) and grid.offset == (0.0, 0.0)
    else:  # the end sites of open rows have one x-bond: steps of 1/(2N)
        assert grid.spacing[0] == pytest.approx(1 / (2 * lat.n_sites))


def engine_histogram(D: np.ndarray, r: float = 0.25, nh: int = 64) -> np.ndarray:
    """(D_x, D_y) samples binned as qmc/engine/equal_time.py bins them (floor, clipped)."""
    idx = np.clip(((D + r) / (2 * r) * nh).astype(int), 0, nh - 1)
    h = np.zeros((nh, nh), np.int64)
    np.add.at(h, (idx[:, 0], idx[:, 1]), 1)
    return h


@pytest.mark.parametrize("L", [8, 12])
def test_display_grid_has_no_binning_stripes(L):
    """A flat distribution over the allowed values of an L x L lattice (spacing 1/L^2 against stored bins of
    width 1/128) must look flat: raw counts show stripes (empty bins for L = 8, bins with one or two values
    for L = 12), the display grid does not."""
    N = L * L
    k = np.arange(-N // 16, N // 16 + 1)  # values up to |D| ~ 1/16
    D = np.array([(i, j) for i in k for j in k], dtype=float) / N
    h = engine_histogram(np.repeat(D, 7, axis=0))
    inner = h[np.abs(bin_centres(64, 0.25)) < 0.05][:, np.abs(bin_centres(64, 0.25)) < 0.05]
    assert inner.max() >= 2 * max(inner.min(), 1) or inner.min() == 0  # the raw counts are striped
    xe, ye, P, how = display_histogram(h, 0.25, ValueGrid((0.0, 0.0), (1 / N, 1 / N)))
    centres = 0.5 * (xe[1:] + xe[:-1])
    core = P[np.abs(centres) < 0.05][:, np.abs(centres) < 0.05]
    np.testing.assert_allclose(core, core.mean(), rtol=1e-12)  # flat: every allowed value weighs the same
    assert ("one cell per allowed value" in how) == (L == 8)
    assert xe[-1] < 0.1  # cropped to the data


def test_a_grid_that_does_not_fit_the_data_is_not_used():
    h = engine_histogram(np.array([[0.5 / 64, 0.0]] * 10))  # a value that is not a multiple of 1/64
    *_, how = display_histogram(h, 0.25, ValueGrid((0.0, 0.0), (1 / 64, 1 / 64)))
    assert how.startswith("stored bins")
