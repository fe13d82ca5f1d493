"""The engine on the W-leg ladder (kind = "ladder") against exact diagonalization.

The reference Hamiltonian is written here from explicit loops over the ladder's legs and rungs
(site = x + L*y, leg bonds (x, y)-(x+1, y), rung bonds (x, y)-(x, y+1)), independently of models/, and
diagonalized by qmc/validation/exact (numpy/scipy only).  Checked: energy per site, the uniform
susceptibility chi_u = beta <(sum_i S^z_i)^2>/N, the staggered moment <(M_s/N)^2> with the staggered
sign (-1)^(x+y), and, with periodic legs, the stiffness along the legs rho_x = (1/N) d^2F/dphi^2 for a
twist phi on every leg bond (its winding estimator <w_x^2>/(beta N): Pollock and Ceperley, Phys. Rev. B
36, 8343 (1987)).  Fixed seeds; 4 standard errors of the bin means.
"""

from __future__ import annotations

from pathlib import Path

import h5py
import numpy as np
import pytest
from click.testing import CliRunner
from qmc.models import HeisenbergTerm, build_lattice, compile_model

from qmc.chain.simulation import Simulation
from qmc.cli.main import cli
from qmc.engine.rng import stream_seed
from qmc.validation.exact import ExactSpectrum, build_hamiltonian, stiffness_by_twist

#: name: (L, W, boundary, J_leg, J_rung, beta)
CASES = {
    "periodic4x2": (4, 2, "periodic", 1.0, 0.6, 2.0),
    "periodic4x3": (4, 3, "periodic", 1.0, 1.0, 1.5),
    "open3x2": (3, 2, "open", 1.0, 1.4, 2.0),
}


def ladder_bonds(L: int, W: int, periodic: bool) -> tuple[list[tuple[int, int]], list[tuple[int, int]]]:
    """(legs, rungs) of the L x W ladder as site pairs, site = x + L*y, written out by hand."""
    legs = [(x + L * y, (x + 1) % L + L * y) for y in range(W) for x in range(L) if periodic or x < L - 1]
    rungs = [(x + L * y, x + L * (y + 1)) for y in range(W - 1) for x in range(L)]
    return legs, rungs


def exact_values(L: int, W: int, periodic: bool, j_leg: float, j_rung: float, beta: float) -> dict:
    legs, rungs = ladder_bonds(L, W, periodic)
    n = L * W
    heis = [(j_leg, i, j) for i, j in legs] + [(j_rung, i, j) for i, j in rungs]
    spec = ExactSpectrum(build_hamiltonian(n, heis), n)
    s = np.arange(1 << n)
    sign = np.array([(-1) ** (i % L + i // L) for i in range(n)])
    m_s = sum(sign[i] * (((s >> i) & 1) - 0.5) for i in range(n))
    out = {"energy": spec.energy_per_site(beta), "chi_uniform": spec.chi_uniform(beta),
           "m_stag2": spec.expect_diag(beta, (m_s / n) ** 2)}
    if periodic:
        def twisted(phi: float):
            # S+_i S-_j moves an up spin from j = i + x to i: the hop goes along -x, phase -phi
            return build_hamiltonian(n, heis, twist={(i, j): -phi for i, j in legs})

        out["stiffness/x"] = stiffness_by_twist(twisted, n, beta)
    return out


@pytest.mark.parametrize("name", list(CASES))
def test_ladder_matches_exact(name: str) -> None:
    L, W, boundary, j_leg, j_rung, beta = CASES[name]
    lattice = build_lattice("ladder", (L, W), boundary)
    model = compile_model(lattice, [HeisenbergTerm("leg", j_leg), HeisenbergTerm("rung", j_rung)])
    exact = exact_values(L, W, boundary == "periodic", j_leg, j_rung, beta)
    assert exact["energy"] < 0 and exact["chi_uniform"] > 0
    sim = Simulation(model, beta, warmup_steps=5000, measure_steps=200_000, bins=100,
                     seed_words=stream_seed(2024, name))
    rows = sim.advance(10**9)
    bins = {k: rows[:, i] for i, k in enumerate(sim.bin_names)}
    assert ("stiffness/x" in bins) == (boundary == "periodic")
    bad = {}
    for key, ref in exact.items():
        mean = bins[key].mean()
        err = bins[key].std(ddof=1) / np.sqrt(len(bins[key]))
        if abs(mean - ref) > 4 * err + 1e-6:
            bad[key] = (mean, err, ref)
    e = bins["energy"]
    assert e.std(ddof=1) / np.sqrt(len(e)) / abs(e.mean()) < 3e-3  # the check has teeth
    assert not bad, f"{name}: (QMC mean, error, exact) {bad}"


_CONFIG = """\
[run]
name = "ladder"
output = "run-ladder"
seed = 5
[lattice]
kind = "ladder"
size = ["L", 2]
[[terms]]
type = "heisenberg"
bonds = "leg"
coupling = 1.0
[[terms]]
type = "heisenberg"
bonds = "rung"
coupling = 0.5
[scan]
beta = 2.0
L = {L}
[sampling]
warmup_steps = 100
measure_steps = 400
bins = 4
"""


def test_ladder_config_runs_and_odd_periodic_legs_are_refused(tmp_path: Path) -> None:
    """A config with kind = "ladder" runs; an odd periodic leg length is a user error (exit 2) that names
    the size entry, and no run directory is written."""
    good = tmp_path / "good.toml"
    good.write_text(_CONFIG.format(L=4))
    result = CliRunner().invoke(cli, ["run", str(good), "--quiet"])
    assert result.exit_code == 0, result.output
    (task,) = (tmp_path / "run-ladder" / "tasks").glob("*.h5")
    with h5py.File(task) as f:
        assert f["bins"]["energy"].shape == (4,)
        assert f["model"]["lattice_kind"][()] == b"ladder"
        assert [d.decode() for d in f["model"]["dir_names"][()]] == ["x"]  # the legs only
    bad = tmp_path / "bad.toml"
    bad.write_text(_CONFIG.format(L=5).replace("run-ladder", "run-odd"))
    result = CliRunner().invoke(cli, ["run", str(bad), "--quiet"])
    assert result.exit_code == 2
    assert "lattice.size[0]" in result.output and "even length along x" in result.output
    assert not (tmp_path / "run-odd").exists()
