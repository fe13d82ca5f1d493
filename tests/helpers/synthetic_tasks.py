"""Synthetic TaskData-like objects for the analysis tests (invented data): a Binder ratio
R_L(g) = 1.5 - 0.4 tanh(0.4 (g - 1) L) (g_c = 1, nu = 1) built from per-bin m_stag2, m_stag4 series."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np

__all__ = ["GS", "binder", "make_task"]

GS = np.linspace(0.9, 1.1, 9)


def binder(g, L):
    return 1.5 - 0.4 * np.tanh(0.4 * (g - 1.0) * L)


def make_task(L, g, beta, copy=0, seed=0, full=True, energy_shift=0.0, nbins=200, vbs=None):
    rng = np.random.default_rng(seed)
    N = L * L
    mu2 = 0.3 / np.sqrt(L)
    m2 = mu2 * (1 + 0.01 * rng.standard_normal(nbins))
    m4 = binder(g, L) * mu2**2 * (1 + 0.01 * rng.standard_normal(nbins))
    bins = {
        "energy": -0.6 - 0.1 * g + energy_shift + 0.01 * rng.standard_normal(nbins),
        "m_stag2": m2,
        "m_stag4": m4,
    }
    hist = None
    if vbs if vbs is not None else full:
        th = rng.choice([0.0, 0.5 * np.pi, np.pi, 1.5 * np.pi], 2000)
        x = 0.2 * np.cos(th) + 0.05 * rng.standard_normal(2000)
        y = 0.2 * np.sin(th) + 0.05 * rng.standard_normal(2000)
        edges = np.linspace(-0.5, 0.5, 22)
        hist = np.histogram2d(x, y, bins=[edges, edges])[0].astype(np.int64)
    if full:
        n = 0.6 * beta * N + rng.standard_normal(nbins)
        bins.update(
            {
                "n_ops": n,
                "n_ops_sq": n**2 + 0.6 * beta * N + 20.0 * rng.standard_normal(nbins),
                "s_q": N * m2,
                "s_q_shifted": N * m2 / 5.0 * (1 + 0.02 * rng.standard_normal(nbins)),
                "stiffness": 0.1 * (1.5 - g) + 0.005 * rng.standard_normal(nbins),
                "stiffness/x": 0.1 * (1.5 - g) + 0.005 * rng.standard_normal(nbins),
                "vbs_x2": 0.01 + 0.001 * rng.standard_normal(nbins),
                "vbs_y2": 0.01 + 0.001 * rng.standard_normal(nbins),
                "vbs4": 0.0005 + 0.00005 * rng.standard_normal(nbins),
                "vbs_cos4": 0.3 + 0.1 * rng.standard_normal(nbins),
            }
        )
    return SimpleNamespace(
        task_id=f"L{L}_g{g:.4f}_b{beta:g}_c{copy}",
        params={
            "L": np.int64(L),
            "g": float(g),
            "beta": float(beta),
            "copy": copy,
            "lattice": "square",
            "size": np.array([L, L]),
            "boundary": "periodic",
        },
        bins=bins,
        steps_per_bin=100,
        n_sites=N,
        linear_size=L,
        beta=float(beta),
        vbs_histogram=hist,
        vbs_hist_range=0.5 if hist is not None else None,
        status="done",
        exchange=None,
    )
