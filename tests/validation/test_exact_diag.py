"""Checks of the exact-diagonalization reference (tests/exact_diag.py) against facts outside the project.

Sources: closed-form spectra (dimer, 4-site ring via total-spin algebra), remembered published ground-state
energies, the high-temperature expansion (traces of spin operators), gauge invariance of the twist,
second-order thermodynamic perturbation theory, and an independent Kronecker-product construction with
dense numpy/scipy diagonalization.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as sla
import scipy.sparse.linalg as spla

from qmc.validation.exact import (
    ExactSpectrum,
    bilayer_bonds,
    bilayer_translations,
    build_hamiltonian,
    chain_bonds,
    chain_translations,
    kubo_kernel,
    q2_plaquette_pairs,
    q3_columns,
    square_bonds,
    square_translations,
    staggered_signs_chain,
    staggered_signs_square,
    stiffness_by_twist,
    sz_diagonal,
)

# ----------------------------------------------------------------------------- independent dense builder
_SZ = np.diag([-0.5, 0.5])  # single-site basis index 1 = up (bit = 1)
_SP = np.array([[0.0, 0.0], [1.0, 0.0]])  # S^+ |down> = |up>
_SM = _SP.T


def _op(n, ops):
    """Dense operator prod_i ops[i] (dict site -> 2x2); site i is bit i, so site n-1 is the first factor."""
    out = np.ones((1, 1))
    for site in range(n - 1, -1, -1):
        out = np.kron(out, ops.get(site, np.eye(2)))
    return out


def _dot(n, i, j, theta=0.0):
    """S_i.S_j with S^+_i S^-_j carrying e^{+i theta}."""
    return (_op(n, {i: _SZ, j: _SZ})
            + 0.5 * np.exp(1j * theta) * _op(n, {i: _SP, j: _SM})
            + 0.5 * np.exp(-1j * theta) * _op(n, {i: _SM, j: _SP}))


def _dense_h(n, heis=(), qterms=(), twist=None):
    tw = twist or {}
    H = np.zeros((1 << n, 1 << n), dtype=complex)
    for J, i, j in heis:
        H += J * _dot(n, i, j, tw.get((i, j), 0.0))
    for Q, bonds in qterms:
        prod = np.eye(1 << n, dtype=complex)
        for i, j in bonds:
            prod = prod @ (0.25 * np.eye(1 << n) - _dot(n, i, j, tw.get((i, j), 0.0)))
        H -= Q * prod
    return H


def _free_energy_dense(H, beta):
    e = np.linalg.eigvalsh(H)
    return e.min() - np.log(np.exp(-beta * (e - e.min())).sum()) / beta


def _ring(L, J=1.0):
    return [(J, i, j) for i, j in chain_bonds(L)]


# ----------------------------------------------------------------------------- construction
def test_builder_matches_kronecker_products():
    """Random Heisenberg, Q2 and Q3 terms with random twists against the dense Kronecker construction."""
    rng = np.random.default_rng(11)
    n = 7
    heis = [(rng.normal(), i, j) for i, j in [(0, 1), (1, 2), (2, 3), (3, 4), (4, 5), (5, 6), (6, 0), (0, 3)]]
    qterms = [(rng.normal(), [(0, 1), (2, 3)]), (rng.normal(), [(4, 5), (6, 0)]),
              (rng.normal(), [(1, 2), (3, 4), (5, 6)])]
    bonds = {(i, j) for _, i, j in heis} | {b for _, bl in qterms for b in bl}
    twist = {b: rng.uniform(-np.pi, np.pi) for b in bonds}
    H = build_hamiltonian(n, heis, qterms, twist=twist).toarray()
    assert np.abs(H - _dense_h(n, heis, qterms, twist)).max() < 1e-13
    H0 = build_hamiltonian(n, heis, qterms)
    assert not np.iscomplexobj(H0.data)
    assert np.abs(H0.toarray() - _dense_h(n, heis, qterms).real).max() < 1e-13


def test_twist_phase_convention():
    """<i up, j down| H |i down, j up> = (J/2) e^{+i theta} (bit i = 1 means site i up)."""
    J, theta = 1.7, 0.3
    H = build_hamiltonian(2, [(J, 0, 1)], twist={(0, 1): theta}).toarray()
    assert H[0b01, 0b10] == pytest.approx(0.5 * J * np.exp(1j * theta), abs=1e-15)
    H2 = build_hamiltonian(2, [(J, 0, 1)], twist={(1, 0): -theta}).toarray()
    assert np.abs(H - H2).max() < 1e-15


# ----------------------------------------------------------------------------- closed-form spectra
def test_dimer_thermodynamics_closed_form():
    """Singlet -3J/4, triplet +J/4 (handbook): energy, specific heat and uniform susceptibility."""
    J = 1.3
    spec = ExactSpectrum(build_hamiltonian(2, [(J, 0, 1)]), 2)
    assert np.allclose(spec.eigenvalues(), [-0.75 * J, 0.25 * J, 0.25 * J, 0.25 * J], atol=1e-14)
    for beta in (0.1, 1.0, 7.0):
        ws, wt = np.exp(0.75 * beta * J), 3 * np.exp(-0.25 * beta * J)
        Z = ws + wt
        e = (-0.75 * J * ws + 0.25 * J * wt) / Z
        e2 = ((0.75 * J) ** 2 * ws + (0.25 * J) ** 2 * wt) / Z
        assert spec.energy_per_site(beta) == pytest.approx(e / 2, rel=1e-12)
        assert spec.specific_heat_per_site(beta) == pytest.approx(beta**2 * (e2 - e * e) / 2, rel=1e-10)
        chi = beta * (2 * np.exp(-0.25 * beta * J) / Z) / 2  # m = +-1 triplets
        assert spec.chi_uniform(beta) == pytest.approx(chi, rel=1e-12)
        assert spec.free_energy(beta) == pytest.approx(-np.log(Z) / beta, rel=1e-12)


@pytest.mark.parametrize("with_translations", [False, True])
def test_four_site_ring_levels(with_translations):
    """H = (J/2)(S^2 - S_A^2 - S_B^2), A = {0,2}, B = {1,3}: levels -2J (x1), -J (x3), 0 (x7), +J (x5)."""
    J = 0.9
    grp = chain_translations(4) if with_translations else None
    spec = ExactSpectrum(build_hamiltonian(4, _ring(4, J)), 4, translations=grp)
    expected = np.array([-2.0] + [-1.0] * 3 + [0.0] * 7 + [1.0] * 5) * J
    assert np.allclose(spec.eigenvalues(), expected, atol=1e-13)
    assert spec.ground_state_energy() == pytest.approx(-2 * J, abs=1e-13)


def test_chain16_ground_state():
    """L = 16 periodic chain: E0/N = -0.4463935 (from memory), below the infinite-chain value 1/4 - ln 2
    (L. Hulthen, Ark. Mat. Astron. Fys. 26A (1938)), and within 1e-4 of the conformal finite-size form
    1/4 - ln 2 - pi^2/(12 L^2) (c = 1, v = pi/2; I. Affleck, PRL 56, 746 (1986) and H. W. J. Bloete,
    J. L. Cardy, M. P. Nightingale, PRL 56, 742 (1986), from memory; the logarithmic corrections are
    smaller than the tolerance)."""
    L = 16
    spec = ExactSpectrum(build_hamiltonian(L, _ring(L)), L, translations=chain_translations(L), vectors=False)
    e0 = spec.ground_state_energy() / L
    assert e0 == pytest.approx(-0.4463935, abs=1e-6)
    assert e0 < 0.25 - np.log(2)
    assert abs(e0 - (0.25 - np.log(2) - np.pi**2 / (12 * L * L))) < 1e-4


@pytest.fixture(scope="module")
def square4x4():
    xb, yb = square_bonds(4, 4)
    H = build_hamiltonian(16, [(1.0, i, j) for i, j in xb + yb])
    return H, ExactSpectrum(H, 16, translations=square_translations(4, 4), vectors=False)


def test_square4x4_ground_state(square4x4):
    """4x4 periodic Heisenberg E0/N = -0.7017802 (from memory; H. J. Schulz, T. A. L. Ziman and
    D. Poilblanc, J. Phys. I France 6, 675 (1996)); also Lanczos (scipy eigsh) on the full space."""
    H, spec = square4x4
    assert spec.ground_state_energy() / 16 == pytest.approx(-0.7017802, abs=1e-6)
    lanczos = spla.eigsh(H, k=1, which="SA", tol=1e-12, v0=np.ones(H.shape[0]))[0][0]
    assert spec.ground_state_energy() == pytest.approx(lanczos, abs=1e-9)


# ----------------------------------------------------------------------------- symmetry blocks
def _jq2_3x4(twist=None):
    xb, yb = square_bonds(3, 4)
    heis = [(1.0, i, j) for i, j in xb + yb]
    qterms = [(1.5, b) for b in q2_plaquette_pairs(3, 4)]
    return build_hamiltonian(12, heis, qterms, twist=twist), xb


def test_momentum_blocks_match_sz_blocks_and_dense():
    H, _ = _jq2_3x4()
    plain = ExactSpectrum(H, 12, spin_flip=False, vectors=False)
    full = ExactSpectrum(H, 12, translations=square_translations(3, 4), vectors=False)
    assert np.abs(full.eigenvalues() - plain.eigenvalues()).max() < 1e-11
    blocks = full.block_eigenvalues()
    assert len(blocks) == 13 * 12 - 2 * 11  # |S^z| = 6 sectors hold only k = 0
    assert sum(e.size for e in blocks.values()) == 4096
    # dense diagonalization of the full space for a 10-site chain with a twist (complex H)
    H10 = build_hamiltonian(10, _ring(10), twist={(9, 0): 0.4})
    dense = sla.eigvalsh(H10.toarray())
    nosym = ExactSpectrum(H10, 10, sz_sectors=False, spin_flip=False, vectors=False)
    assert np.abs(nosym.eigenvalues() - dense).max() < 1e-11
    assert np.abs(ExactSpectrum(H10, 10, vectors=False).eigenvalues() - dense).max() < 1e-11


def test_twisted_and_odd_and_bilayer_blocks():
    tw = {b: 0.37 for b in square_bonds(3, 4)[0]}  # uniform twist along x keeps translation symmetry
    Ht, _ = _jq2_3x4(twist=tw)
    a = ExactSpectrum(Ht, 12, translations=square_translations(3, 4), vectors=False).eigenvalues()
    b = ExactSpectrum(Ht, 12, spin_flip=False, vectors=False).eigenvalues()
    assert np.abs(a - b).max() < 1e-11
    # J-Q3 on 3x3 (odd N: the flip maps S^z = m onto -m)
    xb, yb = square_bonds(3, 3)
    H9 = build_hamiltonian(9, [(0.5, i, j) for i, j in xb + yb], [(1.0, c) for c in q3_columns(3, 3)])
    a = ExactSpectrum(H9, 9, translations=square_translations(3, 3)).eigenvalues()
    assert np.abs(a - sla.eigvalsh(H9.toarray())).max() < 1e-11
    # bilayer 2 x (3x2) with layer exchange
    xb, yb, rungs = bilayer_bonds(3, 2)
    Hb = build_hamiltonian(12, [(1.0, i, j) for i, j in xb + yb] + [(1.7, i, j) for i, j in rungs])
    a = ExactSpectrum(Hb, 12, translations=bilayer_translations(3, 2, layer_swap=True)).eigenvalues()
    b = ExactSpectrum(Hb, 12, spin_flip=False, vectors=False).eigenvalues()
    assert np.abs(a - b).max() < 1e-11


def test_diagonal_averages_with_and_without_momentum():
    H, xb = _jq2_3x4()
    full = ExactSpectrum(H, 12, translations=square_translations(3, 4))
    plain = ExactSpectrum(H, 12, spin_flip=False)
    rng = np.random.default_rng(5)
    obs = np.stack([rng.normal(size=4096), sz_diagonal(12, staggered_signs_square(3, 4)) ** 2])
    betas = np.array([0.3, 2.0])
    assert np.abs(full.expect_diag(betas, obs) - plain.expect_diag(betas, obs)).max() < 1e-11
    assert full.expect_diag(1.0, np.ones(4096)) == pytest.approx(1.0, rel=1e-13)
    mz2 = sz_diagonal(12) ** 2
    assert full.expect_diag(1.3, mz2) * 1.3 / 12 == pytest.approx(full.chi_uniform(1.3), rel=1e-11)
    H8 = build_hamiltonian(8, _ring(8))
    nos = ExactSpectrum(H8, 8, sz_sectors=False, spin_flip=False)
    sym = ExactSpectrum(H8, 8, translations=chain_translations(8))
    assert nos.chi_uniform(1.3) == pytest.approx(sym.chi_uniform(1.3), rel=1e-11)
    ms2 = sz_diagonal(8, staggered_signs_chain(8)) ** 2
    assert nos.expect_diag(0.9, ms2) == pytest.approx(sym.expect_diag(0.9, ms2), rel=1e-11)


_COMBOS = [dict(sz_sectors=False), dict(sz_sectors=False, translations=chain_translations(8)),
           dict(translations=chain_translations(8)), dict(), dict(spin_flip=False),
           dict(translations=chain_translations(8), spin_flip=False)]


@pytest.mark.parametrize("kw", _COMBOS)
def test_every_symmetry_combination_matches_dense(kw):
    """8-site J-Q ring: spectra, diagonal averages, Kubo integrals and twist stiffness for every
    combination of S^z sectors, translations and spin flip against dense scipy diagonalization of the
    full space (sz_sectors=False, spin_flip=False)."""
    L = 8
    qterms = [(0.7, [(i, (i + 1) % L), ((i + 4) % L, (i + 5) % L)]) for i in range(L)]

    def build(phi):
        return build_hamiltonian(L, _ring(L), qterms, twist={b: phi for b in chain_bonds(L)})

    H = build_hamiltonian(L, _ring(L), qterms)
    ref = ExactSpectrum(H, L, sz_sectors=False, spin_flip=False)
    assert np.abs(ref.eigenvalues() - sla.eigvalsh(H.toarray())).max() < 1e-12
    spec = ExactSpectrum(H, L, **kw)
    assert np.abs(spec.eigenvalues() - ref.eigenvalues()).max() < 1e-12
    ms = sz_diagonal(L, staggered_signs_chain(L))
    r = np.random.default_rng(1).normal(size=1 << L)
    for beta in (0.4, 3.0):
        assert spec.expect_diag(beta, r) == pytest.approx(ref.expect_diag(beta, r), rel=1e-10, abs=1e-13)
        assert spec.kubo_diag(beta, ms) == pytest.approx(ref.kubo_diag(beta, ms), rel=1e-11)
        assert spec.kubo_diag(beta, r) == pytest.approx(ref.kubo_diag(beta, r), rel=1e-10)
        assert spec.chi_uniform(beta) == pytest.approx(ref.chi_uniform(beta), rel=1e-11)
    rho = spec.twist_stiffness(np.array([0.4, 3.0]), build)
    assert np.allclose(rho, ref.twist_stiffness(np.array([0.4, 3.0]), build), rtol=1e-10, atol=0)
    fd_kw = {k: v for k, v in kw.items() if k != "spin_flip"}
    fd = stiffness_by_twist(build, L, np.array([0.4, 3.0]), **fd_kw)
    assert np.allclose(fd, rho, rtol=1e-7, atol=2e-9)  # finite-difference round-off ~1e-9 absolute


def test_heisenberg_zz_is_one_third_of_energy():
    """SU(2) invariance: <sum_b J S^z_i S^z_j> = <H>/3 for a Heisenberg model."""
    xb, yb = square_bonds(3, 4)
    heis = [(1.0, i, j) for i, j in xb + yb]
    spec = ExactSpectrum(build_hamiltonian(12, heis), 12, translations=square_translations(3, 4))
    zz = sum(J * sz_diagonal(12, np.eye(12)[i]) * sz_diagonal(12, np.eye(12)[j]) for J, i, j in heis)
    for beta in (0.5, 3.0):
        assert spec.expect_diag(beta, zz) / 12 == pytest.approx(spec.energy_per_site(beta) / 3, rel=1e-11)


# ----------------------------------------------------------------------------- high temperature
def _check_high_t(spec, J, nb_per_site):
    for beta in (1e-3, 1e-2):
        series = -beta * 3 / 16 * J**2 * nb_per_site - 0.5 * beta**2 * 3 / 32 * J**3 * nb_per_site
        assert spec.energy_per_site(beta) == pytest.approx(series, rel=5 * beta**2)
        assert spec.specific_heat_per_site(beta) == pytest.approx(beta**2 * 3 / 16 * J**2 * nb_per_site,
                                                                  rel=5 * beta)


def test_high_temperature_expansion(square4x4):
    """Heisenberg with N_b bonds and no triangles (handbook traces of spin operators):
    Tr(H^2)/2^N = (3/16) J^2 N_b and Tr(H^3)/2^N = -(3/32) J^3 N_b, hence
    <H>/N = -beta Tr(H^2)/(2^N N) + (beta^2/2) Tr(H^3)/(2^N N) + O(beta^3),
    C/N = beta^2 Tr(H^2)/(2^N N) + O(beta^3).
    Q-only: Tr(P)/4 = 1/4 per singlet projector, so <H>/N at beta = 0 is -Q (2N) (1/16) / N = -Q/8."""
    _check_high_t(square4x4[1], 1.0, 2.0)
    J = 1.1
    chain = ExactSpectrum(build_hamiltonian(12, _ring(12, J)), 12, translations=chain_translations(12),
                          vectors=False)
    _check_high_t(chain, J, 1.0)
    Q = 0.8
    hq = build_hamiltonian(12, projector_products=[(Q, b) for b in q2_plaquette_pairs(3, 4)])
    assert ExactSpectrum(hq, 12, vectors=False).energy_per_site(0.0) == pytest.approx(-Q / 8, rel=1e-13)


# ----------------------------------------------------------------------------- stiffness
def test_stiffness_open_chain_is_zero():
    """A twist on an open chain is a gauge transformation: the spectrum, hence F, does not depend on it."""
    bonds = [(i, i + 1) for i in range(5)]
    build = lambda phi: build_hamiltonian(6, [(1.0, i, j) for i, j in bonds], twist={b: phi for b in bonds})  # noqa: E731
    assert abs(stiffness_by_twist(build, 6, 2.0)) < 1e-9


def _perturbative_stiffness(n, bonds, J, beta):
    """(1/N) d^2F/dphi^2 = (1/N)[<H''> - (1/Z) sum_mn |<m|H'|n>|^2 K(E_m, E_n)] (second-order perturbation
    theory of F), with H' and H'' of the twisted Heisenberg ring taken analytically in the dense basis."""
    H = sum(J * _dot(n, i, j) for i, j in bonds)
    H1 = sum(J * 0.5j * (_op(n, {i: _SP, j: _SM}) - _op(n, {i: _SM, j: _SP})) for i, j in bonds)
    H2 = sum(-J * 0.5 * (_op(n, {i: _SP, j: _SM}) + _op(n, {i: _SM, j: _SP})) for i, j in bonds)
    e, v = np.linalg.eigh(H)
    e = e - e.min()
    w = np.exp(-beta * e)
    Z = w.sum()
    h1 = v.conj().T @ H1 @ v
    h2 = np.real(np.diag(v.conj().T @ H2 @ v))
    kub = (np.abs(h1) ** 2 * kubo_kernel(e[:, None], e[None, :], beta)).sum()
    return float((w @ h2 - kub) / Z / n)


