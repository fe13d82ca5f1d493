"""Tests of the reference-check suite ``qmc validate`` (qmc.validation.suite, qmc.validation).

References used here: closed-form ground states of the 2- and 4-site rings (-3J/2 and -2J), the
exact diagonalization of qmc.validation.exact (itself tested in test_exact_diag.py), the conformal-field-
theory amplitude pi^2/12 of the chain's 1/L^2 energy correction (Affleck, Gepner, Schulz and Ziman,
J. Phys. A 22, 511 (1989); Blote, Cardy and Nightingale, PRL 56, 742 (1986); from memory) and Hulthen's
1/4 - ln 2 (Ark. Mat. Astron. Fys. 26A, 1 (1938)).
"""

from __future__ import annotations

import io
import math
import re
import subprocess
import sys

import numpy as np
import pytest

from qmc.analysis import error_estimate
from qmc.analysis.powerfit import fit_powers
from qmc.errors import UserError
from qmc.validation import references as refs
from qmc.validation.cases import Case, build_cases, chain_energy_case, cluster_case, square_ground_state_cases
from qmc.validation.checks import SIGMAS, Check, failed_check
from qmc.validation.exact import (
    ExactSpectrum,
    build_hamiltonian,
    chain_bonds,
    chain_ground_state_energy,
    chain_translations,
    cluster_observables,
    stiffness_by_twist,
)
from qmc.validation.jobs import ExactJob, SimResult
from qmc.validation.progress import SuiteProgress
from qmc.validation.runner import collect_jobs, run_cases
from qmc.validation.suite import run_validation
from qmc.validation.table import HEADER, format_reference, format_table, format_value

EXACT = refs.computed(1.0)


# ------------------------------------------------------------------------------------------ pass rule
def test_check_pass_rule_and_deviation():
    ok = Check("a", 1.3, 0.1, EXACT)
    assert ok.deviation == pytest.approx(3.0) and ok.passed
    wrong = Check("b", 1.3, 0.05, EXACT)  # 6 error bars away: a deliberately wrong reference
    assert wrong.deviation == pytest.approx(6.0) and not wrong.passed
    # systematic allowance and reference uncertainty add in quadrature to the statistical error
    ref = refs.Reference(1.0, 0.3, "Some, Journal 1, 1 (2000)")
    c = Check("c", 3.0, 0.3, ref, systematic=0.3 * math.sqrt(2.0))
    assert c.sys == pytest.approx(math.sqrt(0.09 * 3))
    assert c.sigma == pytest.approx(0.6)
    assert c.deviation == pytest.approx(2.0 / 0.6) and c.passed
    assert Check("d", 1.0 + SIGMAS * 0.1 * (1 + 1e-9), 0.1, EXACT).passed is False
    for bad in (Check("e", float("nan"), 0.1, EXACT), Check("f", 1.0, float("nan"), EXACT),
                Check("g", 1.0, 0.0, EXACT), failed_check("h", EXACT, "job failed")):
        assert not bad.passed


def test_references_carry_sources():
    published = [refs.CHAIN_GROUND_STATE_ENERGY, refs.SQUARE_GROUND_STATE_ENERGY,
                 refs.SQUARE_STAGGERED_MAGNETIZATION, refs.BILAYER_CRITICAL_COUPLING]
    for ref in published:
        assert re.search(r"[A-Z][a-z]+.*\d+.*\((19|20)\d\d\)$", ref.source), ref.source
    assert refs.CHAIN_GROUND_STATE_ENERGY.value == pytest.approx(0.25 - math.log(2), abs=1e-15)
    assert refs.computed(0.5).source == refs.ED_SOURCE
    with pytest.raises(ValueError):
        refs.Reference(1.0, 0.0, "  ")
    # every case of both suites names its reference; the published ones appear in the thorough suite
    for mode in ("quick", "thorough"):
        for case in build_cases(mode):
            assert case.reference.source and case.jobs
    sources = {c.reference.source for c in build_cases("thorough")}
    assert {r.source for r in published} <= sources


def test_unknown_mode_is_a_user_error():
    with pytest.raises(UserError, match="unknown mode 'fast'"):
        build_cases("fast")


# ------------------------------------------------------------------------------------------ table
def test_table_formatting():
    assert format_value(-0.4431234, 0.00012) == "-0.44312"
    assert format_value(0.30751, 0.0021) == "0.3075"
    assert format_value(2.0, 0.0) == "2"
    ref = refs.SQUARE_GROUND_STATE_ENERGY
    good = Check("square e0", -0.66941, 0.00002, ref, 0.00001, "fit note")
    bad = Check("wrong one", 1.5, 0.01, refs.computed(1.0), 0.0, "fit note")
    assert format_reference(good) == "-0.669437(5)"
    assert format_reference(bad) == "1.0000"  # one decimal more than the value
    text = format_table([good, bad])
    lines = text.splitlines()
    assert lines[0].split() == list(HEADER)
    assert set(lines[1].replace(" ", "")) == {"-"}
    assert "PASS" in lines[2] and ref.source in lines[2] and "-0.669437(5)" in lines[2]
    assert lines[3].rstrip().endswith("FAIL") and "50.00" in lines[3]
    assert text.count("fit note") == 1  # notes are listed once
    assert "FAILED: 1 of 2 checks" in text and "4 sqrt(error^2 + sys^2)" in text
    assert format_table([good]).endswith("all 1 checks passed")


