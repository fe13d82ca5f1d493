"""Directed loops (qmc.engine.directed): XXZ bonds and uniform or staggered fields.

References outside the engine: the exact diagonalization of qmc.validation.exact.xxz (numpy/scipy only,
its own Hamiltonian and lattices) for the thermal observables; the detailed-balance identities of the
directed-loop equations (Syljuasen and Sandvik, Phys. Rev. E 66, 046701 (2002)) for the exit tables; and
the deterministic-loop path of the same Heisenberg model (delta = 1, h = 0), which must agree in
distribution.  Statistical checks: fixed seeds, |QMC - exact| < 4 error bars, energy error bars < 0.3%.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from qmc.models import (
    FieldTerm,
    HeisenbergTerm,
    ModelError,
    ProjectorProductTerm,
    XXZTerm,
    build_lattice,
    compile_model,
)
from qmc.models.directed import bond_constant, diagonal_weights

from qmc.analysis.binning import error_estimate
from qmc.analysis.derived import derived_estimates
from qmc.chain.simulation import Simulation
from qmc.engine.directed import DirectedKind
from qmc.engine.directed_tables import (
    PROJECTOR_DIAGONAL,
    PROJECTOR_HOP,
    exit_probabilities,
    vertex_weights,
)
from qmc.engine.kinds import kind_record
from qmc.engine.projector import ProjectorKind
from qmc.engine.rng import stream_seed
from qmc.validation.exact import (
    ExactSpectrum,
    build_hamiltonian,
    q2_plaquette_pairs,
    square_bonds,
    square_translations,
    sz_diagonal,
    xxz_hamiltonian,
    xxz_observables,
)

SIGMAS = 4.0


# ----------------------------------------------------------------------------- exit tables
def _groups(w):
    """The directed-loop groups: for each intermediate configuration m, its members m ^ (1 << x)."""
    for m in range(16):
        yield [m ^ (1 << x) for x in range(4)]


def _bounce_total(diagonal, hop):
    w = vertex_weights(diagonal, hop)
    P = exit_probabilities(diagonal, hop)
    return sum(w[c] * P[c, e, e] for c in range(16) for e in range(4) if w[c] > 0)


PARAMS = [(J, d, hi, hj) for J in (1.0, -1.0, 0.4) for d in (-1.5, 0.0, 0.5, 1.0, 2.0, 4.0)
          for hi, hj in ((0.0, 0.0), (0.3, 0.3), (-0.7, 0.2), (2.0, 2.0), (0.25, -0.25))]


@pytest.mark.parametrize("J, delta, hi, hj", PARAMS)
def test_exit_probabilities_obey_the_directed_loop_equations(J, delta, hi, hj):
    """Rows sum to one, probabilities lie in [0, 1], weight x probability is symmetric within each group
    (detailed balance of the loop), and the total bounce weight of a group is its lower bound
    max(0, A - B - C) (the row of the largest member), so no solution bounces less."""
    C = float(bond_constant(J, delta, hi, hj))
    diagonal = diagonal_weights(J, delta, hi, hj, C)
    hop = abs(J) / 2.0
    assert diagonal.min() >= -1e-12
    w = vertex_weights(diagonal, hop)
    P = exit_probabilities(diagonal, hop)
    for c, e in itertools.product(range(16), range(4)):
        if w[c] > 0:
            assert P[c, e].sum() == pytest.approx(1.0, abs=1e-12)
            assert P[c, e].min() >= 0.0 and P[c, e].max() <= 1.0 + 1e-12
            for x in range(4):
                c2 = c ^ (1 << e) ^ (1 << x)
                assert w[c] * P[c, e, x] == pytest.approx(w[c2] * P[c2, x, e], abs=1e-12)
    for members in _groups(w):
        a = np.sort(w[members])[::-1]
        assert np.count_nonzero(a) <= 3
        bounce = sum(w[c] * P[c, x, x] for x, c in enumerate(members) if w[c] > 0)
        assert bounce == pytest.approx(max(0.0, a[0] - a[1] - a[2]), abs=1e-12)


@pytest.mark.parametrize("J, delta, hi, hj", PARAMS)
def test_the_constant_leaves_no_bounce_that_a_larger_one_would_remove(J, delta, hi, hj):
    """C_b is the smallest constant with non-negative weights (some weight is zero at eps = 0) or the
    smallest beyond which the bounce weight no longer falls (models.directed docstring)."""
    C = float(bond_constant(J, delta, hi, hj))
    hop = abs(J) / 2.0
    at = _bounce_total(diagonal_weights(J, delta, hi, hj, C), hop)
    assert at == pytest.approx(_bounce_total(diagonal_weights(J, delta, hi, hj, C + 3.0), hop), abs=1e-12)
    below = C - 1e-3
    w_below = diagonal_weights(J, delta, hi, hj, below)
    assert w_below.min() < 0 or _bounce_total(w_below, hop) > at + 1e-6


def test_heisenberg_and_projector_vertices_have_deterministic_loops():
    """delta = 1, h = 0 at its constant J/4, and the singlet projector: the loop always leaves at l ^ 1."""
    for diagonal, hop in ((diagonal_weights(1.0, 1.0, 0.0, 0.0, bond_constant(1.0, 1.0, 0.0, 0.0)), 0.5),
                          (PROJECTOR_DIAGONAL, PROJECTOR_HOP)):
        assert float(np.max(diagonal)) == pytest.approx(0.5)
        w = vertex_weights(diagonal, hop)
        P = exit_probabilities(diagonal, hop)
        for c, e in itertools.product(range(16), range(4)):
            if w[c] > 0:
                assert P[c, e, e ^ 1] == 1.0


# ----------------------------------------------------------------------------- against exact diagonalization
def _run(lattice, terms, beta, steps, seed, bins=25, warmup=2000):
    model = compile_model(lattice, terms)
    sim = Simulation(model, beta, warmup_steps=warmup, measure_steps=steps, bins=bins,
                     seed_words=stream_seed(seed, "directed"))
    rows = sim.advance(warmup + steps)
    return model, {name: rows[:, k] for k, name in enumerate(sim.bin_names)}


def _estimates(model, bins, beta):
    out = {k: (error_estimate(bins[k]).mean, error_estimate(bins[k]).error)
           for k in ("energy", "magnetization", "m_stag2", "stiffness")}
    d = derived_estimates(bins, model.n_sites, model.linear_size, names=("specific_heat", "chi_uniform"),
                          beta=beta)
    out.update({k: (v.value, v.error) for k, v in d.items()})
    return out


def _compare(qmc, exact, energy_precision=0.003):
    assert qmc["energy"][1] < energy_precision * abs(exact["energy"])
    for name, (value, error) in qmc.items():
        if name == "magnetization" and abs(exact[name]) < 1e-12:
            assert abs(value) < SIGMAS * error + 1e-12, name
            continue
        assert abs(value - exact[name]) < SIGMAS * error, (name, value, error, exact[name])


CHAIN_CASES = {  # name: (J, delta, h, staggered, beta)
    "easy-plane in a field": (1.0, 0.5, 0.6, False, 2.0),
    "easy-axis in a field": (1.0, 2.0, 0.6, False, 2.0),
    "ferromagnetic XY in a field": (-1.0, 0.0, 0.3, False, 2.0),
    "heisenberg in a staggered field": (1.0, 1.0, 0.5, True, 1.5),
    "easy-axis, large field, low T": (1.0, 1.5, 1.7, False, 4.0),
}


UNRESOLVED = {"heisenberg in a staggered field": "stiffness"}
"""Observables a case's run cannot resolve.  In the staggered field the exact stiffness of the 12-site chain
is 2.9e-5: a configuration with a winding number appears a few times in 10^6 steps and stays for about a
hundred steps, so 3e5 steps see zero to two such episodes and the bins' error bar (zero when none is seen)
means nothing.  The other cases test the stiffness; :func:`test_12_site_chain_matches_exact_diagonalization`
checks that the skipped value is indeed below what the run resolves."""


@pytest.mark.parametrize("case", CHAIN_CASES)
def test_12_site_chain_matches_exact_diagonalization(case):
    J, delta, h, staggered, beta = CHAIN_CASES[case]
    model, bins = _run(build_lattice("chain", (12,)), [XXZTerm("nn", J, delta), FieldTerm(h, staggered)],
                       beta, 300000, seed=11)
    exact = xxz_observables("chain", (12,), beta, {"nn": (J, delta)}, h, staggered)
    qmc = _estimates(model, bins, beta)
    if case in UNRESOLVED:
        skipped = UNRESOLVED[case]
        assert abs(exact[skipped]) < 1e-4, (skipped, exact[skipped])
        assert abs(qmc[skipped][0]) < 1e-4, (skipped, qmc[skipped])
        del qmc[skipped]
    _compare(qmc, exact)


SQUARE_CASES = {
    "easy-plane in a field": (1.0, 0.5, 0.8, 2.0),
    "easy-axis in a field": (1.0, 2.0, 1.5, 2.0),
    "ferromagnetic XY in a field": (-1.0, 0.0, 0.3, 2.0),
    "heisenberg near saturation": (1.0, 1.0, 3.5, 3.0),
}


@pytest.mark.slow
@pytest.mark.parametrize("case", SQUARE_CASES)
def test_4x4_square_matches_exact_diagonalization(case):
    """Slow: the 4x4 exact diagonalization takes one to three minutes a point."""
    J, delta, h, beta = SQUARE_CASES[case]
    model, bins = _run(build_lattice("square", (4, 4)), [XXZTerm("nn", J, delta), FieldTerm(h)], beta,
                       60000, seed=12)
    exact = xxz_observables("square", (4, 4), beta, {"nn": (J, delta)}, h)
    _compare(_estimates(model, bins, beta), exact)


def test_term_energies_split_the_field_from_the_bonds():
    """term_energy/field is -h <M>/N and the bond group carries the rest; together the total energy."""
    model, bins = _run(build_lattice("chain", (12,)), [XXZTerm("nn", 1.0, 0.5), FieldTerm(0.6)], 2.0,
                       20000, seed=13)
    assert np.allclose(bins["term_energy/field"], -0.6 * bins["magnetization"])
    assert np.allclose(bins["term_energy/nn"] + bins["term_energy/field"], bins["energy"])


# ----------------------------------------------------------------------------- delta = 1, h = 0
def test_xxz_at_delta_1_agrees_with_the_heisenberg_path():
    """The same model through directed loops and through deterministic loops: every shared observable
    agrees within 4 combined error bars, and so does the variance of the operator count."""
    lat = build_lattice("square", (4, 4))
    _, a = _run(lat, [XXZTerm("nn", 1.0, 1.0)], 1.0, 40000, seed=21)
    _, b = _run(lat, [HeisenbergTerm("nn", 1.0)], 1.0, 40000, seed=22)
    a["chi_uniform"] = 1.0 * 16 * a["m_uniform2"]  # beta N <m^2>; <m> = 0 at h = 0
    a["var_n"], b["var_n"] = (x["n_ops_sq"] - x["n_ops"] ** 2 for x in (a, b))
    for name in ("energy", "n_ops", "var_n", "chi_uniform", "m_stag2", "m_stag4", "chi_stag", "s_q_shifted",
                 "stiffness", "vbs_x2"):
        ea, eb = error_estimate(a[name]), error_estimate(b[name])
        assert abs(ea.mean - eb.mean) < SIGMAS * np.hypot(ea.error, eb.error), name


# ----------------------------------------------------------------------------- chain mechanics
def _field_model():
    return compile_model(build_lattice("square", (4, 4)),
                         [XXZTerm("nn", 1.0, 0.7), ProjectorProductTerm("plaquette-pair", 0.5),
                          FieldTerm(0.4)])


def test_chunked_runs_and_restores_are_bit_identical():
    """The loop count adapts per step during warm-up and freezes when measuring starts, whatever the
    chunks."""
    kw = dict(warmup_steps=300, measure_steps=600, bins=6)

    def sim():
        return Simulation(_field_model(), 1.5, seed_words=stream_seed(4, "chunks"), **kw)

    whole = sim().advance(900)
    s = sim()
    parts = [s.advance(n) for n in (17, 250, 100)]
    state = s.state()
    rest = Simulation.restore(_field_model(), 1.5, state=state, **kw).advance(900)
    assert np.array_equal(np.vstack([*parts, rest]), whole)
    assert state["counters"][1] >= 1 and state["counters"][2] == 1


def test_projector_models_keep_the_projector_kind():
    lat = build_lattice("square", (4, 4))
    assert isinstance(kind_record(compile_model(lat, [HeisenbergTerm("nn", 1.0)])), ProjectorKind)
    assert isinstance(kind_record(_field_model()), DirectedKind)
    fielded = compile_model(lat, [HeisenbergTerm("nn", 1.0), FieldTerm(0.0)])
    assert isinstance(kind_record(fielded), DirectedKind)


# ----------------------------------------------------------------------------- refusals
def test_ferromagnetic_and_antiferromagnetic_hops_on_one_bond_are_refused():
    lat = build_lattice("square", (4, 4))
    with pytest.raises(ModelError, match=r"term 1 \('nn#2'\).*sign problem"):
        compile_model(lat, [XXZTerm("nn", -1.0, 0.0), XXZTerm("nn", 0.5, 1.0)])


def test_ferromagnetic_x_bonds_with_antiferromagnetic_y_bonds_are_sign_free():
    """Every plaquette has two ferromagnetic and two antiferromagnetic hops: a gauge exists."""
    lat = build_lattice("square", (4, 4))
    model = compile_model(lat, [XXZTerm("x", -1.0, 0.3), XXZTerm("y", 1.0, 0.3)])
    assert model.n_terms == 32


def test_a_field_without_bonds_to_carry_it_is_refused():
    lat = build_lattice("square", (4, 4))
    with pytest.raises(ModelError, match=r"term 1 \('field'\): site 0 has a field but no xxz"):
        compile_model(lat, [ProjectorProductTerm("plaquette-pair", 1.0), FieldTerm(0.5)])


@pytest.mark.slow
def test_easy_plane_jq_model_in_a_field_matches_exact_diagonalization():
    """xxz J part (delta = 0.5) with the J-Q2 projector term and a field: projector vertices inside
    directed loops.  Slow: 4x4 exact diagonalization of H_xxz + H_Q (qmc.validation.exact)."""
    J, delta, Q, h, beta = 1.0, 0.5, 1.0, 0.5, 2.0
    xb, yb = square_bonds(4, 4)
    H = (xxz_hamiltonian(16, [(J, delta, i, j) for i, j in xb + yb], h * np.ones(16))
         + build_hamiltonian(16, [], [(Q, pair) for pair in q2_plaquette_pairs(4, 4)]))
    spec = ExactSpectrum(H, 16, translations=square_translations(4, 4))
    m = sz_diagonal(16)
    exact = {"energy": spec.energy_per_site(beta), "magnetization": spec.expect_diag(beta, m) / 16}
    model, bins = _run(build_lattice("square", (4, 4)), [XXZTerm("nn", J, delta),
                       ProjectorProductTerm("plaquette-pair", Q), FieldTerm(h)], beta, 100000, seed=14)
    for name in exact:
        est = error_estimate(bins[name])
        assert abs(est.mean - exact[name]) < SIGMAS * est.error, (name, est.mean, est.error, exact[name])
