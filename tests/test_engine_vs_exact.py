"""SSE engine against exact diagonalization of small clusters (tests/exact_diag.py, written independently).

For each cluster and temperature the QMC bins are compared with the exact thermal values: energy,
specific heat (jackknife), chi_uniform, m_stag2, chi_stag, stiffness (twist second derivative), S(Q+dq)
and the columnar dimer order parameter.  Criterion: |QMC - exact| < 4 error bars, and the energy's relative
error bar must be below 0.2% so that the comparison has power.
"""

from __future__ import annotations

import numpy as np
import pytest
from qmc.models import HeisenbergTerm, ProjectorProductTerm, build_lattice, compile_model

from qmc.analysis.jackknife import jackknife
from qmc.chain.simulation import Simulation
from qmc.engine.rng import stream_seed
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

SIGMAS = 4.0


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


def _exact(name):
    if name not in _exact_cache:
        _exact_cache[name] = CASES[name][1]().prepare(CASES[name][2])
    return _exact_cache[name]


def run_qmc(model, beta, steps, seed_key, bins=100, estimators="plain"):
    """Bins of one chain; the plain estimators unless asked otherwise (the loop estimators are checked in
    tests/test_loop_estimators.py)."""
    sim = Simulation(model, beta, warmup_steps=5000, measure_steps=steps, bins=bins,
                     seed_words=stream_seed(20261202, seed_key), estimators=estimators)
    rows = sim.advance(10**12)
    return {name: rows[:, k] for k, name in enumerate(sim.bin_names)}


def _mean_err(x):
    return float(np.mean(x)), float(np.std(x, ddof=1) / np.sqrt(len(x)))


# the columnar cluster has only 8 translations, so its exact spectrum takes minutes: run it with -m slow
SLOW_CASES = {"columnar4"}
PARAMS = [pytest.param(name, beta, id=f"{name}-beta{beta}",
                       marks=[pytest.mark.slow] if name in SLOW_CASES else [])
          for name, (_, _, betas) in CASES.items() for beta in betas]


@pytest.mark.parametrize(("name", "beta"), PARAMS)
def test_thermal_averages_match_exact(name, beta):
    model = CASES[name][0]()
    exact = _exact(name).values(beta)
    bins = run_qmc(model, beta, steps=300_000, seed_key=f"{name}-{beta}")
    n = model.n_sites
    results = {}
    for key in exact:
        if key == "specific_heat":
            c, err, _ = jackknife(lambda a, b: (b - a * a - a) / n, bins["n_ops"], bins["n_ops_sq"])
            results[key] = (c, err)
        else:
            results[key] = _mean_err(bins[key])
    e, de = results["energy"]
    assert de / abs(e) < 2e-3, f"energy error bar too large to be a test: {de / abs(e):.2%}"
    # 1e-6 absolute floor: quantities that are exponentially small in a gapped cluster (e.g. chi_uniform at
    # low T) can have no fluctuation at all in a finite run, hence a zero error bar
    bad = {k: (results[k], exact[k]) for k in exact
           if abs(results[k][0] - exact[k]) > SIGMAS * results[k][1] + 1e-6}
    assert not bad, f"{name} beta={beta}: (QMC mean, error) vs exact: {bad}"


def test_bond_energies_add_up_to_energy():
    """Per-group energies sum to the total (both are <H>/N with constants)."""
    model = CASES["columnar4"][0]()
    bins = run_qmc(model, 2.0, steps=20_000, seed_key="groups", bins=10)
    total = bins["term_energy/columnar-strong"] + bins["term_energy/columnar-weak"]
    assert np.allclose(total, bins["energy"], rtol=0, atol=1e-12)
