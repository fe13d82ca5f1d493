"""Bond vertices of the directed-loop kind: XXZ couplings with the magnetic fields folded into them.

An ``xxz`` bond (sites i, j) with a field folded into its two ends is written as

    H_b = J (S^x_i S^x_j + S^y_i S^y_j + delta S^z_i S^z_j) - h_i S^z_i - h_j S^z_j
        = C_b - (C_b - H_b),

and the SSE expands in the matrix elements of C_b - H_b.  With sigma = 2 S^z = +-1 they are

    W(sigma_i, sigma_j) = C_b - J delta sigma_i sigma_j / 4 + (h_i sigma_i + h_j sigma_j) / 2   (diagonal)
    W_off               = |J| / 2                                                          (the hop)

(the sign of the hop is removed by the gauge of :func:`check_gauge`).  ``C_b`` is what enters the energy: it
is added to the constant of the bond's term group, so that reported energies are <H>/N for H exactly as
written.  Its value, per bond,

    C_b = C0 + eps,   C0 = max_sigma [J delta sigma_i sigma_j / 4 - (h_i sigma_i + h_j sigma_j) / 2],

makes the smallest diagonal weight C0 - ... = eps >= 0.  The exit probabilities (:mod:`qmc.engine.directed`)
of a loop entering a vertex are fixed by the directed-loop equations of three-member groups: {two diagonal
states differing in one spin, W_a and W_b; the hop, W_off}.  A group needs no bounce exactly when its three
weights obey the triangle inequalities, |W_a - W_b| <= W_off <= W_a + W_b.  The first does not depend on
C_b; the second does, and ``eps`` is the smallest shift that satisfies it in every group:

    eps = max(0, max_groups (W_off - W_a0 - W_b0) / 2),   W_0 the weights at C_b = C0.

So no bounce is left that a larger constant could remove, and the constant is no larger than needed for that
(a larger C_b only adds diagonal operators).  The bounces that remain come from |W_a - W_b| > W_off: an
easy-axis anisotropy (delta > 1) or a strong field.

Fields are folded into the bond vertices rather than made vertices of their own: a one-site vertex carrying
-h S^z can only pass a loop through by changing its weight from C + h/2 to C - h/2, so with C = h/2 every
loop reaching it from the favoured side bounces, while in a bond vertex the field share enters the
triangle inequalities together with the exchange and most of those bounces disappear (the fewest-bounce
solution then has bounce-free regions in the (delta, h) plane).  Site i's field h_i (the sum of the
``field`` terms: h, or h phi_i when staggered) is split in equal shares h_i / z_i over the z_i
directed-loop bond terms touching i; a ``heisenberg`` term of a model with a field becomes such a bond
(delta = 1).  A site with a field but no such bond is refused.

Term energies: the field share folded into group g contributes -sum_i f_{g,i} S^z_i to the operators of g,
so the engine measures sum_i f_{g,i} S^z_i per group (``group_field``) and :mod:`qmc.chain.observables`
reports the bond part for the ``xxz`` group and -sum_i h_i <S^z_i> for the ``field`` group.
"""

from __future__ import annotations

import numpy as np

from .errors import ModelError

__all__ = ["XXZ_COLUMNS", "diagonal_weights", "bond_constant", "fold_fields", "unfolded_sites", "check_gauge"]

XXZ_COLUMNS = ("J", "delta", "h_i", "h_j", "C")
"""Columns of :attr:`models.compiled.CompiledModel.term_xxz`: exchange, anisotropy, field shares of the two
bond ends, constant C_b (energy units)."""

_SIGMA = np.array([[-1, -1], [1, -1], [-1, 1], [1, 1]], dtype=np.float64)
"""(sigma_i, sigma_j) of the diagonal state code q = (i up) + 2 (j up)."""
_GROUPS = ((3, 2), (3, 1), (1, 0), (2, 0))
"""Pairs of diagonal states (codes q) joined with the hop in one directed-loop group: uu-du, uu-ud, ud-dd,
du-dd (each differs in one spin)."""


