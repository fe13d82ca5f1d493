"""The C yardstick of the speed benchmarks (benchmarks/c_reference/sse_ref.c) computes the right thing.

The engine's speed is judged against this C implementation of the same algorithm (benchmarks/c_compare.py),
so it must sample the same physics: on the 4x4 periodic square lattice at beta = 2 its energy per site
agrees with exact diagonalization (qmc/validation/exact, numpy/scipy, independent of both codes) within 4
error bars, for the Heisenberg model and for a J-Q2 point.  Skipped when no C compiler is installed.
Fixed seed: the C run is deterministic.
"""

from __future__ import annotations

import json
import shutil
import subprocess
from pathlib import Path

import pytest
from helpers.paths import REPO

from qmc.validation.exact import ExactSpectrum, build_hamiltonian
from qmc.validation.exact.lattices import q2_plaquette_pairs, square_bonds, square_translations

SOURCE = REPO / "benchmarks" / "c_reference" / "sse_ref.c"
CC = shutil.which("cc") or shutil.which("gcc") or shutil.which("clang")
pytestmark = pytest.mark.skipif(CC is None, reason="no C compiler")


@pytest.fixture(scope="module")
def exe(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("cref") / "sse_ref"
    subprocess.run([CC, "-O2", "-std=c99", "-o", str(out), str(SOURCE), "-lm"], check=True,
                   capture_output=True, text=True)
    return out


@pytest.mark.parametrize("J, Q", [(1.0, 0.0), (0.3, 1.0)])
def test_energy_matches_exact_diagonalization(exe, J, Q):
    beta = 2.0
    run = subprocess.run([str(exe), "4", repr(beta), repr(J), repr(Q), "2000", "40000", "11"], check=True,
                         capture_output=True, text=True)
    got = json.loads(run.stdout)
    xb, yb = square_bonds(4, 4)
    q = [(Q, pair) for pair in q2_plaquette_pairs(4, 4)] if Q else []
    h = build_hamiltonian(16, [(J, i, j) for i, j in xb + yb], q)
    exact = ExactSpectrum(h, 16, translations=square_translations(4, 4)).energy_per_site(beta)
    err = got["energy_per_site_err"]
    assert 0 < err < 2e-3 * abs(exact)
    assert abs(got["energy_per_site"] - exact) < 4 * err, (got["energy_per_site"], exact, err)
