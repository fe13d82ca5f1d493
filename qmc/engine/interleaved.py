"""Interleaved loop tracing for the singlet-projector loops on vertex lists larger than the caches.

The single tracer (:func:`qmc.engine.projector.loop_update`) follows one loop at a time: every step is a
load whose address is the value of the previous load, so once the links array is far larger than the
last-level cache each leg visit waits for main memory (about 100 ns).  :func:`interleaved_loop_update`
builds the same loops with up to K tracers that take turns, one leg pair per turn, each prefetching the
leg group it visits next, so that up to K cache misses are in flight.  It gives the same Markov chain bit
for bit (same loops, same flips, same random numbers in the same order); only the speed differs.

Leg layout (:mod:`qmc.engine.vertices`): leg 4v + l of bond vertex v, l = 0/1 sites i/j below, 2/3 above.
A loop enters a vertex at leg l and leaves at l ^ 1, so legs come in pairs {2q, 2q + 1} and every pair
lies on exactly one loop.  Marks go to the even leg of a pair only (``links[c & ~1]``).

Construction (common practice for pointer chasing, no source; the proof of equivalence is below):

- a scan over the pairs in increasing order starts a tracer at the next unmarked pair q: the tracer takes
  the next fragment id f, marks q with ``-3 - f`` and remembers both exits of q (forward through leg
  2q + 1, backward through leg 2q);
- a step looks at the pair of the tracer's current leg: unmarked -> mark it with the tracer's id and move
  to the world-line partner of the exit leg; marked -> this end of the fragment is done and the fragment
  and the owner of the mark lie on one loop (union-find over fragment ids, the smaller id the root).  Its
  own mark is met only going forward, at the start pair: the loop is closed and wholly this fragment's;
- a tracer whose forward end ran into another fragment goes backward from its start pair; when both ends
  are done it takes the next start from the scan;
- scheduling: a freshly started tracer walks alone for up to ``alone`` steps while its legs stay within
  ``window`` legs of the scan (that stretch of the links array is prefetched ahead of the scan), so the
  many short loops cost what they cost the single tracer; a tracer that leaves the window or uses up its
  steps joins the round-robin.

Every pair is marked exactly once; each fragment is a stretch of consecutive pairs of one loop whose two
ends border marked pairs, so the union-find classes are exactly the loops.  The ids (one int32 per
fragment, about one per loop) live in the unused tail of ``links`` after 16 padding entries, so no memory is
added; should they run out, no fragment is started any more, and once the tracers are done every loop
touched so far is complete: a single tracer finishes the remaining whole loops from the scan position on.

Same chain as the single tracer: the scan meets the pairs in increasing order, so the first fragment of a
loop starts at the loop's first pair, where the single tracer starts it; ids grow in scan order, so the
roots (smallest id of each loop) come in the single tracer's loop order and draw the same random numbers
(one pass over the ids in increasing order; parents are smaller than their children).  The free sites then
draw in site order, as in the single tracer.  At the end the even leg of every pair holds -1 (its loop
kept) or -2 (flipped) and the odd legs keep their links, as the single tracer leaves ``links[:4 n_vertices]``.
tests/engine/test_interleaved_loops.py checks all of this step by step.

Per-loop quantities (e.g. improved estimators): with ``labelled`` the even leg of every pair ends marked
~(2 b + f), b the loop's number in the single tracer's order, so an estimator pass after the loop update
reads the same labels whichever tracer ran.  Sums gathered while tracing would go per fragment id (at the
``links[c & ~1] = lab`` stores) and be added to the root's sum in the pass over the ids, where each root is
one completed loop and its flip is drawn.
"""

from __future__ import annotations

import numpy as np
from llvmlite import ir
from numba import njit, types
from numba.cpython.unsafe.numbers import trailing_zeros
from numba.extending import intrinsic

from qmc.engine.rng import next_double

__all__ = ["interleaved_loop_update", "use_interleaved", "INTERLEAVE_FROM_VERTICES", "TRACERS", "ALONE",
           "WINDOW", "PAD", "MIN_IDS", "prefetch", "mark_loop"]

U = np.uint32  # unsigned indices: no negative-index wrap-around code in the hot loop
INTERLEAVE_FROM_VERTICES = 1 << 16
"""Interleave when the string has more bond vertices than this (links of 16 bytes per vertex > 1 MiB)."""
TRACERS = 32
"""Tracers taking turns (K)."""
ALONE = 32
"""Steps a fresh tracer walks alone before joining the round-robin (E)."""
WINDOW = 1 << 16
"""Legs on either side of the scan within which a tracer walks alone (256 KiB of links)."""
PAD = 16
"""Entries after the 4 n_vertices legs set to -1: the scan's 8-pair probe reads past the end."""
MIN_IDS = 1024
"""Fewest fragment ids the unused tail of ``links`` must hold for the interleaved path to be chosen."""