def diagonal_weights(J, delta, h_i, h_j, C) -> np.ndarray:
    """W(q) for the diagonal state codes q = 0..3 (formula in the module docstring); broadcasts over rows:
    scalar inputs give shape (4,), arrays of shape (T,) give (T, 4)."""
    J, delta, h_i, h_j, C = (np.asarray(x, dtype=np.float64)[..., None] for x in (J, delta, h_i, h_j, C))
    si, sj = _SIGMA[:, 0], _SIGMA[:, 1]
    return C - J * delta * si * sj / 4.0 + (h_i * si + h_j * sj) / 2.0


def bond_constant(J, delta, h_i, h_j) -> np.ndarray:
    """C_b = C0 + eps of every bond (module docstring): the smallest constant leaving all diagonal weights
    non-negative and no group a bounce that a larger constant would remove."""
    w0 = diagonal_weights(J, delta, h_i, h_j, 0.0)
    c0 = -np.min(w0, axis=-1)
    w = w0 + c0[..., None]
    off = np.abs(np.asarray(J, dtype=np.float64)) / 2.0
    need = np.max([off - w[..., a] - w[..., b] for a, b in _GROUPS], axis=0)
    return c0 + np.maximum(0.0, need / 2.0)


def fold_fields(n_sites: int, bond_sites: np.ndarray,
                site_field: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(h_i, h_j) of each directed bond term (rows of ``bond_sites``, int[T, 2]): site i's field split in
    equal shares over the z_i bond terms touching it.  Sites with a field and no bond are the caller's to
    refuse (:func:`unfolded_sites`)."""
    z = np.bincount(bond_sites.reshape(-1), minlength=n_sites).astype(np.float64)
    share = np.divide(site_field, z, out=np.zeros(n_sites), where=z > 0)
    return share[bond_sites[:, 0]], share[bond_sites[:, 1]]


def unfolded_sites(n_sites: int, bond_sites: np.ndarray, site_field: np.ndarray) -> np.ndarray:
    """Sites with a non-zero field and no directed bond to carry it."""
    z = np.bincount(bond_sites.reshape(-1), minlength=n_sites)
    return np.flatnonzero((z == 0) & (site_field != 0.0))


def check_gauge(n_sites: int, bonds: list[tuple[np.ndarray, bool, str, str]]) -> None:
    """Refuse a model whose hops cannot all be given positive weight.

    ``bonds``: per term (sites int[P, 2], antiferro, label, where).  An antiferromagnetic hop (J > 0, or a
    singlet projector) has a positive SSE weight after the rotation S^{x,y} -> -S^{x,y} of one of its two
    sites, a ferromagnetic one (J < 0) without it; so the model is sign-free when signs eps_i = +-1 exist with
    eps_i eps_j = -1 on every antiferromagnetic and +1 on every ferromagnetic bond, i.e. when every closed
    path of bonds has an even number of antiferromagnetic ones (common practice, no source).  Checked by
    union-find with parities; the term whose bond closes an odd path is named.
    """
    parent = np.arange(n_sites)
    parity = np.zeros(n_sites, dtype=np.int64)  # eps_i eps_root = (-1)^parity

    def root(i: int) -> tuple[int, int]:
        p = 0
        while parent[i] != i:
            p ^= int(parity[i])
            i = int(parent[i])
        return i, p

    for sites, antiferro, label, where in bonds:
        want = 1 if antiferro else 0
        for i, j in np.asarray(sites).reshape(-1, 2):
            ri, pi = root(int(i))
            rj, pj = root(int(j))
            if ri == rj:
                if pi ^ pj != want:
                    raise ModelError(
                        f"{label}: bond ({int(i)}, {int(j)}) closes a loop of bonds with an odd number of "
                        "antiferromagnetic hops (ferromagnetic xxz bonds, J < 0, mixed with "
                        "antiferromagnetic terms); no choice of spin axes makes all hops positive, so the "
                        "model has a sign problem", where)
                continue
            parent[ri] = rj
            parity[ri] = pi ^ pj ^ want