@pytest.mark.parametrize("L,beta", [(4, 0.7), (4, 5.0), (6, 2.0)])
def test_stiffness_ring_vs_perturbation_theory(L, beta):
    J = 1.0
    bonds = chain_bonds(L)

    def build(phi):
        return build_hamiltonian(L, _ring(L, J), twist={b: phi for b in bonds})

    rho = stiffness_by_twist(build, L, beta, translations=chain_translations(L))
    ref = _perturbative_stiffness(L, bonds, J, beta)
    assert rho == pytest.approx(ref, rel=1e-7, abs=2e-9)  # finite-difference truncation and round-off
    spec = ExactSpectrum(build(0.0), L, translations=chain_translations(L))
    assert spec.twist_stiffness(beta, build) == pytest.approx(ref, rel=1e-11, abs=1e-13)
    # dense free energies of the Kronecker construction, plain second difference with a small step
    h = 1e-3
    F = [_free_energy_dense(_dense_h(L, _ring(L, J), (), {b: m * h for b in bonds}), beta)
         for m in (-1, 0, 1)]
    dense = (F[0] - 2 * F[1] + F[2]) / (h * h) / L
    assert rho == pytest.approx(dense, rel=1e-5)


def test_stiffness_jq3_finite_difference_vs_perturbation_theory():
    xb, yb = square_bonds(3, 3)
    heis = [(1.0, i, j) for i, j in xb + yb]
    qterms = [(1.0, c) for c in q3_columns(3, 3)]

    def build(phi):
        return build_hamiltonian(9, heis, qterms, twist={b: phi for b in yb})

    betas = np.array([0.5, 1.5])
    a = stiffness_by_twist(build, 9, betas, translations=square_translations(3, 3))
    b = stiffness_by_twist(build, 9, betas, even=False, sz_sectors=False)
    assert np.all(np.abs(a) > 0.1)  # frustrated 3x3 cluster: the twist curvature of F is negative here
    assert np.allclose(a, b, rtol=1e-7, atol=0)
    for grp, flip in ((square_translations(3, 3), True), (None, False)):
        spec = ExactSpectrum(build(0.0), 9, translations=grp, spin_flip=flip)
        assert np.allclose(spec.twist_stiffness(betas, build), a, rtol=1e-7, atol=0)


