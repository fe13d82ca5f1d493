"""Emergent-U(1) analysis: <cos 4 theta> per size and coupling, fits of |<cos 4 theta>|(L), histogram panels.

Invented test data (not physics): per-bin vbs_cos4 series with means following c(L) = 0.02 L^1.2 at one
coupling (a growing anisotropy, fitted exponent -1.2) and 0.4 L^-0.8 at another, with the (D_x, D_y)
histogram of a ring or of four peaks.
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest

from qmc.analysis import analyze_run, format_result

R, NH = 0.25, 32


def _hist(columnar: bool, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    th = rng.choice(np.arange(4) * np.pi / 2, 5000) if columnar else rng.uniform(0, 2 * np.pi, 5000)
    x = 0.15 * np.cos(th) + 0.02 * rng.standard_normal(5000)
    y = 0.15 * np.sin(th) + 0.02 * rng.standard_normal(5000)
    edges = np.linspace(-R, R, NH + 1)
    return np.histogram2d(x, y, bins=[edges, edges])[0].astype(np.int64)


def _task(L: int, J: float, cos4: float, seed: int):
    rng = np.random.default_rng(seed)
    err = 0.002
    noise = rng.standard_normal(100)
    noise = (noise - noise.mean()) / noise.std(ddof=1)
    bins = {"energy": -0.5 + 0.001 * rng.standard_normal(100), "vbs_cos4": cos4 + err * 10 * noise}
    return SimpleNamespace(task_id=f"L{L}_J{J}", params={"L": L, "J": J, "beta": float(L), "copy": 0},
                           bins=bins, steps_per_bin=10, n_sites=L * L, linear_size=L, beta=float(L),
                           vbs_histogram=_hist(J < 0.6, seed), vbs_hist_range=R, status="done", exchange=None)


@pytest.fixture
def result(tmp_path):
    tasks = [_task(L, 0.5, 0.02 * L**1.2, L) for L in (8, 12, 16)]
    tasks += [_task(L, 0.7, 0.4 * L**-0.8, 100 + L) for L in (8, 12, 16)]
    return analyze_run(tasks, tmp_path, plot=True, coupling="J"), tmp_path


def test_cos4_per_size_and_coupling_and_its_power_law(result):
    res, _ = result
    u1 = res["emergent_u1"]
    assert len(u1["points"]) == 6 and u1["coupling"] == "J"
    fits = {f["g"]: f["fit"] for f in u1["fits"]}
    assert fits[0.5]["ok"] and abs(fits[0.5]["exponent"] + 1.2) < 4 * fits[0.5]["exponent_err"]
    assert fits[0.7]["ok"] and abs(fits[0.7]["exponent"] - 0.8) < 4 * fits[0.7]["exponent_err"]
    assert fits[0.5]["exponent_err"] < 0.1
    assert "|<cos 4 theta>| ~ L^-a" in format_result(res)


def test_histogram_panels_one_per_coupling(result):
    _, out = result
    assert (out / "plots" / "vbs_J0.5.png").exists() and (out / "plots" / "vbs_J0.7.png").exists()
    assert (out / "plots" / "cos4_vs_L.png").exists()


def test_a_single_size_gives_no_fit_and_says_so(tmp_path):
    res = analyze_run([_task(8, 0.5, 0.1, 1), _task(8, 0.6, 0.2, 2)], tmp_path, coupling="J")
    fits = res["emergent_u1"]["fits"]
    assert len(fits) == 2 and all(not f["fit"]["ok"] and "needs at least 3" in f["fit"]["note"] for f in fits)
