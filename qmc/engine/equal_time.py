"""Estimators of one propagated state |alpha(0)>, written with the vertex kind's per-site value sigma_i and
per-bond value c_ij (hooks ``site_value``, ``bond_value`` of :mod:`qmc.engine.kinds`).  For S = 1/2 spins
(projector kind) sigma_i = 2 S^z_i and c_ij = 4 S^z_i S^z_j, and the estimators read (other kinds: their
module docstring says what sigma and c are, chosen so that the same formulas hold at N = 2):

Per configuration (N sites, phi_i the staggered sign):

- ``mz2``        (sum_i S^z_i)^2
- ``s_q_shifted`` S(Q + dq_a) = (1/N) |sum_i phi_i S^z_i exp(i dq_a . r_i)|^2 averaged over directions a,
                  dq_a = 2 pi / L_a along a (the nearest wavevectors of the ordering wavevector Q)
- ``D_x, D_y``   columnar dimer order parameter D_a = (1/N) sum_{bonds b along a} (-1)^{a_b} S^z_i S^z_j
- ``cos4``       cos 4 theta = (D_x^4 - 6 D_x^2 D_y^2 + D_y^4) / (D_x^2 + D_y^2)^2 (0 when D = 0)

and the (D_x, D_y) histogram over [-r, r]^2.  ``mz2`` and ``s_q_shifted`` are computed only when asked
(``order``): with the loop estimators (:mod:`qmc.engine.loop_estimators`) the step driver takes their loop
forms instead and leaves the two slots alone.
"""

from __future__ import annotations

from numba import njit

from qmc.engine.kinds import bond_value, site_value
from qmc.engine.slots import ET_DX, ET_DY, ET_MZ2, ET_SQN

__all__ = ["equal_time"]


@njit(inline="always")
def _order_parameters(kind, spins, cos_tab, sin_tab, out):
    """out[ET_MZ2] = (sum_i S^z_i)^2 and out[ET_SQN] = S(Q + dq) averaged over the directions."""
    n_sites = spins.shape[0]
    mz = 0
    for i in range(n_sites):
        mz += site_value(kind, spins, i)
    out[ET_MZ2] = 0.25 * mz * mz
    n_dirs = cos_tab.shape[0]
    sqn = 0.0
    for d in range(n_dirs):
        re = 0.0
        im = 0.0
        for i in range(n_sites):
            s = site_value(kind, spins, i)
            re += s * cos_tab[d, i]
            im += s * sin_tab[d, i]
        sqn += re * re + im * im
    if n_dirs > 0:
        out[ET_SQN] = 0.25 * sqn / (n_dirs * n_sites)
    else:
        out[ET_SQN] = 0.0


@njit(cache=True, boundscheck=False)
def equal_time(kind, spins, probes, tallies, order):
    """Fill ``tallies.et_out`` (slots ``ET_*``: D_x, D_y, and with ``order`` mz2 and S(Q + dq); without it
    those two slots keep what they held) for the current spins and add (D_x, D_y) to ``tallies.hist``.
    Records: :mod:`qmc.engine.records`."""
    cos_tab, sin_tab, hist_range = probes.cos_tab, probes.sin_tab, probes.hist_range
    vbs_bonds, vbs_dir, vbs_phase = probes.vbs_bonds, probes.vbs_dir, probes.vbs_phase
    hist, out = tallies.hist, tallies.et_out
    n_sites = spins.shape[0]
    if order:
        _order_parameters(kind, spins, cos_tab, sin_tab, out)
    dx = 0.0
    dy = 0.0
    for b in range(vbs_bonds.shape[0]):
        c = vbs_phase[b] * bond_value(kind, spins, vbs_bonds[b, 0], vbs_bonds[b, 1])
        if vbs_dir[b] == 0:
            dx += c
        else:
            dy += c
    dx *= 0.25 / n_sites
    dy *= 0.25 / n_sites
    out[ET_DX] = dx
    out[ET_DY] = dy
    nh = hist.shape[0]
    if vbs_bonds.shape[0] > 0 and nh > 0:
        ix = int((dx + hist_range) / (2.0 * hist_range) * nh)
        iy = int((dy + hist_range) / (2.0 * hist_range) * nh)
        ix = min(max(ix, 0), nh - 1)
        iy = min(max(iy, 0), nh - 1)
        hist[ix, iy] += 1