# ----------------------------------------------------------------------------- Kubo susceptibility
def test_kubo_matches_field_derivative_of_free_energy():
    """chi_s = -(1/N) d^2F/dh^2 at h = 0 for H - h M_s, M_s = sum_i (-1)^i S^z_i (10-site ring)."""
    L, beta = 10, 1.7
    ms = sz_diagonal(L, staggered_signs_chain(L))
    H0 = build_hamiltonian(L, _ring(L))
    chi = ExactSpectrum(H0, L, translations=chain_translations(L)).kubo_diag(beta, ms)
    chi_plain = ExactSpectrum(H0, L, spin_flip=False).kubo_diag(beta, ms)
    assert chi == pytest.approx(chi_plain, rel=1e-11)
    h = 0.01
    F = {m: ExactSpectrum(build_hamiltonian(L, _ring(L), diagonal=-m * h * ms), L,
                          vectors=False).free_energy(beta) for m in range(-2, 3)}
    d2 = (-F[2] + 16 * F[1] - 30 * F[0] + 16 * F[-1] - F[-2]) / (12 * h * h)
    assert chi == pytest.approx(-d2 / L, rel=1e-7)


def test_kubo_general_observable_and_conserved_limit():
    H, _ = _jq2_3x4()
    full = ExactSpectrum(H, 12, translations=square_translations(3, 4))
    plain = ExactSpectrum(H, 12, spin_flip=False)
    rng = np.random.default_rng(3)
    obs = rng.normal(size=4096)  # all momenta and both flip parities
    betas = np.array([0.4, 2.5])
    a = full.kubo_diag(betas, obs, connected=True)
    b = plain.kubo_diag(betas, obs, connected=True)
    assert np.abs(a - b).max() < 1e-10 * np.abs(b).max()
    # a conserved O: int <O(tau) O> = beta <O^2>
    mz = sz_diagonal(12)
    assert full.kubo_diag(1.2, mz) == pytest.approx(full.chi_uniform(1.2), rel=1e-11)