@intrinsic
def prefetch(typingctx, arr, idx):
    """Hint the CPU to fetch ``arr[idx]`` into the caches for writing (``llvm.prefetch``, locality 3)."""
    if not isinstance(arr, types.Array) or not isinstance(idx, types.Integer):
        return None

    def codegen(context, builder, sig, args):
        ary = context.make_array(sig.args[0])(context, builder, args[0])
        ptr = builder.gep(ary.data, [args[1]])
        i8p, i32 = ir.IntType(8).as_pointer(), ir.IntType(32)
        fn = builder.module.declare_intrinsic(
            "llvm.prefetch", [i8p], ir.FunctionType(ir.VoidType(), [i8p, i32, i32, i32]))
        builder.call(fn, [builder.bitcast(ptr, i8p), i32(1), i32(3), i32(1)])
        return context.get_dummy_value()

    return types.void(arr, idx), codegen


@njit(inline="always")
def use_interleaved(n_vertices, links_length, from_vertices):
    """Whether the interleaved path runs: more than ``from_vertices`` vertices and room for the padding and
    at least :data:`MIN_IDS` fragment ids after the legs."""
    return n_vertices > from_vertices and links_length >= 4 * n_vertices + PAD + MIN_IDS


@njit(inline="always")
def mark_loop(links, l0, mark):
    """Walk the loop through leg l0 (enter at l, leave at l ^ 1, follow the link) and set the even leg of
    every pair of legs it visits to ``mark`` (< 0: visited; the odd legs keep their links).  Used by the
    projector and colour kinds and by :func:`interleaved_loop_update` for loops left whole."""
    leg = l0
    while True:
        nxt = links[U(leg ^ 1)]
        links[U(leg & ~1)] = mark
        leg = nxt
        if leg == l0:
            break


