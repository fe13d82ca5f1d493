"""The interleaved loop tracer gives the single tracer's Markov chain bit for bit.

Two copies of one warmed-up chain take the same steps: each step is the diagonal sweep followed by the
loop update, once by the single tracer (:func:`qmc.engine.projector.loop_update` given a links array too
short for the interleaved path) and once by the interleaved tracer (forced, with tracer counts, walks
alone, windows and fragment-id caps that exercise every branch: the round-robin, the union-find, ids
running out and the single-tracer finish), or by the engine's own dispatch on lists above the switch.
After every step the spins, operator strings, pending flips and random-number states must be equal.
"""

from __future__ import annotations

import numpy as np
import pytest
from qmc.models import HeisenbergTerm, ProjectorProductTerm, build_lattice, compile_model

from qmc.chain.simulation import Simulation
from qmc.chain.tracer_choice import INTERLEAVED
from qmc.engine.diagonal import diagonal_sweep
from qmc.engine.interleaved import INTERLEAVE_FROM_VERTICES, interleaved_loop_update
from qmc.engine.projector import loop_update
from qmc.engine.records import Chain, Vertices, build
from qmc.engine.rng import stream_seed


def _model(L: int, q: bool):
    terms = [HeisenbergTerm(bonds="nn", coupling=0.05 if q else 1.0)]
    if q:
        terms.append(ProjectorProductTerm("plaquette-pair", 1.0))
    return compile_model(build_lattice("square", (L, L)), terms)


def _warm(L: int, q: bool, beta: float, warmup: int) -> Simulation:
    sim = Simulation(_model(L, q), beta, warmup_steps=warmup, measure_steps=10, bins=1,
                     seed_words=stream_seed(11, f"interleave-{L}-{q}"))
    sim.advance(warmup)
    return sim


def _copy(rec, cls):
    return build(cls, **{k: v.copy() for k, v in rec._asdict().items()})


def _sweep(sim: Simulation, chain, vertices) -> int:
    n, n_vert = diagonal_sweep(chain, sim.terms, sim.kind, vertices, sim.probes, sim.tallies)
    chain.counters[0] = n
    return int(n_vert)


def _single_step(sim: Simulation, chain, vertices) -> int:
    """One step with the single tracer: loop_update sees a links array with no room for fragment ids."""
    nv = _sweep(sim, chain, vertices)
    short = build(Vertices, **{**vertices._asdict(), "links": vertices.links[:4 * nv]})
    loop_update(sim.kind, chain, short, nv)
    return nv


def _loop_labels(links: np.ndarray) -> np.ndarray:
    """The number of each leg's loop when the loops are built in order of their first pair (enter a vertex at
    leg l, leave at l ^ 1, follow the world-line link), traced here in plain Python."""
    labels = np.full(links.shape[0], -1, dtype=np.int64)
    b = 0
    for l0 in range(0, links.shape[0], 2):
        if labels[l0] >= 0:
            continue
        leg = l0
        while True:
            labels[leg] = labels[leg ^ 1] = b
            leg = int(links[leg ^ 1])
            if leg == l0:
                break
        b += 1
    return labels


def _assert_same(a, b, va, vb, step: int, nv: int) -> None:
    assert np.array_equal(va.links[:4 * nv], vb.links[:4 * nv]), f"leg marks differ after step {step}"
    _assert_same_chain(a, b, va, vb, step)


def _assert_same_chain(a, b, va, vb, step: int) -> None:
    for name in ("spins", "ops", "rng"):
        assert np.array_equal(getattr(a, name), getattr(b, name)), f"{name} differ after step {step}"
    assert a.counters[0] == b.counters[0], f"n differs after step {step}"
    assert np.array_equal(va.vflip, vb.vflip), f"vflip differ after step {step}"


VARIANTS = [  # (tracers, alone, window in legs, id cap)
    (32, 32, 1 << 16, 0),
    (8, 0, 0, 0),  # pure round-robin: every loop end is a stop, many fragments
    (1, 0, 0, 0),  # one tracer, yet fragments (it restarts backwards)
    (4, 3, 64, 0),  # tiny window: tracers leave it at once
    (16, 8, 256, 5),  # ids run out after 5 fragments: the single-tracer finish builds the rest
    (64, 1000, 0, 1),
]


