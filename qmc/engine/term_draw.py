"""Drawing the term of an insertion attempt: t with probability w_t / W_tot from one uniform number u.

Two ways, chosen where the records are built (:func:`qmc.chain.alias.group_draw_tables`):

- **By group** (``group_edge`` not empty): when every term group holds terms of one weight w_g, stored
  contiguously (the usual case: one coupling per ``[[terms]]`` entry), and there are two to four groups,
  the distribution is piecewise uniform over the groups' index ranges.  With edge[g] the probability of
  the groups before g and scale[g] = W_tot / w_g (the group's terms per unit of probability): g = the
  number of edges edge[1..3] <= u (three nested comparisons, the later ones never true when there are
  fewer groups: missing groups have edge +inf), then t = first[g] + floor((u - edge[g]) scale[g]),
  capped at last[g] against rounding.  Only small
  per-group arrays are read, so nothing random is loaded from memory (the inverse of the cumulative
  distribution; common practice, no source).
- **Alias table** otherwise (Walker's method, :mod:`qmc.chain.alias`): r = u T, t = floor(r), keep t if
  r - t < prob[t], else alias[t]; two loads at a random index of T-long tables.  A single group of one
  weight has prob = 1 everywhere, so t = floor(u T): measured slightly faster there than the group draw
  (benchmarks/c_compare.py, square-lattice Heisenberg).

Either way one uniform number is used, so the Markov chain draws the same random numbers; which term a
given u selects differs between the two (tests/chain/test_stored_bins.py keeps both checked).
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["draw_term"]

U = np.uint32


@njit(inline="always")
def draw_term(u, n_terms, alias_prob, alias_idx, edge, scale, first, last):
    """The term t drawn by u in [0, 1) (module docstring); ``edge``, ``scale``, ``first``, ``last``
    float64/float64/int32/int32[4] (edges of missing groups +inf; empty: the alias table)."""
    if edge.shape[0] > 0:
        g = 0
        if u >= edge[1]:
            g = 1
            if u >= edge[2]:
                g = 2
                if u >= edge[3]:
                    g = 3
        t = first[U(g)] + int((u - edge[U(g)]) * scale[U(g)])
        return min(t, last[U(g)])
    r = u * n_terms
    t = int(r)
    # both loads always, then a select (the test is a coin flip for terms lighter than the mean)
    alt = alias_idx[U(t)]
    return alt if r - t >= alias_prob[U(t)] else t