def test_progress_eta_with_a_fake_clock():
    now = [0.0]
    out = io.StringIO()
    p = SuiteProgress([("a", 3.0), ("b", 1.0)], out, clock=lambda: now[0], tty=False, plain_interval=5.0)
    assert p.eta() is None
    now[0] = 1.0
    p.update("a", 0.01)  # too little work done for an estimate
    assert p.eta() is None and "ETA --:--:--" in p.line()
    now[0] = 10.0
    p.update("a", 2.0 / 3.0)  # half the work after 10 s
    assert p.share_done == pytest.approx(0.5) and p.eta() == pytest.approx(10.0)
    p.finish("a")
    assert "1/2 jobs done" in out.getvalue() and "ETA" in out.getvalue()


# ------------------------------------------------------------------------------------------ references
def test_exact_package_imports_only_numpy_and_scipy():
    code = ("import sys, qmc.validation.exact; "
            "bad = sorted(m for m in sys.modules if m.split('.')[0] in ('models', 'numba', 'h5py', 'click') "
            "or (m.startswith('qmc.') and not m.startswith('qmc.validation.exact') "
            "and m != 'qmc.validation')); print(bad); sys.exit(1 if bad else 0)")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stdout + proc.stderr


def test_bethe_ansatz_against_closed_forms_and_exact_diagonalization():
    assert chain_ground_state_energy(2) == pytest.approx(-0.75, abs=1e-12)  # the bond counted twice
    assert chain_ground_state_energy(4) == pytest.approx(-0.5, abs=1e-12)  # 4-site ring, E0 = -2J
    for L in (8, 12):
        H = build_hamiltonian(L, [(1.0, i, j) for i, j in chain_bonds(L)])
        e0 = ExactSpectrum(H, L, translations=chain_translations(L), vectors=False).E0 / L
        assert chain_ground_state_energy(L) == pytest.approx(e0, abs=1e-12)
    # approach to 1/4 - ln 2 with the conformal amplitude pi^2/12 (log corrections: 0.1% at L = 256)
    L = 256
    amp = (chain_ground_state_energy(L) - (0.25 - math.log(2))) * L * L
    assert amp == pytest.approx(-math.pi**2 / 12, rel=2e-3)
    with pytest.raises(ValueError):
        chain_ground_state_energy(7)


def test_power_fit_recovers_exact_data_and_chain_bias_is_small():
    L = np.array([8.0, 16.0, 32.0, 64.0])
    fit = fit_powers(L, 0.5 - 0.8 / L**2 + 3.0 / L**3, np.full(4, 1e-4), (2.0, 3.0))
    assert fit.limit == pytest.approx(0.5, abs=1e-12) and fit.chi2 < 1e-12
    assert fit(L[0]) == pytest.approx(0.5 - 0.8 / 64 + 3.0 / 512)
    # the allowance of the chain extrapolation: the 1/L^2 fit misses 1/4 - ln 2 by a few 1e-5 at these L
    exact = [chain_ground_state_energy(int(x)) for x in L]
    bias = fit_powers(L, exact, np.full(4, 1e-4), (2.0,)).limit - (0.25 - math.log(2))
    assert 1e-6 < abs(bias) < 5e-5
    with pytest.raises(ValueError):
        fit_powers(L[:1], [1.0], [0.1], (2.0,))


def test_square_ground_state_cases_evaluate_synthetic_bins():
    """The square-lattice e_0 and m_s checks on invented bins with known limits (m_s^2 = 3 * 0.0315,
    e_0 = -0.6694) and exactly the fitted forms: the checks return those limits and a zero shift."""
    sizes = (8, 12, 16, 24)
    e_case, m_case = square_ground_state_cases(sizes)
    results = {}
    for job in e_case.jobs:
        L = job.model.size[0]
        noise = np.array([-1.0, 1.0] * 50)
        bins = {"energy": -0.6694 + 0.7 / L**3 - 1.0 / L**4 + 1e-5 * noise,
                "m_stag2": 0.0315 * (1 + 1.5 / L + 0.4 / L**2) + 1e-5 * noise}
        results[job.key] = SimResult(bins, L * L, L, job.beta, 0.0)
    (e0,) = e_case.evaluate(results)
    (ms,) = m_case.evaluate(results)
    assert e0.value == pytest.approx(-0.6694, abs=1e-9) and e0.systematic < 1e-9
    assert ms.value == pytest.approx(math.sqrt(3 * 0.0315), abs=1e-8) and ms.systematic < 1e-8
    # error of m_s = 3 err(c_0) / (2 m_s), c_0 from the per-size means and binning errors of m_stag2
    m2 = [error_estimate(results[j.key].bins["m_stag2"]) for j in m_case.jobs]
    fit = fit_powers(sizes, [x.mean for x in m2], [x.error for x in m2], (1, 2))
    assert ms.error == pytest.approx(3 * fit.limit_err / (2 * math.sqrt(3 * fit.limit)), rel=1e-9)


