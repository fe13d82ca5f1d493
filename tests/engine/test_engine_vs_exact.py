"""SSE engine against exact diagonalization of small clusters (tests/exact_diag.py, written independently).

For each cluster and temperature the QMC bins are compared with the exact thermal values: energy,
specific heat (jackknife), chi_uniform, m_stag2, chi_stag, stiffness (twist second derivative), S(Q+dq)
and the columnar dimer order parameter.  Criterion: |QMC - exact| < 4 error bars, and the energy's relative
error bar must be below 0.2% so that the comparison has power.
"""

from __future__ import annotations

import numpy as np
import pytest
from helpers.chains import estimates_of, off_by_more_than_sigmas, run_qmc
from helpers.exact_clusters import CASES
from helpers.exact_clusters import exact_case as _exact

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
    results = estimates_of(bins, exact, model.n_sites)
    e, de = results["energy"]
    assert de / abs(e) < 2e-3, f"energy error bar too large to be a test: {de / abs(e):.2%}"
    # 1e-6 absolute floor: quantities that are exponentially small in a gapped cluster (e.g. chi_uniform at
    # low T) can have no fluctuation at all in a finite run, hence a zero error bar
    bad = off_by_more_than_sigmas(results, exact, 1e-6)
    assert not bad, f"{name} beta={beta}: (QMC mean, error) vs exact: {bad}"


def test_bond_energies_add_up_to_energy():
    """Per-group energies sum to the total (both are <H>/N with constants)."""
    model = CASES["columnar4"][0]()
    bins = run_qmc(model, 2.0, steps=20_000, seed_key="groups", bins=10)
    total = bins["term_energy/columnar-strong"] + bins["term_energy/columnar-weak"]
    assert np.allclose(total, bins["energy"], rtol=0, atol=1e-12)
