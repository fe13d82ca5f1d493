"""The SU(N) colour vertex kind against exact diagonalization (qmc/validation/exact/colours.py, written
independently of the engine and of models/).

Clusters: SU(3) and SU(4) chains (H = -J sum P), an SU(3) J-Q chain (H = -J sum P_{x,x+1}
- Q sum P_{x,x+1} P_{x+2,x+3}, given as a user shape), an SU(3) J-Q2 cluster of 3x3 sites with open
boundaries; each at several temperatures.  Compared: energy, specific heat (jackknife), m_stag2, chi_stag,
chi_uniform, s_q_shifted, the dimer order parameter and, on the periodic chains, the stiffness of colour 0
(exact: second derivative of the free energy in the twist).  Criterion: |QMC - exact| < 4 error bars, and the
energy's relative error bar must be below 0.3% so that the comparison has power.  The exact module itself is
checked at N = 2 against the S = 1/2 reference (qmc/validation/exact/clusters.py) in
tests/engine/test_colour_kind.py.
"""

from __future__ import annotations

import pytest
from helpers.chains import estimates_of, off_by_more_than_sigmas, run_qmc
from helpers.colour_clusters import CASES
from helpers.colour_clusters import exact_colour_case as _exact


@pytest.mark.parametrize(("name", "beta"), [pytest.param(n, b, id=f"{n}-beta{b}") for n, c in CASES.items()
                                            for b in c[2]])
def test_colour_averages_match_exact(name, beta):
    model = CASES[name][0]()
    exact = _exact(name).values(beta)
    bins = run_qmc(model, beta, steps=CASES[name][2][beta], seed_key=f"colour-{name}-{beta}")
    results = estimates_of(bins, exact, model.n_sites)
    e, de = results["energy"]
    assert de / abs(e) < 3e-3, f"energy error bar too large to be a test: {de / abs(e):.2%}"
    # 1e-5 absolute floor: a quantity with no fluctuation in a finite run has a zero error bar (at high
    # temperature a 6-site chain winds about once in 10^5 steps: stiffness ~ 1e-6)
    bad = off_by_more_than_sigmas(results, exact, 1e-5)
    assert not bad, f"{name} beta={beta}: (QMC mean, error) vs exact: {bad}"