@njit(cache=True, boundscheck=False)
def interleaved_loop_update(links, vflip, first, spins, rng, n_vertices, n_tracers, alone, window, max_ids,
                            labelled):
    """Build all loops with ``n_tracers`` interleaved tracers (each walks up to ``alone`` steps alone within
    ``window`` legs of the scan; ``window`` 0: no limit), flip each with probability 1/2 and leave ``vflip``
    and ``spins`` as :func:`qmc.engine.projector.loop_update` does; returns the loop count.  At most
    ``max_ids`` fragment ids are used (0: as many as the tail of ``links`` holds).  Needs
    ``links.shape[0] >= 4 n_vertices + PAD``.

    Leg marks left on the even legs of ``links[:4 n_vertices]`` (the odd legs keep their links): -1 - f
    with f = 1 if the leg's loop flipped, else 0; with ``labelled`` -1 - (2 b + f) = ~(2 b + f) instead,
    b = 0, 1, ... the loop's number in the single tracer's order (the order in which loops draw their
    flips), for per-loop estimators."""
    n_legs = 4 * n_vertices
    base = n_legs + PAD  # fragment ids: links[base + f]
    cap = links.shape[0] - base
    if max_ids > 0 and cap > max_ids:
        cap = max_ids
    for i in range(PAD):
        links[U(n_legs + i)] = -1
    cur = np.empty(n_tracers, dtype=np.int64)
    back = np.empty(n_tracers, dtype=np.int64)
    lab = np.empty(n_tracers, dtype=np.int64)
    fwd = np.empty(n_tracers, dtype=np.bool_)
    two_w = U(2 * window)
    scan = 0
    pf = 0
    n_frag = 0
    active = 0
    t = 0
    filling = True  # slots active .. n_tracers - 1 still to be given a first fragment
    while True:
        if filling:
            if active == n_tracers:
                filling = False
                t = 0
                continue
            t = active
            mk = 0
            lab_t = 0
            cur_t = 0
            back_t = 0
            fwd_t = False
        else:
            if active == 0:
                break
            if t >= active:
                t = 0
            c = cur[t]
            mk = links[U(c & ~1)]
            if mk >= 0:  # a round-robin turn: one step, then prefetch the next leg group
                nxt = links[U(c ^ 1)]
                links[U(c & ~1)] = lab[t]
                cur[t] = nxt
                prefetch(links, U(nxt))
                t += 1
                continue
            lab_t = lab[t]
            cur_t = c
            back_t = back[t]
            fwd_t = fwd[t]
        # serve tracer t at a stop with mark mk (mk >= 0: a fresh slot): join fragments, start, walk alone
        budget = alone
        retire = False
        while True:
            start = True
            if mk < 0 and mk != lab_t:
                a = -3 - lab_t
                b = -3 - mk
                while True:  # roots of a and b, path halving
                    p = links[U(base + a)]
                    if p == a:
                        break
                    g = links[U(base + p)]
                    links[U(base + a)] = g
                    a = g
                while True:
                    p = links[U(base + b)]
                    if p == b:
                        break
                    g = links[U(base + p)]
                    links[U(base + b)] = g
                    b = g
                if a < b:
                    links[U(base + b)] = a
                else:
                    links[U(base + a)] = b
                if fwd_t:  # forward end done: go backward from the start pair
                    fwd_t = False
                    cur_t = back_t
                    start = False
            if start:
                if n_frag >= cap:
                    retire = True
                    break
                while scan < n_legs:  # first unmarked pair at or after scan, 8 pairs per probe
                    m = 0
                    for i in range(8):
                        m |= np.uint32(links[U(scan + 2 * i)] >= 0) << np.uint32(i)
                    if m != 0:
                        scan += 2 * trailing_zeros(m)
                        break
                    scan += 16
                if scan >= n_legs:
                    retire = True
                    break
                links[U(base + n_frag)] = n_frag
                lab_t = -3 - n_frag
                back_t = links[U(scan)]
                cur_t = links[U(scan + 1)]
                fwd_t = True
                links[U(scan)] = lab_t
                n_frag += 1
                scan += 2
                if window > 0:
                    hi = min(scan + window, n_legs)
                    while pf < hi:
                        prefetch(links, U(pf))
                        pf += 16
            joined = False
            while True:
                c = cur_t
                if budget == 0 or (window > 0 and U(c - scan + window) >= two_w):
                    prefetch(links, U(c))
                    joined = True
                    break
                mk = links[U(c & ~1)]
                if mk < 0:
                    break  # a stop: handled at the top
                cur_t = links[U(c ^ 1)]
                links[U(c & ~1)] = lab_t
                budget -= 1
            if joined:
                break
        if retire:
            if filling:
                filling = False
                t = 0
            else:
                active -= 1
                cur[t] = cur[active]
                back[t] = back[active]
                lab[t] = lab[active]
                fwd[t] = fwd[active]
        else:
            cur[t] = cur_t
            back[t] = back_t
            lab[t] = lab_t
            fwd[t] = fwd_t
            if filling:
                active += 1
            else:
                t += 1

    # one flip per loop (root), in increasing id order; children take their root's value.  The value of a
    # loop: its flip f, or 2 b + f (labelled)
    s0, s1, s2, s3 = rng[0], rng[1], rng[2], rng[3]
    n_loops = 0
    for f in range(n_frag):
        p = links[U(base + f)]
        if p == f:
            u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
            value = 1 if u < 0.5 else 0
            if labelled:
                value += 2 * n_loops
            links[U(base + f)] = value
            n_loops += 1
        else:
            links[U(base + f)] = links[U(base + p)]
    # ids ran out: the unmarked pairs left, all beyond the scan, form whole loops; finish them in scan order,
    # marking -3 - n_frag - value (below every id mark)
    for l0 in range(scan, n_legs, 2):
        if links[U(l0)] < 0:
            continue
        u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
        value = 1 if u < 0.5 else 0
        if labelled:
            value += 2 * n_loops
        n_loops += 1
        mark_loop(links, l0, -3 - n_frag - value)
    # each pair's value from its mark (id -> its loop's value; below the ids -> the value in the mark); the
    # even leg of each pair ends marked -1 - value, vflip[v] = flip below xor flip above
    for v in range(n_vertices):
        i = -3 - links[U(4 * v)]
        va = links[U(base + i)] if i < n_frag else i - n_frag
        links[U(4 * v)] = -1 - va
        i = -3 - links[U(4 * v + 2)]
        vb = links[U(base + i)] if i < n_frag else i - n_frag
        links[U(4 * v + 2)] = -1 - vb
        vflip[U(v)] = np.uint8((va ^ vb) & 1)
    for i in range(spins.shape[0]):
        f = first[i]
        if f < 0:
            u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
            if u < 0.5:
                spins[i] = -spins[i]
        elif (-1 - links[U(f & ~1)]) & 1:
            spins[i] = -spins[i]
    rng[0] = s0
    rng[1] = s1
    rng[2] = s2
    rng[3] = s3
    return n_loops