def test_operator_averages():
    """Sparse-operator averages: <H> equals the energy, the Kubo integral of a conserved operator is
    beta <A^2>, and an operator that is not a single momentum component is rejected."""
    import scipy.sparse as sp

    H, _ = _jq2_3x4()
    spec = ExactSpectrum(H, 12, translations=square_translations(3, 4))
    assert spec.expect_operator(0.7, H) / 12 == pytest.approx(spec.energy_per_site(0.7), rel=1e-12)
    mz = sp.diags(sz_diagonal(12))
    assert spec.kubo_operator(0.7, mz) == pytest.approx(spec.chi_uniform(0.7), rel=1e-11)
    hop = build_hamiltonian(12, [(1.0, 0, 1)])
    with pytest.raises(ValueError, match="single momentum"):
        spec.kubo_operator(0.7, hop)
    plain = ExactSpectrum(H, 12, spin_flip=False)  # a single bond needs no translation symmetry
    zz = sz_diagonal(12, np.eye(12)[0]) * sz_diagonal(12, np.eye(12)[1])
    # SU(2) invariance of the J-Q model: <S_0.S_1> = 3 <S^z_0 S^z_1>
    assert plain.expect_operator(0.7, hop) == pytest.approx(3 * spec.expect_diag(0.7, zz), rel=1e-11)
    assert plain.kubo_operator([0.7], hop, connected=True)[0] > 0


