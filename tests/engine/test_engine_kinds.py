"""The vertex-kind seam of the engine (qmc.engine.kinds): a model's groups pick the kind, and a second kind
is an addition that the generic kernels run without being edited.

The second kind used here exists only in this test: the "diluted projector" accepts an insertion that the
projector kind allows only with probability a, and the diagonal update draws operators with beta W_tot / a
in place of beta W_tot.  Insertion and removal probabilities then keep the ratio beta w_t / (M - n) of the
SSE weights (the standard fixed-cutoff acceptance rules; common practice, no source), so it samples the same
distribution with other random numbers.  Its energy is compared with exact diagonalization of a 2x2 J-Q2
cluster (qmc.validation.exact) within 4 error bars: if the sweep ignored the kind's insertion hook, the
operator count would double and the energy would miss by far more.  It runs in a subprocess with its own
numba cache directory, so that no cache entry of the package refers to a class defined in a test.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap

import numpy as np
import pytest
from qmc.models import (
    CompiledModel,
    HeisenbergTerm,
    ProjectorProductTerm,
    ProjectorTerm,
    build_lattice,
    compile_model,
)
from qmc.models.compiled import KIND_PROJECTOR, VERTEX_KINDS

from qmc.engine.kinds import kind_record
from qmc.engine.projector import ProjectorKind
from qmc.validation.exact import build_hamiltonian, q2_plaquette_pairs, square_bonds

J, Q, BETA = 0.5, 1.5, 1.0

_SCRIPT = textwrap.dedent('''
    import json, sys
    from typing import NamedTuple

    import numpy as np
    from numba import njit

    from qmc.chain.simulation import Simulation
    from qmc.engine import kinds, projector, slots
    from qmc.engine.records import Terms, build
    from qmc.engine.rng import next_double, stream_seed
    from qmc.engine.steps import run_steps
    from qmc.models import HeisenbergTerm, ProjectorProductTerm, build_lattice, compile_model


    class DilutedKind(NamedTuple):
        accept: float


    @njit(inline="always")
    def insertion_allowed(kind, table, t, k, spins, s0, s1, s2, s3):
        allowed, s0, s1, s2, s3 = projector.insertion_allowed(kind, table, t, k, spins, s0, s1, s2, s3)
        u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
        return allowed and u < kind.accept, s0, s1, s2, s3


    loop_update = projector.loop_update  # the loops of the projector kind, reused as they are
    for _hook in kinds.HOOKS:  # and every other hook of the projector kind
        globals().setdefault(_hook, getattr(projector, _hook))
    kinds.register_kind(DilutedKind, sys.modules[__name__], frozenset())

    J, Q, BETA, accept, n_bins, per_bin = (float(x) for x in sys.argv[1:7])
    model = compile_model(build_lattice("square", (2, 2)),
                          [HeisenbergTerm("nn", J), ProjectorProductTerm("plaquette-pair", Q)])
    out = {}
    for name, a in (("projector", 1.0), ("diluted", accept)):
        sim = Simulation(model, BETA, warmup_steps=2000, measure_steps=1, bins=1,
                         seed_words=stream_seed(5, "kinds"))
        sim.advance(2000)  # warm-up with the projector kind (grows the cutoff)
        kind = sim.kind if name == "projector" else DilutedKind(a)
        terms = build(Terms, **{**sim.terms._asdict(), "beta_wtot": sim.terms.beta_wtot / a})
        n_mean = []
        for _ in range(int(n_bins)):
            sim.acc[:] = 0.0
            run_steps(int(per_bin), True, False, False, sim.chain, terms, kind, sim.vertices, sim.probes,
                      sim.tallies)
            n_mean.append(sim.acc[slots.A_NOPS] / per_bin)
        energy = (model.energy_constant - np.array(n_mean) / BETA) / model.n_sites
        out[name] = energy.tolist()
    out["types"] = [str(sig[6]) for sig in run_steps.signatures]
    print(json.dumps(out))
''')


def _exact_energy_per_site() -> float:
    heis = [(J, i, j) for bonds in square_bonds(2, 2) for i, j in bonds]
    H = build_hamiltonian(4, heisenberg=heis, projector_products=[(Q, b) for b in q2_plaquette_pairs(2, 2)])
    e = np.linalg.eigvalsh(H.toarray().real)
    w = np.exp(-BETA * (e - e.min()))
    return float(np.sum(e * w) / np.sum(w) / 4)


def test_a_second_kind_runs_through_the_same_kernels(tmp_path):
    script = tmp_path / "diluted_kind.py"
    script.write_text(_SCRIPT)
    env = {**os.environ, "NUMBA_CACHE_DIR": str(tmp_path / "numba-cache")}
    done = subprocess.run([sys.executable, str(script), str(J), str(Q), str(BETA), "0.5", "40", "2000"],
                          capture_output=True, text=True, env=env, timeout=600)
    assert done.returncode == 0, done.stderr[-3000:]
    out = json.loads(done.stdout.strip().splitlines()[-1])
    assert any("DilutedKind" in t for t in out["types"]) and any("ProjectorKind" in t for t in out["types"])
    exact = _exact_energy_per_site()
    for name in ("projector", "diluted"):
        e = np.array(out[name])
        err = e.std(ddof=1) / np.sqrt(e.size)
        assert abs(e.mean() - exact) < 4 * err, f"{name}: {e.mean():.5f} +- {err:.5f}, exact {exact:.5f}"
        assert err < 0.01 * abs(exact)  # the comparison has power
    assert out["projector"] != out["diluted"]  # other random numbers: the diluted kind really ran


def test_every_group_of_the_built_models_is_a_projector_group():
    m = compile_model(build_lattice("square", (4, 4)),
                      [HeisenbergTerm("nn", 1.0), ProjectorProductTerm("plaquette-pair", 1.0)])
    assert VERTEX_KINDS[KIND_PROJECTOR] == "projector"
    assert m.group_kind.dtype == np.int8 and m.group_kind.tolist() == [KIND_PROJECTOR, KIND_PROJECTOR]
    assert isinstance(kind_record(m), ProjectorKind)


def test_stored_models_without_kinds_read_as_projector_and_unknown_codes_are_refused():
    m = compile_model(build_lattice("chain", (6,)), [HeisenbergTerm("nn", 1.0)])
    arrays = m.to_arrays()
    assert arrays["group_kind"].tolist() == [KIND_PROJECTOR]
    del arrays["group_kind"]  # a model stored before group kinds existed
    assert CompiledModel.from_arrays(arrays).group_kind.tolist() == [KIND_PROJECTOR]
    arrays["group_kind"] = np.array([len(VERTEX_KINDS)], dtype=np.int8)
    with pytest.raises(ValueError, match="group_kind"):
        CompiledModel.from_arrays(arrays)


def test_hooks_called_from_python_run_the_kind_s_own_function():
    """Outside a kernel a hook is the kind's function called through numba: the S = 1/2 values of
    qmc.engine.projector (2 S^z, 4 S^z S^z, the spin loop moments 1/4 and 1/16 and the label in a mark
    ~(2 b + f)), and the colour kind's at N = 3 (common practice, no source: a dispatch check)."""
    from qmc.engine import kinds

    spins = np.array([1, -1, 1], dtype=np.int8)
    k = ProjectorKind()
    assert kinds.site_value(k, spins, 1) == -1 and kinds.bond_value(k, spins, 0, 2) == 1
    assert kinds.loop_moments(k) == (0.25, 0.0625)
    assert kinds.loop_label(k, np.int32(~(2 * 7 + 1))) == 7
    lattice = build_lattice("chain", (4,))
    colour = kind_record(compile_model(lattice, [ProjectorTerm("nn", 1.0)], colours=3))
    assert type(colour) is not ProjectorKind
    assert kinds.loop_moments(colour) == pytest.approx((2 / 9, 2 * 3 / 81))
    assert kinds.bond_value(colour, np.array([0, 0, 1, 2], dtype=np.int8), 0, 1) == pytest.approx(2 / 3 - 2)
