"""VBS domain walls: per-direction boundaries, pinned edges, profiles along x, wall energies.

References: the pinned J-Q3 strips of the project's own exact diagonalization
(qmc/validation/exact/strips.py, written independently of models/ and the engine: geometry, pinning rule
and profile definitions are spelled out again there).  The total energies, the wall energies
kappa = (E_wall - E_ref)/L_y and the column profiles of the simulation are compared with its ground state
at a beta where beta times the gap exceeds 15 (excited states then weigh less than 1e-6).  Statistical
comparisons use fixed seeds and 4 standard errors.
"""

from __future__ import annotations

from collections import Counter

import numpy as np
import pytest
from qmc.models import (
    WALLS,
    DomainWall,
    FieldTerm,
    HeisenbergTerm,
    ModelError,
    ProjectorProductTerm,
    ProjectorTerm,
    XXZTerm,
    build_lattice,
    compile_model,
)

from qmc.chain.simulation import Simulation
from qmc.engine.rng import stream_seed
from qmc.validation.exact import strip_ground_state, strip_kappa, strip_terms

JQ3 = [HeisenbergTerm("nn", 1.0), ProjectorProductTerm("column-of-three", 1.0)]
STRIP = ("open", "periodic")


def _terms_of(model) -> Counter:
    """Multiset of (coupling, group kind, sorted bonds) of a compiled model."""
    out = Counter()
    for t in range(model.n_terms):
        bonds = model.term_bonds[model.term_start[t]:model.term_start[t + 1]]
        pairs = tuple(sorted(tuple(sorted(map(int, model.bond_sites[b]))) for b in bonds))
        out[(round(float(model.term_coupling[t]), 12), len(pairs), pairs)] += 1
    return out


def _terms_of_exact(heis, q3) -> Counter:
    out = Counter()
    for J, i, j in heis:
        out[(round(J, 12), 1, (tuple(sorted((i, j))),))] += 1
    for Q, bonds in q3:
        out[(round(Q, 12), 3, tuple(sorted(tuple(sorted(b)) for b in bonds)))] += 1
    return out


# ------------------------------------------------------------------------------------------ lattices


def test_per_direction_boundary_keeps_the_periodic_bonds_only():
    """A 6 x 4 strip open along x: 5 x 4 x-bonds and 6 x 4 y-bonds (common practice, no source)."""
    lat = build_lattice("square", (6, 4), ["open", "periodic"])
    assert lat.boundary == STRIP and lat.periodic == (False, True) and lat.open_boundaries
    assert lat.bonds("x")[0].shape == (20, 2) and lat.bonds("y")[0].shape == (24, 2)
    assert build_lattice("square", (4, 4), ["open", "open"]).boundary == "open"
    assert build_lattice("square", (5, 4), STRIP).n_sites == 20  # odd open length: still bipartite


@pytest.mark.parametrize("boundary, where, text", [
    (["open"], "boundary", "one per direction"),
    (["open", "periodc"], "boundary[1]", "did you mean 'periodic'"),
])
def test_bad_per_direction_boundaries_are_named(boundary, where, text):
    with pytest.raises(ModelError) as err:
        build_lattice("square", (4, 4), boundary)
    assert err.value.where == where and text in err.value.message


def test_profiles_are_measured_on_open_periodic_strips_only():
    assert compile_model(build_lattice("square", (6, 4), STRIP), JQ3).n_columns == 6
    for boundary in ("periodic", "open", ("periodic", "open")):
        assert compile_model(build_lattice("square", (6, 4), boundary), JQ3).site_column is None


# ------------------------------------------------------------------------------------------ pinning


@pytest.mark.parametrize("wall", WALLS)
def test_pinned_couplings_agree_with_the_independent_construction(wall):
    """Every term and coupling of a pinned 6 x 4 J-Q3 strip as the exact-diagonalization code builds it."""
    terms = [HeisenbergTerm("nn", 0.7), ProjectorProductTerm("column-of-three", 1.3)]
    model = compile_model(build_lattice("square", (6, 4), STRIP), terms, wall=DomainWall(wall, 2.5))
    heis, q3 = strip_terms(6, 4, 0.7, 1.3, wall, 2.5)
    assert _terms_of(model) == _terms_of_exact(heis, q3)
    assert model.group_constant[0] == pytest.approx(0.25 * sum(J for J, _, _ in heis), rel=1e-13)
    pinned = sum(1 for c, _ in q3 if c != 1.3) + sum(1 for c, _, _ in heis if c != 0.7)
    assert pinned > 0 and np.all(model.term_coupling > 0)


def test_pinning_needs_an_open_periodic_square_strip():
    for lattice, where in [(build_lattice("square", (6, 4)), "domain_wall.lattice"),
                           (build_lattice("square", (5, 4), STRIP), "domain_wall.size"),
                           (build_lattice("chain", 8, "open"), "domain_wall.lattice")]:
        terms = [HeisenbergTerm("nn", 1.0)]
        with pytest.raises(ModelError) as err:
            compile_model(lattice, terms, wall=DomainWall("pi", 2.0))
        assert err.value.where == where
    with pytest.raises(ModelError, match="finite number > 0"):
        DomainWall("pi", 0.0)
    with pytest.raises(ModelError, match="unknown wall"):
        DomainWall("pi/4", 2.0)


