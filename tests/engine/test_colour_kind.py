"""The SU(N) colour kind at N = 2 and its plumbing.

- At N = 2 the colour kind samples the S = 1/2 model: every bin of a run with the colour kind forced onto a
  Heisenberg J-Q2 model equals, in distribution, the bins of the projector kind's fast path (means within 4
  combined error bars for every observable), and both match the exact S = 1/2 values
  (qmc/validation/exact/clusters.py).  The estimators' N = 2 reductions are stated in qmc/engine/colour.py.
- The SU(N) exact reference (qmc/validation/exact/colours.py) reproduces the S = 1/2 one at N = 2.
- A chain of the colour kind continues bit-identically from a checkpoint (pending loop colours folded into
  the operator string and Chain.above) and through a configuration swap; models refuse bad input.
- Replica exchange along Q of an SU(3) J-Q chain run from a configuration file (`qmc run`) gives the exact
  energies of both couplings (qmc/validation/exact/colours.py) within 4 error bars.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from click.testing import CliRunner
from qmc.models import (
    HeisenbergTerm,
    ModelError,
    ProjectorProductTerm,
    ProjectorTerm,
    build_lattice,
    compile_model,
)
from qmc.models.compiled import KIND_COLOUR, KIND_PROJECTOR

from qmc.chain.simulation import Simulation
from qmc.cli.main import cli
from qmc.engine.colour import ColourKind
from qmc.engine.projector import ProjectorKind
from qmc.engine.rng import stream_seed
from qmc.storage.task_file import read_task
from qmc.validation.exact import chain_bonds, cluster_observables, q2_plaquette_pairs, square_bonds
from qmc.validation.exact.colours import ColourSpectrum, chain_pair_products

J, Q, BETA = 1.0, 0.5, 1.0


def _jq2(colour_kind: bool):
    model = compile_model(build_lattice("square", (4, 2)),
                          [HeisenbergTerm("nn", J), ProjectorProductTerm("plaquette-pair", Q)])
    if colour_kind:  # the same Hamiltonian (constants included), run by the colour kind with N = 2
        model = dataclasses.replace(model, group_kind=np.full(2, KIND_COLOUR, dtype=np.int8))
    return model


def _bins(model, steps, key):
    sim = Simulation(model, BETA, warmup_steps=5000, measure_steps=steps, bins=100,
                     seed_words=stream_seed(11, key))
    return sim, {name: col for name, col in zip(sim.bin_names, sim.advance(10**12).T, strict=True)}


def test_colour_kind_at_two_colours_equals_the_projector_path_in_distribution():
    sim_p, proj = _bins(_jq2(False), 400_000, "n2-projector")
    sim_c, col = _bins(_jq2(True), 400_000, "n2-colour")
    assert isinstance(sim_p.kind, ProjectorKind) and isinstance(sim_c.kind, ColourKind)
    assert sim_p.bin_names == sim_c.bin_names
    exact = cluster_observables("square", (4, 2), BETA, J=J, Q=Q)
    bad = {}
    for name in sim_p.bin_names:
        a, b = proj[name], col[name]
        ma, mb = a.mean(), b.mean()
        err = np.hypot(a.std(ddof=1), b.std(ddof=1)) / np.sqrt(a.size)
        if abs(ma - mb) > 4 * err + 1e-12:
            bad[name] = (ma, mb, err)
        if name in exact and name != "stiffness":  # the cluster's stiffness averages x and y
            for mean, bins in ((ma, a), (mb, b)):
                e = bins.std(ddof=1) / np.sqrt(bins.size)
                if abs(mean - exact[name]) > 4 * e + 1e-12:
                    bad[f"{name} vs exact"] = (mean, exact[name], e)
    assert not bad, bad
    e = col["energy"]
    assert e.std(ddof=1) / np.sqrt(e.size) < 3e-3 * abs(e.mean())  # the comparison has power
    assert not np.array_equal(proj["energy"], col["energy"])  # the colour kind really ran


def test_colour_exact_reference_reproduces_the_spin_reference_at_two_colours():
    L = 8
    bonds = chain_bonds(L)
    sp = ColourSpectrum(2, [1 - 2 * (x % 2) for x in range(L)], [(1.0, [b]) for b in bonds],
                        constant=0.25 * L, displacement={b: 1.0 for b in bonds})
    ref = cluster_observables("chain", (L,), 2.0)
    assert sp.energy(2.0) == pytest.approx(ref["energy"], abs=1e-12)
    assert sp.specific_heat(2.0) == pytest.approx(ref["specific_heat"], abs=1e-10)
    assert sp.diagonal(2.0, sp.staggered_order() ** 2) == pytest.approx(ref["m_stag2"], abs=1e-12)
    assert 2.0 * sp.diagonal(2.0, sp.colour_charge() ** 2) / L == pytest.approx(ref["chi_uniform"], abs=1e-12)
    assert sp.stiffness(2.0) == pytest.approx(ref["stiffness"], rel=1e-5)
    xb, yb = square_bonds(4, 2)
    products = [(J, [b]) for b in xb + yb] + [(Q, p) for p in q2_plaquette_pairs(4, 2)]
    sq = ColourSpectrum(2, [1 - 2 * ((x + y) % 2) for y in range(2) for x in range(4)], products,
                        constant=0.25 * J * len(xb + yb))
    ref = cluster_observables("square", (4, 2), BETA, J=J, Q=Q)
    assert sq.energy(BETA) == pytest.approx(ref["energy"], abs=1e-12)
    assert sq.diagonal(BETA, sq.staggered_order() ** 2) == pytest.approx(ref["m_stag2"], abs=1e-12)


def _su3():
    return compile_model(build_lattice("square", 4),
                         [ProjectorTerm("nn", 0.3), ProjectorProductTerm("plaquette-pair", 1.0)], colours=3)


KW = dict(warmup_steps=300, measure_steps=900, bins=9)


def test_colour_chain_restores_bit_identically_and_swaps_configurations():
    whole = Simulation(_su3(), 3.0, seed_words=stream_seed(4, "su3-restore"), **KW).advance(2000)
    sim = Simulation(_su3(), 3.0, seed_words=stream_seed(4, "su3-restore"), **KW)
    first = sim.advance(150)  # inside the warm-up: the cutoff still grows after the restore
    first = np.vstack([first, sim.advance(500)])
    state = sim.state()
    assert state["above"].shape == state["ops"].shape and np.any(state["above"] != 0)
    rest = Simulation.restore(_su3(), 3.0, state=state, **KW).advance(2000)
    assert np.array_equal(np.vstack([first, rest]), whole)
    # a configuration taken out and put back changes nothing
    sim = Simulation(_su3(), 3.0, seed_words=stream_seed(4, "su3-restore"), **KW)
    sim.advance(650)
    sim.set_configuration(sim.configuration())
    assert np.array_equal(np.vstack([first, sim.advance(2000)]), whole)
    with pytest.raises(ValueError, match="does not fit"):
        sim.set_configuration({**sim.configuration(), "above": np.zeros(3, dtype=np.int32)})


def test_colour_models_compile_and_refuse_bad_input():
    lat = build_lattice("chain", 8)
    m = compile_model(lat, [ProjectorTerm("nn", 1.0), ProjectorProductTerm([[[0], [1]], [[2], [3]]], 2.0)],
                      colours=4)
    assert m.n_colours == 4 and m.group_kind.tolist() == [KIND_COLOUR] * 2
    assert np.allclose(m.term_weights, np.where(np.diff(m.term_start) == 1, 1.0 / 4, 2.0 / 16))
    assert m.energy_constant == 0.0 and m.group_names == ("nn", "q2")
    two = compile_model(lat, [ProjectorTerm("nn", 1.0)])
    assert two.n_colours == 2 and two.group_kind.tolist() == [KIND_PROJECTOR]
    with pytest.raises(ModelError) as err:
        compile_model(lat, [HeisenbergTerm("nn", 1.0)], colours=3)
    assert "projector" in err.value.message and err.value.where == "terms[0].type"
    for bad in (1, 101, 2.5, True):
        with pytest.raises(ModelError, match="number of colours"):
            compile_model(lat, [ProjectorTerm("nn", 1.0)], colours=bad)
    with pytest.raises(ModelError, match="J >= 0"):
        compile_model(lat, [ProjectorTerm("nn", -1.0)], colours=3)
    assert type(m).from_arrays(m.to_arrays()).n_colours == 4
    stored = two.to_arrays()
    del stored["n_colours"]  # a model stored before colours existed
    assert type(two).from_arrays(stored).n_colours == 2
    with pytest.raises(ValueError, match="n_colours"):
        dataclasses.replace(two, n_colours=3)  # projector groups need two colours


EXCHANGE = """
[run]
seed = 12
output = "run"
[model]
colors = 3
[lattice]
kind = "chain"
size = [8]
[[terms]]
type = "projector"
bonds = "nn"
coupling = 1.0
[[terms]]
type = "projector-product"
shape = [[[0], [1]], [[2], [3]]]
coupling = "Q"
[scan]
Q = [0.5, 1.0]
beta = 2
[sampling]
warmup_steps = 2000
measure_steps = 150000
bins = 100
[exchange]
along = "Q"
every = 5
"""


def test_exchange_of_su3_configurations_samples_both_couplings(tmp_path):
    (tmp_path / "x.toml").write_text(EXCHANGE)
    result = CliRunner().invoke(cli, ["run", str(tmp_path / "x.toml"), "--quiet"])
    assert result.exit_code == 0, result.output
    bonds = chain_bonds(8)
    for Q in (0.5, 1.0):
        task = read_task(tmp_path / "run" / "tasks" / f"Q{Q:g}_beta2_c0.h5")
        e = task.bins["energy"]
        mean, err = e.mean(), e.std(ddof=1) / np.sqrt(e.size)
        sp = ColourSpectrum(3, [1 - 2 * (x % 2) for x in range(8)],
                            [(1.0, [b]) for b in bonds] + [(Q, p) for p in chain_pair_products(8)])
        exact = sp.energy(2.0)
        assert abs(mean - exact) < 4 * err and err < 0.01 * abs(exact), (Q, mean, err, exact)