def test_cluster_stiffness_matches_finite_difference():
    """Exact twist stiffness of a non-square J-Q2 cluster (x and y averaged) against the eigenvalue-only
    five-point difference of the free energy."""
    from qmc.validation.exact import q2_plaquette_pairs, square_bonds, square_translations

    beta = 1.5
    obs = cluster_observables("square", (4, 2), beta, J=1.0, Q=1.0)
    xb, yb = square_bonds(4, 2)
    heis = [(1.0, i, j) for i, j in xb + yb]
    q = [(1.0, p) for p in q2_plaquette_pairs(4, 2)]
    rho = [stiffness_by_twist(lambda phi, b=b: build_hamiltonian(8, heis, q, twist={x: phi for x in b}), 8,
                              beta, translations=square_translations(4, 2)) for b in (xb, yb)]
    assert obs["stiffness"] == pytest.approx(np.mean(rho), rel=1e-6)


# ------------------------------------------------------------------------------------------ runner
# Job functions must be importable in a worker process; builtins keep the workers light:
# dict(x=v) returns {"x": v}, and float(x=v) raises TypeError (float takes no keyword arguments).


def _const_case(name: str, key: str, value: float, ref: float) -> Case:
    job = ExactJob(key, dict, {"x": value}, 0.1)
    return Case(name, (job,), lambda r: [Check(name, r[key]["x"], 0.01, refs.computed(ref))],
                refs.computed(ref))


def test_wrong_reference_gives_exit_code_1(monkeypatch):
    import qmc.validation.cases as cases_mod

    lines: list[str] = []
    two = [_const_case("right", "k1", 1.0, 1.0), _const_case("wrong", "k2", 1.0, 2.0)]
    monkeypatch.setattr(cases_mod, "build_cases", lambda mode: two)
    assert run_validation("quick", lines.append, workers=1, stream=io.StringIO()) == 1
    text = "\n".join(lines)
    assert re.search(r"^right .*PASS$", text, re.M) and re.search(r"^wrong .*FAIL$", text, re.M)
    monkeypatch.setattr(cases_mod, "build_cases", lambda mode: [_const_case("right", "k1", 1.0, 1.0)])
    assert run_validation("quick", lines.append, workers=1, stream=io.StringIO()) == 0


def test_failing_jobs_and_evaluations_fail_their_cases_only():
    boom = Case("boom", (ExactJob("boom", float, {"x": 1.0}),), lambda r: [], EXACT)
    bad_eval = Case("bad eval", (ExactJob("k3", dict, {"x": 1.0}),), lambda r: [][0], EXACT)
    cases = [_const_case("fine", "k1", 1.0, 1.0), boom, bad_eval, _const_case("fine too", "k2", 2.0, 2.0)]
    for workers in (1, 2):  # in this process, and in spawned worker processes
        checks = run_cases(cases, workers=workers, stream=io.StringIO())
        assert [c.case for c in checks] == ["fine", "boom", "bad eval", "fine too"]
        assert [c.passed for c in checks] == [True, False, False, True]
        assert "job failed: boom: TypeError" in checks[1].note and "IndexError" in checks[2].note
    with pytest.raises(ValueError, match="share the key"):
        collect_jobs([_const_case("a", "same", 1.0, 1.0), _const_case("b", "same", 2.0, 2.0)])


def test_tiny_cluster_end_to_end():
    """A real QMC run (8-site chain, 20000 steps) against exact diagonalization, through the runner."""
    case = cluster_case("chain L=8", "chain", (8,), 2.0, warmup=1000, measure=20_000, bins=200)
    checks = run_cases([case], workers=1, stream=io.StringIO())
    assert [c.case.split(": ")[1] for c in checks] == ["energy", "specific_heat", "chi_uniform", "m_stag2",
                                                       "stiffness"]
    assert all(c.passed and c.error > 0 for c in checks), format_table(checks)
    energy = checks[0]
    assert energy.error < 0.01 * abs(energy.reference.value)  # the comparison has power


def test_chain_case_rows_and_allowance():
    case = chain_energy_case((8, 16), measure=4000, bins=100)
    checks = run_cases([case], workers=1, stream=io.StringIO())
    assert [c.case for c in checks] == ["chain L=8 beta=32: energy", "chain L=16 beta=64: energy",
                                        "chain e_inf (L=8..16)"]
    assert checks[-1].reference is refs.CHAIN_GROUND_STATE_ENERGY
    assert 1e-5 < checks[-1].systematic < 2e-4  # bias of the 1/L^2 fit on the Bethe-ansatz energies
    assert all(c.passed for c in checks), format_table(checks)


@pytest.mark.slow
def test_quick_suite_passes():
    out: list[str] = []
    assert run_validation("quick", out.append, stream=io.StringIO()) == 0, "\n".join(out)
