"""Small S=1/2 clusters with their exact thermal values (qmc.validation.exact, written independently of the
engine) in the conventions of the bins, shared by the tests that hold the engine to them.

``CASES[name] = (model builder, exact builder, betas)``; :func:`exact_case` builds a cluster's exact values
once per test session.
"""

from __future__ import annotations

import numpy as np
from qmc.models import HeisenbergTerm, ProjectorProductTerm, build_lattice, compile_model

from qmc.validation.exact import (
    ExactSpectrum,
    SymmetryGroup,
    basis_states,
    bilayer_bonds,
    bilayer_translations,
    build_hamiltonian,
    chain_bonds,
    chain_translations,
    q2_plaquette_pairs,
    q3_columns,
    square_bonds,
    square_translations,
)


# ----------------------------------------------------------------------------- exact side
def _sz_bits(n):
    s = basis_states(n)
    return np.array([((s >> i) & 1) - 0.5 for i in range(n)])  # (n, 2^n) S^z values


def _columnar_group(Lx, Ly):
    """Translations by (2 tx, ty): the symmetry group of the columnar dimerization (complete characters)."""
    elements = [(tx, ty) for ty in range(Ly) for tx in range(0, Lx, 2)]
    perms = np.array([[((y + ty) % Ly) * Lx + (x + tx) % Lx for y in range(Ly) for x in range(Lx)]
                      for tx, ty in elements])
    irreps = [(m, n) for n in range(Ly) for m in range(Lx // 2)]
    chars = np.array([[np.exp(-2j * np.pi * (m * tx / Lx + n * ty / Ly)) for tx, ty in elements]
                      for m, n in irreps])
    return SymmetryGroup(perms, chars, irreps)


class Exact:
    """Exact values for one cluster: heis = [(J,i,j)], qterms = [(Q,[bonds])], twist bonds per direction."""

    def __init__(self, n, heis, qterms, group, phase, dirs, coords, lengths, vbs, equivalent=None):
        self.n = n
        self.equivalent = equivalent or {}
        self.heis, self.qterms, self.group = heis, qterms, group
        self.spec = ExactSpectrum(build_hamiltonian(n, heis, qterms), n, translations=group)
        sz = _sz_bits(n)
        ms = (phase[:, None] * sz).sum(0)
        self.ms = ms
        self.mz = sz.sum(0)
        self.dirs = dirs  # name -> list of bonds along it (oriented +1)
        sqn = np.zeros(1 << n)
        for a in range(coords.shape[1]):
            arg = 2 * np.pi * coords[:, a] / lengths[a]
            re = (phase[:, None] * np.cos(arg)[:, None] * sz).sum(0)
            im = (phase[:, None] * np.sin(arg)[:, None] * sz).sum(0)
            sqn += (re**2 + im**2) / n
        self.sqn = sqn / coords.shape[1]
        self.vbs = {}
        for name, bonds in vbs.items():  # bonds: list of (i, j, sign)
            d = sum(sgn * sz[i] * sz[j] for i, j, sgn in bonds) / n
            self.vbs[name] = d * d

    def twisted(self, bonds_along):
        def build(phi):
            tw = {b: phi for b in bonds_along}
            heis_b = {(i, j) for _, i, j in self.heis}
            q_b = {b for _, bl in self.qterms for b in bl}
            tw = {b: t for b, t in tw.items() if b in heis_b or b in q_b}
            return build_hamiltonian(self.n, self.heis, self.qterms, twist=tw)
        return build

    def stiffness(self, bonds_along, betas):
        """rho = (1/N) d^2F/dphi^2 at phi = 0 (exact second-order twist response, all betas at once)."""
        return self.spec.twist_stiffness(np.asarray(betas, dtype=float), self.twisted(bonds_along))

    def values(self, beta):
        if beta not in self._cache:
            self._cache[beta] = self._values(beta)
        return self._cache[beta]

    def _values(self, beta):
        n = self.n
        out = {
            "energy": self.spec.energy_per_site(beta),
            "specific_heat": self.spec.specific_heat_per_site(beta),
            "chi_uniform": self.spec.chi_uniform(beta),
            "m_stag2": self.spec.expect_diag(beta, (self.ms / n) ** 2),
            "chi_stag": self.spec.kubo_diag(beta, self.ms),
            "s_q_shifted": self.spec.expect_diag(beta, self.sqn),
        }
        for name, v in self.vbs.items():
            out[name] = self.spec.expect_diag(beta, v)
        out.update({f"stiffness/{name}": rho[beta] for name, rho in self._rho.items()})
        return out

    def prepare(self, betas):
        """Twist derivatives for all temperatures at once; equivalent directions share one evaluation."""
        betas = np.asarray(betas, dtype=float)
        self._rho = {}
        done = {}
        for name in self.dirs:
            key = self.equivalent.get(name, name)
            if key not in done:
                done[key] = dict(zip(betas.tolist(), np.atleast_1d(self.stiffness(self.dirs[key], betas)),
                                     strict=True))
            self._rho[name] = done[key]
        self._cache = {}
        return self


def _square_coords(Lx, Ly):
    return np.array([[x, y] for y in range(Ly) for x in range(Lx)], dtype=float)


def _square_phase(Lx, Ly):
    return np.array([1 - 2 * ((x + y) % 2) for y in range(Ly) for x in range(Lx)], dtype=float)


def _square_vbs(Lx, Ly):
    xb = [(y * Lx + x, y * Lx + (x + 1) % Lx, 1 - 2 * (x % 2)) for y in range(Ly) for x in range(Lx)]
    yb = [(y * Lx + x, ((y + 1) % Ly) * Lx + x, 1 - 2 * (y % 2)) for y in range(Ly) for x in range(Lx)]
    return {"vbs_x2": xb, "vbs_y2": yb}


def exact_square(L, J, Q=0.0, qshape=None, strong=None):
    xb, yb = square_bonds(L, L)
    heis = []
    for i, j in xb:
        x = i % L
        heis.append(((strong if strong is not None and x % 2 == 0 else J), i, j))
    heis += [(J, i, j) for i, j in yb]
    qterms = []
    if qshape == "q2":
        qterms = [(Q, b) for b in q2_plaquette_pairs(L, L)]
    elif qshape == "q3":
        qterms = [(Q, b) for b in q3_columns(L, L)]
    group = _columnar_group(L, L) if strong is not None else square_translations(L, L)
    # x and y are equivalent by the 90-degree rotation unless the columnar pattern breaks it
    equivalent = {} if strong is not None else {"y": "x"}
    return Exact(L * L, heis, qterms, group, _square_phase(L, L), {"x": xb, "y": yb},
                 _square_coords(L, L), [L, L], _square_vbs(L, L), equivalent)


def exact_chain(L, J):
    b = chain_bonds(L)
    phase = np.array([1 - 2 * (x % 2) for x in range(L)], dtype=float)
    vbs = {"vbs_x2": [(x, (x + 1) % L, 1 - 2 * (x % 2)) for x in range(L)]}
    return Exact(L, [(J, i, j) for i, j in b], [], chain_translations(L), phase, {"x": b},
                 np.arange(L, dtype=float)[:, None], [L], vbs)


def exact_bilayer(Lx, Ly, g):
    xb, yb, zb = bilayer_bonds(Lx, Ly)
    heis = [(1.0, i, j) for i, j in xb + yb] + [(g, i, j) for i, j in zb]
    n = 2 * Lx * Ly
    phase = np.array([1 - 2 * ((x + y + layer) % 2) for layer in range(2) for y in range(Ly)
                      for x in range(Lx)], dtype=float)
    coords = np.array([[x, y] for layer in range(2) for y in range(Ly) for x in range(Lx)], dtype=float)
    return Exact(n, heis, [], bilayer_translations(Lx, Ly, layer_swap=True), phase, {"x": xb, "y": yb},
                 coords, [Lx, Ly], {})


# ----------------------------------------------------------------------------- QMC side
CASES = {
    "chain12": (lambda: compile_model(build_lattice("chain", (12,)), [HeisenbergTerm("nn", 1.0)]),
                lambda: exact_chain(12, 1.0), (2.0, 8.0)),
    "square4": (lambda: compile_model(build_lattice("square", (4, 4)), [HeisenbergTerm("nn", 1.0)]),
                lambda: exact_square(4, 1.0), (1.5, 4.0)),
    "jq2_4": (lambda: compile_model(build_lattice("square", (4, 4)),
                                    [HeisenbergTerm("nn", 1.0), ProjectorProductTerm("plaquette-pair", 2.0)]),
              lambda: exact_square(4, 1.0, 2.0, "q2"), (1.0, 4.0)),
    "jq3_4": (lambda: compile_model(build_lattice("square", (4, 4)),
                                    [HeisenbergTerm("nn", 0.5),
                                     ProjectorProductTerm("column-of-three", 1.0)]),
              lambda: exact_square(4, 0.5, 1.0, "q3"), (2.0,)),
    "columnar4": (lambda: compile_model(build_lattice("square", (4, 4)),
                                        [HeisenbergTerm("columnar-strong", 2.0),
                                         HeisenbergTerm("columnar-weak", 1.0)]),
                  lambda: exact_square(4, 1.0, strong=2.0), (1.0, 3.0)),
    "bilayer4x2": (lambda: compile_model(build_lattice("bilayer", (4, 2)),
                                         [HeisenbergTerm("intra", 1.0), HeisenbergTerm("inter", 1.5)]),
                   lambda: exact_bilayer(4, 2, 1.5), (1.0, 3.0)),
}

_exact_cache: dict[str, Exact] = {}


def exact_case(name):
    """The exact values of cluster ``name`` of :data:`CASES` (built once, prepared for its betas)."""
    if name not in _exact_cache:
        _exact_cache[name] = CASES[name][1]().prepare(CASES[name][2])
    return _exact_cache[name]
