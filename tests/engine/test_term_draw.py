"""The term draw of the diagonal update: term t with probability w_t / W_tot from one uniform number.

Both ways (by group, alias table; qmc.engine.term_draw) are driven with a fine grid of u values
u_k = (k + 1/2) / K: an exact sampler gives term t to K w_t / W_tot of them, up to one at each end of t's
interval (inverse-CDF and alias draws map u monotonically onto at most two intervals per term).
"""

from __future__ import annotations

import numpy as np
import pytest
from numba import njit

from qmc.chain.alias import MAX_DRAW_GROUPS, alias_table, group_draw_tables
from qmc.engine.term_draw import draw_term

K = 200_000


@njit(cache=False)
def _counts(n_terms, prob, alias, edge, scale, first, last, k_grid):
    out = np.zeros(n_terms, dtype=np.int64)
    for k in range(k_grid):
        out[draw_term((k + 0.5) / k_grid, n_terms, prob, alias, edge, scale, first, last)] += 1
    return out


def _draw_counts(groups: np.ndarray, weights: np.ndarray, by_group: bool) -> np.ndarray:
    prob, alias = alias_table(weights)
    tables = group_draw_tables(groups, weights)
    if not by_group:
        tables = (np.zeros(0), np.zeros(0), np.zeros(0, np.int32), np.zeros(0, np.int32))
    return _counts(weights.size, prob, alias, *tables, K)


CASES = {  # name: (group of each term, weight of each term)
    "one group": (np.zeros(10, int), np.full(10, 0.5)),
    "J-Q2 like": (np.repeat([0, 1], [8, 8]), np.repeat([0.025, 0.25], [8, 8])),
    "three groups": (np.repeat([0, 1, 2], [3, 5, 2]), np.repeat([1.0, 0.1, 2.5], [3, 5, 2])),
    "four groups": (np.repeat([0, 1, 2, 3], [2, 3, 4, 5]), np.repeat([0.3, 0.7, 0.05, 1.0], [2, 3, 4, 5])),
}


@pytest.mark.parametrize("case", CASES)
@pytest.mark.parametrize("by_group", [True, False], ids=["by-group", "alias"])
def test_draws_follow_the_weights(case: str, by_group: bool) -> None:
    groups, weights = CASES[case]
    size = group_draw_tables(groups, weights)[0].size  # the draw by group applies, except to one group
    assert size == (0 if np.unique(groups).size == 1 else MAX_DRAW_GROUPS)
    counts = _draw_counts(groups, weights, by_group)
    want = K * weights / weights.sum()
    assert counts.sum() == K
    assert np.all(np.abs(counts - want) <= 2.0), (counts, want)


def test_the_group_draw_is_refused_where_it_does_not_apply() -> None:
    """Unequal weights in a group, a group in two runs, five groups, a zero weight, one group: the alias
    table."""
    cases = [
        (np.zeros(4, int), np.array([1.0, 1.0, 2.0, 1.0])),
        (np.array([0, 1, 0]), np.ones(3)),
        (np.arange(5), np.ones(5)),
        (np.array([0, 1]), np.array([1.0, 0.0])),
        (np.zeros(3, int), np.ones(3)),
    ]
    for groups, weights in cases:
        assert all(a.size == 0 for a in group_draw_tables(groups, weights)), (groups, weights)


def test_group_tables() -> None:
    """Edges are the cumulative group probabilities (missing groups at +inf), scale = W_tot / w_g,
    first/last the term ranges."""
    edge, scale, first, last = group_draw_tables(np.repeat([0, 1], [2, 3]), np.repeat([0.5, 2.0], [2, 3]))
    np.testing.assert_allclose(edge, [0.0, 1.0 / 7.0, np.inf, np.inf])
    np.testing.assert_allclose(scale[:2], [14.0, 3.5])
    assert first[:2].tolist() == [0, 2] and last[:2].tolist() == [1, 4]
