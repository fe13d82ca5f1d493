"""The loop-estimator kernel (qmc/engine/loop_estimators.py) against a slow reference written plainly in numpy
from the same loop marks.

The kernel follows the loops through the string incrementally (O(1) per bond vertex: counts and lengths
side by side, end-of-operator marks, scratch left zero between calls).  The reference below recomputes
everything the direct way: it propagates the loop of every site through the operators one by one, counts
the sites of every loop in every propagated state from scratch (np.bincount) and evaluates the formulas of
the module docstring (Q2(p) = sum_l n_l(p)^2, Q4(p) = sum_l n_l(p)^4, L_l = sum_p n_l(p), the slice-0 sums
w_l and F_l; moments of a loop's share x enumerated over its values).  Both must agree to float rounding
(relative 1e-12) on configurations of single-bond (Heisenberg), two-bond (J-Q2), three-bond (J-Q3) S = 1/2
models and an SU(3) J-Q2 model of the colour kind, including strings with sites that carry no operator.
The physics of the formulas is checked against exact diagonalization in tests/engine/test_loop_estimators.py.
"""

from __future__ import annotations

import numpy as np
import pytest
from helpers.colour_clusters import CASES as COLOUR_CASES
from helpers.exact_clusters import CASES
from numba import njit

from qmc.chain.simulation import Simulation
from qmc.engine.diagonal import diagonal_sweep
from qmc.engine.kinds import loop_update
from qmc.engine.loop_estimators import _vertex_sums, loop_estimators
from qmc.engine.projector import ProjectorKind
from qmc.engine.rng import stream_seed
from qmc.engine.slots import A_CHIS, A_MS2, A_MS4, A_MZ2, A_SQN
from qmc.engine.vertices import OP_TERM_SHIFT, TT_BOND, TT_BOND_WIDTH, TT_META

SLOTS = {"mz2": A_MZ2, "ms2": A_MS2, "ms4": A_MS4, "chi_stag": A_CHIS, "sq_shifted": A_SQN}


@njit
def _step(chain, terms, kind, vertices, probes, tallies):
    """One Monte Carlo step without measurement; returns (bond vertices, loops) of the new configuration."""
    n, n_vert = diagonal_sweep(chain, terms, kind, vertices, probes, tallies)
    chain.counters[0] = n
    return n_vert, loop_update(kind, chain, vertices, n_vert)


def _moments(kind) -> tuple[float, float]:
    """E[x^2], E[x^4] of a loop's share x, by enumerating its equally likely values."""
    if hasattr(kind, "n_colours"):
        x = np.array([(c == 0) - 1.0 / kind.n_colours for c in range(kind.n_colours)])
    else:
        x = np.array([0.5, -0.5])
    return float(np.mean(x**2)), float(np.mean(x**4))


def _label(kind, mark):
    """Loop label from a leg's mark ~((b << bits) | x): bits = 1 (spin flip) or the colour bits."""
    return (~np.int64(mark)) >> getattr(kind, "colour_bits", 1)


def _reference(sim: Simulation, n_loops: int) -> dict[str, float]:
    """The five accumulator increments of one configuration, computed the slow way (module docstring)."""
    kind, links, first = sim.kind, sim.vertices.links, sim.vertices.first
    table, ops = sim.terms.table, sim.chain.ops
    phase = sim.probes.phase.astype(np.float64)
    cos_tab, sin_tab = sim.probes.cos_tab, sim.probes.sin_tab
    mu2, mu4 = _moments(kind)
    n_sites = first.shape[0]
    # the loop of every site at slice 0; a site without operators is a loop of its own (labels >= n_loops)
    loop0 = np.array([_label(kind, links[f & ~1]) if f >= 0 else n_loops + i for i, f in enumerate(first)])
    width = n_loops + n_sites
    w = np.bincount(loop0, weights=phase, minlength=width)
    f2 = 0.0
    for d in range(cos_tab.shape[0]):
        re = np.bincount(loop0, weights=phase * cos_tab[d], minlength=width)
        im = np.bincount(loop0, weights=phase * sin_tab[d], minlength=width)
        f2 += float(np.sum(re**2 + im**2))
    out = {"mz2": mu2 * float(np.sum(w**2)),
           "sq_shifted": mu2 * f2 / (cos_tab.shape[0] * n_sites) if cos_tab.shape[0] else 0.0}
    cur = loop0.copy()
    q2s, q4s = [], []
    lengths = np.zeros(width, dtype=np.float64)
    v = 0
    for op in ops[ops >= 0]:
        t = op >> OP_TERM_SHIFT
        for a in range(table[t, TT_META] & 3):
            i, j = table[t, TT_BOND + TT_BOND_WIDTH * a], table[t, TT_BOND + TT_BOND_WIDTH * a + 1]
            below = _label(kind, links[4 * v])
            assert cur[i] == below and cur[j] == below, "the loop below a vertex is the one its sites were on"
            cur[i] = cur[j] = _label(kind, links[4 * v + 2])
            v += 1
        counts = np.bincount(cur, minlength=width).astype(np.float64)
        q2s.append(np.sum(counts**2))
        q4s.append(np.sum(counts**4))
        lengths += counts
    np.testing.assert_array_equal(cur, loop0)  # periodic in imaginary time
    n = len(q2s)
    cross = 3.0 * mu2 * mu2
    if n == 0:
        q2 = q4 = float(n_sites)
        out.update(ms2=mu2 * q2, ms4=cross * q2 * q2 + (mu4 - cross) * q4, chi_stag=sim.terms.beta * mu2 * q2)
        return out
    q2s, q4s = np.array(q2s), np.array(q4s)
    out["ms2"] = mu2 * float(np.mean(q2s))
    out["ms4"] = float(np.mean(cross * q2s**2 + (mu4 - cross) * q4s))
    out["chi_stag"] = sim.terms.beta * mu2 * float(np.sum(lengths**2) + np.sum(q2s)) / (n * (n + 1.0))
    return out