# ----------------------------------------------------------------------------- bad input
def test_bad_input_is_rejected():
    ring = _ring(6)
    with pytest.raises(ValueError, match="does not commute"):
        H = build_hamiltonian(6, [(1.0, 0, 1)] + ring[1:] + [(0.2, 0, 1)])
        ExactSpectrum(H, 6, translations=chain_translations(6))
    grp = chain_translations(6)
    with pytest.raises(ValueError, match="not a representation"):
        ExactSpectrum(build_hamiltonian(6, ring), 6, translations=(grp.perms, grp.chars[:, ::-1]))
    with pytest.raises(ValueError, match="site-disjoint"):
        build_hamiltonian(6, projector_products=[(1.0, [(0, 1), (1, 2)])])
    with pytest.raises(ValueError, match="not in H"):
        build_hamiltonian(6, ring, twist={(0, 3): 0.1})
    with pytest.raises(ValueError, match="conserve"):
        import scipy.sparse as sp

        sx = sp.csr_matrix(_op(6, {0: _SP + _SM}) * 0.5)
        ExactSpectrum(build_hamiltonian(6, ring) + sx, 6)
    with pytest.raises(ValueError, match="vectors=False"):
        ExactSpectrum(build_hamiltonian(6, ring), 6, vectors=False).expect_diag(1.0, np.ones(64))
