"""The SU(N) order case of ``qmc validate --thorough`` (qmc/validation/colour_cases.py) and the one-sided
checks it uses (qmc/validation/checks.py).

Published facts checked by the case: the SU(N) Heisenberg model on the square lattice has Neel order for
N <= 4 and valence-bond order for N >= 5 (Harada, Kawashima and Troyer, PRL 90, 117203 (2003); Beach,
Alet, Mambrini and Capponi, PRB 80, 184401 (2009); see qmc/validation/references.py for what was checked).
Here: the pass rules on synthetic data, which must fail for the swapped phases, and (slow) the case itself
on L = 12, 24 (at L = 8 -> 16 the SU(5) Neel correlations still grow: their correlation length is not yet
small against 8).
"""

from __future__ import annotations

import io

import numpy as np
import pytest

from qmc.validation import references as refs
from qmc.validation.checks import SIGMAS, Check
from qmc.validation.colour_cases import sun_order_case
from qmc.validation.jobs import SimResult
from qmc.validation.runner import run_cases
from qmc.validation.table import format_reference, format_table

ONE = refs.short_ranged("Somebody, Journal 1, 1 (2000)")


def test_one_sided_checks():
    assert Check("grows", 2.0, 0.2, ONE, side=1).passed  # 5 error bars above 1
    assert not Check("grows too little", 1.5, 0.2, ONE, side=1).passed
    assert not Check("falls", 0.5, 0.01, ONE, side=1).passed
    assert Check("flat", 1.05, 0.02, ONE, side=-1).passed and Check("falls", 0.5, 0.01, ONE, side=-1).passed
    grows = Check("grows", 1.2, 0.02, ONE, side=-1)
    assert grows.deviation == pytest.approx(10.0) and not grows.passed
    assert Check("d", 1.0 + SIGMAS * 0.1 * (1 - 1e-9), 0.1, ONE, side=1).passed is False
    assert format_reference(Check("x", 2.0, 0.1, ONE, side=1)).startswith("> 1")
    assert format_reference(Check("x", 2.0, 0.1, ONE, side=-1)).startswith("<= 1")
    assert "one-sided rows" in format_table([Check("x", 2.0, 0.1, ONE, side=1)])


def _synthetic(case, neel_growing: bool):
    """Bins of every job: Neel or VBS correlations long-ranged (L^2 x order^2 ~ L^2), the other short-ranged
    (L^2 x order^2 constant), with 1% noise."""
    rng = np.random.default_rng(5)
    out = {}
    for job in case.jobs:
        L = int(job.key.split("L=")[1].split("/")[0])
        ordered, short = 0.01, 0.5 / L**2
        m2, vbs = (ordered, short) if neel_growing else (short, ordered)
        bins = {"m_stag2": m2 * (1 + 0.01 * rng.standard_normal(200)),
                "vbs_x2": 0.5 * vbs * (1 + 0.01 * rng.standard_normal(200)),
                "vbs_y2": 0.5 * vbs * (1 + 0.01 * rng.standard_normal(200))}
        out[job.key] = SimResult(bins, L * L, L, float(L), 1.0)
    return out


@pytest.mark.parametrize("N", [4, 5])
def test_order_case_passes_for_its_phase_and_fails_for_the_other(N):
    case = sun_order_case(N, (8, 12, 16), measure=1000, bins=200)
    right = case.evaluate(_synthetic(case, neel_growing=N <= 4))
    assert [c.case for c in right] == [f"SU({N}) Neel growth Y(16)/Y(8)", f"SU({N}) VBS growth Y(16)/Y(8)"]
    assert all(c.passed for c in right), format_table(right)
    assert {c.side for c in right} == {1, -1} and all(c.reference.source == refs.SUN_NEEL_VBS_SOURCE
                                                      for c in right)
    wrong = case.evaluate(_synthetic(case, neel_growing=N > 4))
    assert not any(c.passed for c in wrong), format_table(wrong)
    with pytest.raises(ValueError, match="must contain 8 and 16"):
        sun_order_case(N, (12, 16))


@pytest.mark.slow
def test_order_case_on_small_lattices():
    cases = [sun_order_case(N, (12, 24), warmup=2000, measure=20_000) for N in (4, 5)]
    checks = run_cases(cases, workers=1, stream=io.StringIO())
    assert len(checks) == 4 and all(c.passed for c in checks), format_table(checks)