@pytest.mark.parametrize("terms, colours, where", [
    ([ProjectorTerm("nn", 1.0), ProjectorProductTerm("column-of-three", 1.0)], 3, "colors"),
    ([XXZTerm("nn", 1.0, 0.5), ProjectorProductTerm("column-of-three", 1.0)], 2, "terms[0].type"),
    ([HeisenbergTerm("nn", 1.0), FieldTerm(0.1)], 2, "terms[0].type"),
])
def test_walls_and_profiles_are_for_s_half_projector_models(terms, colours, where):
    """SU(N) colours and directed loops (xxz, field) get neither pinned edges nor profiles: the per-column
    energies of the profile block hold the operator counts and constants of singlet projectors only."""
    lattice = build_lattice("square", (6, 4), STRIP)
    assert compile_model(lattice, terms, colours=colours).site_column is None
    with pytest.raises(ModelError) as err:
        compile_model(lattice, terms, colours=colours, wall=DomainWall("pi", 2.0))
    assert err.value.where == where
    assert "domain walls" in err.value.message


# ------------------------------------------------------------------------------------------ against ED

L_X, L_Y, BETA, PIN = 4, 4, 8.0, 2.0
STEPS = dict(warmup_steps=2000, measure_steps=30000, bins=30)


@pytest.fixture(scope="module")
def exact():
    return {w: strip_ground_state(L_X, L_Y, 1.0, 1.0, w, PIN) for w in WALLS}


@pytest.fixture(scope="module")
def simulated():
    """Total energy (mean, error) and the bins of every wall task of the 4 x 4 strip."""
    lattice = build_lattice("square", (L_X, L_Y), STRIP)
    out = {}
    for w in WALLS:
        sim = Simulation(compile_model(lattice, JQ3, wall=DomainWall(w, PIN)), BETA,
                         seed_words=stream_seed(2024, f"walls-ed:{w}"), **STEPS)
        rows = sim.advance(10**9)
        out[w] = dict(zip(sim.bin_names, rows.T, strict=True))
    return out


def _mean_err(series: np.ndarray, scale: float = 1.0) -> tuple[float, float]:
    return scale * float(np.mean(series)), scale * float(np.std(series, ddof=1) / np.sqrt(series.size))


def test_the_exact_ground_state_is_what_the_simulation_sees(exact):
    for w in WALLS:
        assert BETA * exact[w]["gap"] > 15, w


@pytest.mark.parametrize("wall", WALLS)
def test_total_energy_of_every_wall_task(exact, simulated, wall):
    mean, err = _mean_err(simulated[wall]["energy"], L_X * L_Y)
    assert 0 < err < 0.05
    assert abs(mean - exact[wall]["energy"]) < 4 * err


@pytest.mark.parametrize("wall", ["pi", "pi/2"])
def test_wall_energy_per_length(exact, simulated, wall):
    """kappa from the simulated total energies (independent tasks: errors in quadrature) against ED."""
    energies = {w: _mean_err(simulated[w]["energy"], L_X * L_Y) for w in WALLS}
    refs = ["none"] if wall == "pi" else ["none", "none-x"]
    kappa = (energies[wall][0] - np.mean([energies[r][0] for r in refs])) / L_Y
    err = np.sqrt(energies[wall][1] ** 2 + sum(energies[r][1] ** 2 for r in refs) / len(refs) ** 2) / L_Y
    expected = strip_kappa({w: exact[w]["energy"] for w in WALLS}, wall, L_Y)
    assert expected > 0.1  # the wall costs energy: a test that can tell a wall from no wall
    assert abs(kappa - expected) < 4 * err


@pytest.mark.parametrize("wall", WALLS)
def test_column_profiles(exact, simulated, wall):
    """D_x(x), D_y(x) and the energy per site of each column against the exact ground state."""
    bins = simulated[wall]
    for name, prefix in (("D_x", "vbs_profile_x/"), ("D_y", "vbs_profile_y/"), ("e", "energy_profile/")):
        for c in range(L_X):
            mean, err = _mean_err(bins[f"{prefix}{c}"])
            assert err > 0 and abs(mean - exact[wall][name][c]) < 4 * err + 1e-12, (name, c)


def test_the_energy_profile_adds_up_to_the_energy(simulated):
    """sum_c n_c e(c) = <H>: the profile counts the string after the step's updates, the energy during the
    sweep, so the two agree on average (paired bins, 4 standard errors), not bin by bin."""
    for w in WALLS:
        bins = simulated[w]
        diff = sum(bins[f"energy_profile/{c}"] for c in range(L_X)) * L_Y - bins["energy"] * L_X * L_Y
        mean, err = _mean_err(diff)
        assert err > 0 and abs(mean) < 4 * err, w
