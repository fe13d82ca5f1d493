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
that differ only in the variant print identical estimates.

The program's improved mode (the loop estimators, as qmc/engine/loop_estimators.py computes them) is held
to exact diagonalization too: m_stag2 = <(M_s/N)^2>, m_stag4, chi_stag, chi_uniform and S(Q + dq) on the
same 4x4 cases, and at beta = 0.1, where many strings are empty and most sites free, within 4 error bars;
the loop estimators draw no random number, so plain and improved runs of one seed must be the same Markov
chain (identical energy, operator counts, winding, loop counts), and their error bars must be the smaller.
The labelled marks of the interleaved tracers (the loop numbers the estimators read) must give the single
tracer's improved estimates bit for bit.  Skipped when no C compiler is installed.  Fixed seeds: the C
runs are deterministic.
"""

from __future__ import annotations

import functools
import json
import shutil
import subprocess
from pathlib import Path

import pytest
from helpers.exact_clusters import Exact, exact_square
from helpers.paths import REPO

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
        variants: str, rounds: int = 1, estimators: str = "plain") -> dict:
    """One run of the C program (exit status 3 if the SSE_CHECK consistency checks fail)."""
    out = subprocess.run([str(exe), str(L), repr(beta), repr(J), repr(Q), str(warmup), str(steps), str(seed),
                          variants, str(rounds), estimators], check=True, capture_output=True, text=True)
    res = json.loads(out.stdout)
    assert res["estimators"] == estimators
    return res


@functools.cache
def exact_cluster(J: float, Q: float) -> Exact:
    """The periodic 4x4 lattice with J on every nearest-neighbour bond and Q on both plaquette pairs of
    every plaquette (the C program's model), exactly (tests/helpers/exact_clusters.py)."""
    return exact_square(4, J, Q, "q2" if Q else None)


def exact_energy(J: float, Q: float, beta: float) -> float:
    return exact_cluster(J, Q).spec.energy_per_site(beta)


# the C program's names of the loop-estimated observables (per site, S^z units, as the engine's bins)
LOOP_KEYS = ("m_stag2_time_avg", "m_stag4", "chi_stag", "chi_uniform", "s_q_next")
# what the Markov chain alone decides
CHAIN_KEYS = ("final_n_ops", "cutoff", "mean_n", "mean_n_err", "energy_per_site", "energy_per_site_err", "w2",
              "mean_loops", "mean_vertices")


def exact_loop_values(J: float, Q: float, beta: float) -> dict[str, float]:
    ex = exact_cluster(J, Q)
    n = ex.n
    return {"m_stag2_time_avg": ex.spec.expect_diag(beta, (ex.ms / n) ** 2),
            "m_stag4": ex.spec.expect_diag(beta, (ex.ms / n) ** 4),
            "chi_stag": ex.spec.kubo_diag(beta, ex.ms),
            "chi_uniform": ex.spec.chi_uniform(beta),
            "s_q_next": ex.spec.expect_diag(beta, ex.sqn)}


def _err_key(key: str) -> str:
    return "m_stag2_err" if key == "m_stag2_time_avg" else f"{key}_err"


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


@pytest.mark.parametrize("J, Q, beta", [(1.0, 0.0, 2.0), (0.3, 1.0, 2.0), (1.0, 0.0, 0.1)])
def test_improved_estimators_match_exact_diagonalization(exe, J, Q, beta):
    """Plain and improved runs of one seed (two rounds of 50 000 steps with the single tracer, then 50 000
    with 5 interleaved tracers): the same chain; the improved estimates within 4 error bars of the exact
    values, with error bars below 0.8 of the plain ones."""
    plain = run(exe, 4, beta, J, Q, 2000, 50000, 11, "1,5:1", 2, "plain")
    got = run(exe, 4, beta, J, Q, 2000, 50000, 11, "1,5:1", 2, "improved")
    assert {k: got[k] for k in CHAIN_KEYS} == {k: plain[k] for k in CHAIN_KEYS}
    exact = exact_loop_values(J, Q, beta)
    assert got["m_stag2_err"] < 1e-2 * got["m_stag2_time_avg"]
    bad = {}
    for key, value in exact.items():
        mean, err = got[key], got[_err_key(key)]
        assert 0 < err < 0.8 * plain[_err_key(key)], (key, err, plain[_err_key(key)])
        if abs(mean - value) >= 4 * err:
            bad[key] = (mean, err, value)
    assert not bad, f"J={J} Q={Q} beta={beta}: (C improved mean, error, exact): {bad}"


@pytest.mark.parametrize("J, Q", [(1.0, 0.0), (0.05, 1.0)])
def test_labelled_interleaved_tracers_give_the_single_tracer_estimates(exe, J, Q):
    """Improved mode: every variant (ids running out included) leaves the single tracer's loop labels."""
    keys = CHAIN_KEYS + LOOP_KEYS
    ref = run(exe, 8, 4.0, J, Q, 200, 2000, 5, "1", estimators="improved")
    plain = run(exe, 8, 4.0, J, Q, 200, 2000, 5, "1")
    assert {k: ref[k] for k in CHAIN_KEYS} == {k: plain[k] for k in CHAIN_KEYS}
    for variant in ("2:0", "7:1", "64:0", "8:0:0:20"):
        got = run(exe, 8, 4.0, J, Q, 200, 2000, 5, variant, estimators="improved")
        assert {k: got[k] for k in keys} == {k: ref[k] for k in keys}, variant
