"""Small SU(N) clusters with their exact thermal values (qmc.validation.exact.colours, written independently
of the engine and of models/) in the conventions of the bins, shared by the colour tests.

``CASES[name] = (model builder, exact builder, {beta: Monte Carlo steps})``; :func:`exact_colour_case`
builds a cluster's exact values once per test session.
"""

from __future__ import annotations

import numpy as np
from qmc.models import ProjectorProductTerm, ProjectorTerm, build_lattice, compile_model

from qmc.validation.exact import chain_bonds
from qmc.validation.exact.colours import (
    ColourSpectrum,
    chain_pair_products,
    open_square_bonds,
    open_square_plaquette_pairs,
)


class ExactColour:
    """Exact thermal values of one SU(N) cluster in the conventions of the bins (per site)."""

    def __init__(self, N, phase, products, coords, lengths, vbs, twist=None):
        self.spec = ColourSpectrum(N, phase, products, displacement=twist)
        self.n, self.twist = len(phase), twist
        sp = self.spec
        ms = sp.staggered_order()
        self.obs = {"m_stag2": ms**2, "chi_uniform_raw": sp.colour_charge() ** 2}
        self.ms_total = ms * self.n
        delta = (sp.states == 0) - 1.0 / N
        sqn = np.zeros(len(sp.states))
        for a in range(coords.shape[1]):
            arg = 2 * np.pi * coords[:, a] / lengths[a]
            sqn += ((delta * np.cos(arg)).sum(1) ** 2 + (delta * np.sin(arg)).sum(1) ** 2) / self.n
        self.obs["s_q_shifted"] = sqn / coords.shape[1]
        if vbs:  # D = -(1/(2 n)) sum_b (-1)^(x_b) B_b
            d = -sum(sign * sp.bond_variable(i, j) for i, j, sign in vbs) / (2 * self.n)
            self.obs["vbs_x2"] = d * d

    def values(self, beta):
        sp = self.spec
        out = {"energy": sp.energy(beta), "specific_heat": sp.specific_heat(beta),
               "chi_stag": sp.kubo(beta, self.ms_total)}
        for k, v in self.obs.items():
            out[k] = sp.diagonal(beta, v)
        out["chi_uniform"] = beta * out.pop("chi_uniform_raw") / self.n
        if self.twist:
            out["stiffness"] = sp.stiffness(beta)
        return out


def _chain_exact(N, L, J, Q=0.0):
    bonds = chain_bonds(L)
    phase = [1 - 2 * (x % 2) for x in range(L)]
    products = [(J, [b]) for b in bonds] + ([(Q, p) for p in chain_pair_products(L)] if Q else [])
    vbs = [(x, (x + 1) % L, 1 - 2 * (x % 2)) for x in range(L)]
    return ExactColour(N, phase, products, np.arange(L, dtype=float)[:, None], [L], vbs,
                       twist={b: 1.0 for b in bonds})


def _chain_model(N, L, J, Q=0.0):
    terms = [ProjectorTerm("nn", J)]
    if Q:
        terms.append(ProjectorProductTerm([[[0], [1]], [[2], [3]]], Q, name="q"))
    return compile_model(build_lattice("chain", L), terms, colours=N)


def _open_square_exact(N, L, J, Q):
    xb, yb = open_square_bonds(L, L)
    phase = [1 - 2 * ((x + y) % 2) for y in range(L) for x in range(L)]
    products = [(J, [b]) for b in xb + yb] + [(Q, p) for p in open_square_plaquette_pairs(L, L)]
    coords = np.array([[x, y] for y in range(L) for x in range(L)], dtype=float)
    return ExactColour(N, phase, products, coords, [L, L], [])


def _open_square_model(N, L, J, Q):
    return compile_model(build_lattice("square", L, "open"),
                         [ProjectorTerm("nn", J), ProjectorProductTerm("plaquette-pair", Q)], colours=N)


CASES = {  # name: (model, exact, {beta: Monte Carlo steps}) (small |E| at high T needs more steps)
    "su3_chain6": (lambda: _chain_model(3, 6, 1.0), lambda: _chain_exact(3, 6, 1.0),
                   {0.5: 2_000_000, 2.0: 600_000, 5.0: 200_000}),
    "su4_chain6": (lambda: _chain_model(4, 6, 1.0), lambda: _chain_exact(4, 6, 1.0),
                   {1.0: 2_000_000, 4.0: 300_000}),
    "su3_jq_chain8": (lambda: _chain_model(3, 8, 0.5, 1.0), lambda: _chain_exact(3, 8, 0.5, 1.0),
                      {2.0: 600_000, 4.0: 300_000}),
    "su3_jq2_open3": (lambda: _open_square_model(3, 3, 0.5, 1.0), lambda: _open_square_exact(3, 3, 0.5, 1.0),
                      {1.5: 1_000_000, 3.0: 300_000}),
}
_exact_cache: dict[str, ExactColour] = {}


def exact_colour_case(name):
    """The exact values of cluster ``name`` of :data:`CASES` (built once)."""
    if name not in _exact_cache:
        _exact_cache[name] = CASES[name][1]()
    return _exact_cache[name]
