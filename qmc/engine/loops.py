"""The operator-loop update through singlet-projector bond vertices.

Every bond vertex of every operator (a k-bond term contributes k vertices, see :mod:`qmc.engine.vertices`)
is a four-leg vertex whose weight 1/2 is the same diagonal and off-diagonal, so the deterministic loop
(enter at leg l, exit at leg l ^ 1, follow the world-line link) changes no weight and every loop is
flipped with probability 1/2.  All loops are constructed (each leg visited exactly once); legs are marked
-1 (visited, kept) or -2 (visited, flipped) in ``links``.  Sites without any operator are flipped with
probability 1/2; the other sites follow the loop through their first leg.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from qmc.engine.rng import next_double

__all__ = ["loop_update"]

U = np.uint32  # unsigned indices: no negative-index wrap-around code in the hot loop


@njit(cache=True, boundscheck=False)
def loop_update(links, vflip, n_vertices, spins, first, rng):
    """Build all loops of the linked vertex list, flip each with probability 1/2; returns the loop count."""
    s0, s1, s2, s3 = rng[0], rng[1], rng[2], rng[3]
    n_legs = 4 * n_vertices
    n_loops = 0
    for l0 in range(0, n_legs, 2):
        if links[U(l0)] < 0:
            continue
        n_loops += 1
        u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
        leg = l0
        if u < 0.5:
            while True:
                vflip[U(leg >> 2)] ^= 1
                partner = leg ^ 1
                nxt = links[U(partner)]
                links[U(leg)] = -2
                links[U(partner)] = -2
                leg = nxt
                if leg == l0:
                    break
        else:
            while True:
                partner = leg ^ 1
                nxt = links[U(partner)]
                links[U(leg)] = -1
                links[U(partner)] = -1
                leg = nxt
                if leg == l0:
                    break
    for i in range(spins.shape[0]):
        f = first[i]
        if f < 0:
            u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
            if u < 0.5:
                spins[i] = -spins[i]
        elif links[U(f)] == -2:
            spins[i] = -spins[i]
    rng[0] = s0
    rng[1] = s1
    rng[2] = s2
    rng[3] = s3
    return n_loops
