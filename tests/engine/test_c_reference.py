"""The C yardstick of the speed benchmarks (benchmarks/c_reference/sse_ref.c) computes the right thing.

The engine's speed is judged against this C implementation of the same algorithm (benchmarks/c_compare.py),
so it must sample the same physics: on the 4x4 periodic square lattice at beta = 2 its energy per site
agrees with exact diagonalization (qmc/validation/exact, numpy/scipy, independent of both codes) within 4
error bars, for the Heisenberg model and for a J-Q2 point, with the single-tracer loop update and
interleaved tracers taking turns on one chain.  The program is compiled with -DSSE_CHECK, so every sweep
also verifies that the world lines close in imaginary time and that every operator sits on antiparallel
bonds (a loop flipped only in part would break both).  The interleaved tracers must give the very same
Markov chain as the single tracer (fragments are numbered in the order the scan meets them, so the root of
every loop's union-find class is the fragment at its first leg pair and loops draw their flips in the
single tracer's order), also when the fragment ids run out and a single tracer finishes the step: runs
that differ only in the variant print identical estimates.  Skipped when no C
compiler is installed.  Fixed seeds: the C runs are deterministic.
"""

from __future__ import annotations

import json
import shutil
import subprocess
from pathlib import Path

import pytest
from helpers.paths import REPO

from qmc.validation.exact import ExactSpectrum, build_hamiltonian
from qmc.validation.exact.lattices import q2_plaquette_pairs, square_bonds, square_translations

SOURCE = REPO / "benchmarks" / "c_reference" / "sse_ref.c"
CC = shutil.which("cc") or shutil.which("gcc") or shutil.which("clang")
pytestmark = pytest.mark.skipif(CC is None, reason="no C compiler")


@pytest.fixture(scope="module")
def exe(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("cref") / "sse_ref"
    subprocess.run([CC, "-O2", "-std=c99", "-DSSE_CHECK", "-o", str(out), str(SOURCE), "-lm"], check=True,
                   capture_output=True, text=True)
    return out


def run(exe: Path, L: int, beta: float, J: float, Q: float, warmup: int, steps: int, seed: int,
        variants: str, rounds: int = 1) -> dict:
    """One run of the C program (exit status 3 if the SSE_CHECK consistency checks fail)."""
    out = subprocess.run([str(exe), str(L), repr(beta), repr(J), repr(Q), str(warmup), str(steps), str(seed),
                          variants, str(rounds)], check=True, capture_output=True, text=True)
    return json.loads(out.stdout)


def exact_energy(J: float, Q: float, beta: float) -> float:
    xb, yb = square_bonds(4, 4)
    q = [(Q, pair) for pair in q2_plaquette_pairs(4, 4)] if Q else []
    h = build_hamiltonian(16, [(J, i, j) for i, j in xb + yb], q)
    return ExactSpectrum(h, 16, translations=square_translations(4, 4)).energy_per_site(beta)


@pytest.mark.parametrize("J, Q", [(1.0, 0.0), (0.3, 1.0)])
def test_energy_matches_exact_diagonalization(exe, J, Q):
    """Two rounds of 50 000 steps with the single tracer, then 50 000 with 5 interleaved tracers."""
    beta = 2.0
    got = run(exe, 4, beta, J, Q, 2000, 50000, 11, "1,5:1", rounds=2)
    assert [v["tracers"] for v in got["variants"]] == [1, 5]
    exact = exact_energy(J, Q, beta)
    err = got["energy_per_site_err"]
    assert 0 < err < 2e-3 * abs(exact)
    assert abs(got["energy_per_site"] - exact) < 4 * err, (got["energy_per_site"], exact, err)


@pytest.mark.parametrize("J, Q", [(1.0, 0.0), (0.05, 1.0)])
def test_interleaved_tracers_give_the_single_tracer_chain(exe, J, Q):
    keys = ("mean_n", "energy_per_site", "m_stag2_time_avg", "s_q_next", "w2", "mz2", "mean_loops")
    ref = run(exe, 8, 4.0, J, Q, 200, 2000, 5, "1")
    for variant in ("2:0", "7:1", "32:32:1", "64:0", "8:0:0:20"):
        got = run(exe, 8, 4.0, J, Q, 200, 2000, 5, variant)
        frag = got["variants"][0]["fragments_per_loop"]
        if variant.endswith(":20"):  # ids ran out: most loops were finished by the single tracer
            assert frag < 0.5
        else:
            assert frag > 1.0  # tracers did meet on shared loops
        assert {k: got[k] for k in keys} == {k: ref[k] for k in keys}, variant
