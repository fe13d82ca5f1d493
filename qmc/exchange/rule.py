"""Acceptance rule for swapping configurations between chains that differ only in their couplings.

For H = E_const - sum_t C_t prod P the SSE weight of a configuration with n_g operators of term group g is
proportional to prod_g c_g^{n_g} (all terms of a group share the coupling c_g; beta, the lattice and the
cutoff-dependent factors are common or cancel).  Swapping configurations A and B between chains a and b
is accepted with probability min(1, R),

    R = prod_g (c_g^a / c_g^b)^(n_g(B) - n_g(A)),

which for a single scanned coupling g reduces to (g_b / g_a)^(n_g(A) - n_g(B)).  Standard parallel
tempering in a coupling (Hukushima and Nemoto, J. Phys. Soc. Jpn. 65, 1604 (1996)).
"""

from __future__ import annotations

import numpy as np

__all__ = ["swap_log_ratio", "group_couplings"]


def group_couplings(term_coupling: np.ndarray, term_group: np.ndarray, n_groups: int) -> np.ndarray:
    """The common coupling of each group (0 for an empty group); raises if a group's terms differ."""
    out = np.zeros(n_groups, dtype=np.float64)
    for g in range(n_groups):
        c = term_coupling[term_group == g]
        if c.size:
            if not np.allclose(c, c[0], rtol=1e-14, atol=0):
                raise ValueError(f"term group {g} has non-uniform couplings; exchange needs uniform groups")
            out[g] = c[0]
    return out


def swap_log_ratio(c_a: np.ndarray, c_b: np.ndarray, n_conf_a: np.ndarray, n_conf_b: np.ndarray) -> float:
    """ln R for moving configuration B (now at chain b) to chain a and A to b; -inf if forbidden."""
    dn = np.asarray(n_conf_b, dtype=np.float64) - np.asarray(n_conf_a, dtype=np.float64)
    total = 0.0
    for ca, cb, d in zip(c_a, c_b, dn, strict=True):
        if d == 0 or ca == cb:
            continue
        if ca == 0.0 or cb == 0.0:
            # a zero coupling forbids operators of that group on its chain
            if (ca == 0.0 and d > 0) or (cb == 0.0 and d < 0):
                return -np.inf
            continue
        total += d * (np.log(ca) - np.log(cb))
    return total