@pytest.mark.parametrize("q", [False, True], ids=["heisenberg", "jq2"])
@pytest.mark.parametrize("variant", VARIANTS, ids=[":".join(map(str, v)) for v in VARIANTS])
def test_forced_interleaved_equals_single(q: bool, variant: tuple[int, int, int, int]) -> None:
    sim = _warm(6, q, 4.0, 200)
    ca, va = _copy(sim.chain, Chain), _copy(sim.vertices, Vertices)
    cb, vb = _copy(sim.chain, Chain), _copy(sim.vertices, Vertices)
    fragments_seen = 0  # steps in which the tracers made fragments (not all by the single-tracer finish)
    for step in range(60):
        va.links[:] = 12345  # the sweep rewrites every leg it uses; what lies after them is the tracer's
        nv = _sweep(sim, ca, va)
        n_loops = interleaved_loop_update(va.links, va.vflip, va.first, ca.spins, ca.rng, nv, *variant, False)
        fragments_seen += int(va.links[4 * nv + 16] in (0, 1))  # fragment id 0, turned into its loop's flip
        assert _single_step(sim, cb, vb) == nv
        # unlabelled: -1 (kept) or -2 (flipped) on the even leg of each pair; the engine's single tracer
        # marks ~(2 label + flipped); the odd legs keep the links the sweep wrote, in both
        flipped = (~vb.links[:4 * nv:2]) & 1
        assert np.array_equal(va.links[:4 * nv:2], -1 - flipped), f"leg marks differ after step {step}"
        odd = slice(1, 4 * nv, 2)
        assert np.array_equal(va.links[odd], vb.links[odd]), f"odd legs differ after step {step}"
        _assert_same_chain(ca, cb, va, vb, step)
        assert n_loops >= 1
    assert fragments_seen > 0


@pytest.mark.parametrize("q", [False, True], ids=["heisenberg", "jq2"])
@pytest.mark.parametrize("variant", VARIANTS, ids=[":".join(map(str, v)) for v in VARIANTS])
def test_labelled_marks(q: bool, variant: tuple[int, int, int, int]) -> None:
    """With ``labelled`` the even leg of every pair ends marked ~(2 b + f): f the flip the single tracer gave
    its loop, b the loop's number in order of first pair (traced independently here), the very marks the
    engine's single tracer leaves for the loop estimators; the chain itself is unchanged."""
    sim = _warm(6, q, 4.0, 200)
    ca, va = _copy(sim.chain, Chain), _copy(sim.vertices, Vertices)
    cb, vb = _copy(sim.chain, Chain), _copy(sim.vertices, Vertices)
    for step in range(30):
        nv = _sweep(sim, ca, va)
        want_labels = _loop_labels(va.links[:4 * nv].copy())
        n_loops = interleaved_loop_update(va.links, va.vflip, va.first, ca.spins, ca.rng, nv, *variant, True)
        assert _single_step(sim, cb, vb) == nv
        value = ~va.links[:4 * nv:2].astype(np.int64)
        assert np.array_equal(value >> 1, want_labels[::2]), f"loop labels differ after step {step}"
        assert np.array_equal(va.links[:4 * nv], vb.links[:4 * nv]), f"marks differ after step {step}"
        assert n_loops == want_labels.max() + 1
        _assert_same_chain(ca, cb, va, vb, step)


@pytest.mark.parametrize("q", [False, True], ids=["heisenberg", "jq2"])
def test_dispatch_above_switch_equals_single(q: bool) -> None:
    """With the interleaved path chosen (:mod:`qmc.chain.tracer_choice`) the engine's own steps (run_steps)
    run it and still follow the single tracer's chain."""
    L = 40 if q else 48
    sim = _warm(L, q, 32.0, 60)
    sim.fix_loop_tracing(INTERLEAVED)
    cb, vb = _copy(sim.chain, Chain), _copy(sim.vertices, Vertices)
    switched = 0
    for step in range(4):
        sim.links[:] = 12345  # the sweep rewrites every leg it uses; the interleaved path pads after them
        sim.advance(1)
        nv = _single_step(sim, cb, vb)
        if nv > INTERLEAVE_FROM_VERTICES:  # the interleaved path sets the 16 entries after the legs to -1
            switched += int(np.all(sim.links[4 * nv:4 * nv + 16] == -1))
        _assert_same(sim.chain, cb, sim.vertices, vb, step, nv)
    assert switched == 4