POINTS = [("chain12", 0.3), ("square4", 4.0), ("jq2_4", 2.0), ("jq3_4", 2.0), ("su3_jq2_open3", 1.5),
          ("su3_jq_chain8", 2.0)]


@pytest.mark.parametrize(("name", "beta"), POINTS, ids=[f"{p[0]}-beta{p[1]}" for p in POINTS])
def test_kernel_matches_slow_reference(name: str, beta: float) -> None:
    model = (CASES if name in CASES else COLOUR_CASES)[name][0]()
    sim = Simulation(model, beta, warmup_steps=200, measure_steps=50, bins=1,
                     seed_words=stream_seed(21, f"loop-pass-{name}"), estimators="improved")
    sim.advance(200)
    sim.advance(50)  # measured steps: the kernel runs inside the step driver and must leave its scratch zero
    records = (sim.chain, sim.terms, sim.kind, sim.vertices, sim.probes, sim.tallies)
    seen_free = False
    for _ in range(12):
        for _ in range(3):
            n_vert, n_loops = _step(*records)
        assert not sim.tallies.loop_tally.any() and not sim.tallies.loop_ends.any()
        sim.tallies.acc[:] = 0.0
        chain, terms, kind, vertices, probes, tallies = records
        loop_estimators(kind, chain, terms, vertices, probes, tallies, n_vert, n_loops)
        want = _reference(sim, int(n_loops))
        for key, slot in SLOTS.items():
            assert sim.tallies.acc[slot] == pytest.approx(want[key], rel=1e-12, abs=1e-300), key
        seen_free |= bool(np.any(sim.vertices.first < 0))
    if name == "chain12":
        assert seen_free, "beta 0.3 on 12 sites should leave some site without operators"


def _vertex_sums_plain(links, tally, ends, n_vertices, n, q2, q4):
    """The vertex pass of loop_estimators written in plain Python (IEEE double, one rounding per operation,
    never fused), in the kernel's order of operations."""
    tally = tally.copy()
    sum_q2 = sum_q2sq = sum_q4 = 0.0
    p = 1
    for v in range(n_vertices):
        below, above = 2 * ((~int(links[4 * v])) >> 1), 2 * ((~int(links[4 * v + 2])) >> 1)
        cb = int(tally[below])
        tally[below] = cb - 2
        tally[below + 1] += 2 * p
        ca = int(tally[above])
        tally[above] = ca + 2
        tally[above + 1] -= 2 * p
        a, b = ca + 1, cb - 1
        q2 += 4 * (a - b)
        q4 += float(8 * (a * (a * a + 1) - b * (b * b + 1)))
        e = 1 if n_vertices == n else int(ends[v + 1])
        fq2 = float(q2 if e else 0)
        sum_q2 += fq2
        sum_q2sq += fq2 * fq2
        sum_q4 += float(e) * q4
        p += e
    return (sum_q2, sum_q2sq, sum_q4), tally


@pytest.mark.parametrize("masked", [False, True], ids=["one-vertex-operators", "multi-bond-operators"])
def test_vertex_pass_is_exact_with_fused_multiply_adds(masked: bool) -> None:
    """The vertex pass is compiled with fused multiply-adds allowed; its products (Q2^2 while Q2 < 2^26, 0 or
    1 times Q4) are exact, so its sums must equal an unfused evaluation bit for bit.  Five large loops
    (about 3000 sites each: Q2 near 2^25.4, Q2^2 near 2^50.8, where a fused and an unfused sum of
    products would differ if the products were not exact) swap sites at random for 4000 vertices."""
    rng = np.random.default_rng(7)
    n_vertices, n_loops = 4000, 5
    labels = rng.integers(0, n_loops, size=(n_vertices, 2))
    links = np.zeros(4 * n_vertices + 4, dtype=np.int32)
    links[0:4 * n_vertices:4] = ~(2 * labels[:, 0] + rng.integers(0, 2, n_vertices))  # mark ~(2 b + flip)
    links[2:4 * n_vertices:4] = ~(2 * labels[:, 1] + rng.integers(0, 2, n_vertices))
    tally = np.zeros(2 * n_loops, dtype=np.int64)
    tally[0::2] = rng.integers(2900, 3100, n_loops)
    ends = np.zeros(n_vertices + 1, dtype=np.uint8)
    if masked:
        ends[1:] = rng.integers(0, 2, n_vertices)
        ends[n_vertices] = 1
    n = int(ends.sum()) if masked else n_vertices
    q2 = int(np.sum(tally[0::2] ** 2))
    q4 = float(np.sum(tally[0::2].astype(np.float64) ** 4))
    assert 2**25 < q2 < 2**26
    want, want_tally = _vertex_sums_plain(links, tally, ends, n_vertices, n, q2, q4)
    got = _vertex_sums(ProjectorKind(), links, tally, ends, n_vertices, n, np.int64(q2), q4)
    assert tuple(float(x) for x in got) == want  # bit for bit
    np.testing.assert_array_equal(tally, want_tally)
