"""The checks of ``qmc validate``: which simulations each case runs and how it compares them.

A :class:`Case` lists its jobs (:mod:`qmc.validation.jobs`) and an ``evaluate`` function that turns their
results into :class:`~qmc.validation.checks.Check` rows.  Case families (builders below):

* :func:`cluster_case` -- a small periodic cluster at one temperature against exact diagonalization
  computed on the fly (energy, specific heat, chi_uniform, m_stag2, stiffness).
* :func:`chain_energy_case` -- periodic Heisenberg chains at beta = 4L: each size against its Bethe-ansatz
  ground-state energy, and the extrapolation e(L) = e_inf - a/L^2 against 1/4 - ln 2.
* :func:`square_ground_state_cases` -- square-lattice Heisenberg model at low temperature: e_0 and m_s by
  finite-size extrapolation against Sandvik (1997) and Sandvik and Evertz (2010).
* :func:`bilayer_critical_case` -- the bilayer's critical J_inter/J_intra bracketed by the crossings of the
  Binder ratio and of rho_s L, against Wang, Beach and Sandvik (2006).
* :func:`qmc.validation.colour_cases.sun_order_case` -- the SU(N) Heisenberg model: Neel order for N = 4,
  valence-bond order for N = 5 (Harada, Kawashima and Troyer 2003; Beach, Alet, Mambrini and Capponi 2009).
* :mod:`qmc.validation.directed_cases` -- XXZ clusters in a field against exact diagonalization, the
  saturation field of the square lattice, the XY model's Kosterlitz-Thouless temperature.

:func:`build_cases` assembles the ``quick`` and ``thorough`` suites.  Statistical errors: binning analysis
of the bins (:func:`qmc.analysis.error_estimate`), jackknife with binning for ratios
(:func:`qmc.analysis.derived_estimates`), parametric bootstrap for crossings
(:func:`qmc.analysis.find_crossing`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from qmc.analysis import derived_estimates, find_crossing
from qmc.analysis.powerfit import drop_smallest_shift, fit_powers
from qmc.analysis.size_extrapolation import default_powers, full_vector_magnetisation
from qmc.errors import UserError
from qmc.models import HeisenbergTerm, ProjectorProductTerm

from .case import Case, mean_error, merged, sim_jobs
from .checks import Check
from .colour_cases import sun_order_case
from .directed_cases import kt_case, saturation_case, xxz_cluster_case
from .exact.bethe import chain_ground_state_energy
from .exact.clusters import cluster_observables
from .jobs import ExactJob, ModelSpec, SimJob
from .references import (
    BETHE_SOURCE,
    BILAYER_CRITICAL_COUPLING,
    CHAIN_FINITE_SIZE_SOURCE,
    CHAIN_GROUND_STATE_ENERGY,
    SQUARE_GROUND_STATE_ENERGY,
    SQUARE_STAGGERED_MAGNETIZATION,
    computed,
)

__all__ = [
    "MODES",
    "Case",
    "bilayer_critical_case",
    "build_cases",
    "chain_energy_case",
    "cluster_case",
    "square_ground_state_cases",
    "square_beta",
]

MODES = ("quick", "thorough")
CLUSTER_OBSERVABLES = ("energy", "specific_heat", "chi_uniform", "m_stag2", "stiffness")


# ------------------------------------------------------------------------------------------ ED clusters
def _cluster_model(kind: str, size: tuple[int, ...], J: float, Q: float, J_inter: float) -> ModelSpec:
    if kind == "chain":
        terms = (HeisenbergTerm("nn", J),)
    elif kind == "square":
        terms = (HeisenbergTerm("nn", J),) + ((ProjectorProductTerm("plaquette-pair", Q),) if Q else ())
    elif kind == "bilayer":
        terms = (HeisenbergTerm("intra", J), HeisenbergTerm("inter", J_inter))
    else:
        raise ValueError(f"unknown cluster kind {kind!r}")
    return ModelSpec(kind, size, terms)


def cluster_case(label: str, kind: str, size: Sequence[int], beta: float, *, J: float = 1.0, Q: float = 0.0,
                 J_inter: float = 0.0, warmup: int = 2000, measure: int = 100_000, bins: int = 200,
                 max_seconds: float | None = None) -> Case:
    """QMC of a small cluster against exact diagonalization at the same ``beta`` (see module docstring)."""
    size = tuple(int(s) for s in size)
    n_sites = int(np.prod(size)) * (2 if kind == "bilayer" else 1)
    spec = _cluster_model(kind, size, J, Q, J_inter)
    density = 0.3 * (abs(J) * (1 if kind == "chain" else 2) + abs(J_inter) + 2 * abs(Q)) + 0.3
    sims = sim_jobs(f"cluster/{label}/beta={beta:g}", spec, beta, warmup, measure, bins, n_sites, density,
                 max_seconds)
    exact = ExactJob(f"exact/{label}/beta={beta:g}", cluster_observables,
                     dict(kind=kind, size=size, beta=float(beta), J=J, Q=Q, J_inter=J_inter),
                     seconds=3e-4 * 2.0**n_sites)
    name = f"{label} beta={beta:g}"
    note = (f"{name}: QMC ({sum(j.measure for j in sims)} steps) vs exact diagonalization at the same "
            f"temperature; stiffness = (1/N) d2F/dphi2 for a twist along x (x, y averaged if Lx != Ly), "
            f"specific heat by jackknife")

    def evaluate(results: Mapping[str, Any]) -> list[Check]:
        res = merged(results, sims)
        ref = results[exact.key]
        derived = derived_estimates(res.bins, res.n_sites, res.linear_size, names=("specific_heat",))
        out = []
        for obs in CLUSTER_OBSERVABLES:
            if obs == "specific_heat":
                value, err = derived[obs].value, derived[obs].error
            else:
                value, err = mean_error(res.bins[obs])
            out.append(Check(f"{name}: {obs}", value, err, computed(ref[obs]), 0.0, note))
        return out

    return Case(name, sims + (exact,), evaluate, computed(float("nan")))  # reference for a failure row


# ------------------------------------------------------------------------------------------ chain energy
def _chain_gap_floor(L: int) -> float:
    """Lower bound used for the lowest (triplet) gap of the periodic chain: half the spinon value
    pi^2 J / (2L) (des Cloizeaux and Pearson, Phys. Rev. 128, 2131 (1962), from memory); the exact gaps
    of L = 8..16 are 0.85-0.88 times that value (exact diagonalization)."""
    return math.pi**2 / (4.0 * L)


def chain_energy_case(sizes: Sequence[int], *, beta_per_L: float = 4.0, warmup: int = 2000,
                      measure: int = 40_000, bins: int = 200,
                      measure_for: Mapping[int, int] | None = None, max_seconds: float | None = None) -> Case:
    """Heisenberg chains L in ``sizes`` at beta = beta_per_L * L: each size against the Bethe ansatz and
    the extrapolated e_inf against Hulthen's 1/4 - ln 2.

    Finite-size form (conformal field theory): e(L) = e_inf - a/L^2 (fit weighted by the QMC errors).
    The logarithmic corrections make it inexact; its systematic error is measured by applying the same
    weighted fit to the exact Bethe-ansatz energies of the same sizes, and |fit - (1/4 - ln 2)| is the
    stated allowance.  Residual temperature: the allowance of each size is 3 D e^{-beta D}/L with D the
    gap floor of :func:`_chain_gap_floor` (the excess energy of the lowest triplet)."""
    sizes = sorted(int(L) for L in sizes)
    jobs = {}
    for L in sizes:
        spec = ModelSpec("chain", (L,), (HeisenbergTerm("nn", 1.0),))
        beta = beta_per_L * L
        jobs[L] = sim_jobs(f"chain/L={L}/beta={beta:g}", spec, beta, warmup,
                           (measure_for or {}).get(L, measure), bins, L, 0.7, max_seconds)
    name = "chain e0"
    listed = ", ".join(map(str, sizes))
    fit_note = (f"chain e_inf: weighted fit e(L) = e_inf - a/L^2 (leading CFT correction, "
                f"{CHAIN_FINITE_SIZE_SOURCE}) to L = {listed} at beta = {beta_per_L:g} L; "
                f"sys = bias of the same fit applied to the exact Bethe-ansatz energies (log corrections)")
    size_note = (f"chain e(L): QMC at beta = {beta_per_L:g} L vs the Bethe-ansatz ground state; sys = "
                 "thermal excess 3 D e^(-beta D)/L with D = pi^2/(4L)")

    def evaluate(results: Mapping[str, Any]) -> list[Check]:
        out = []
        e, de, exact = [], [], []
        for L in sizes:
            value, err = mean_error(merged(results, jobs[L]).bins["energy"])
            gap, beta = _chain_gap_floor(L), beta_per_L * L
            thermal = 3.0 * gap * math.exp(-beta * gap) / L
            ref = chain_ground_state_energy(L)
            e.append(value)
            de.append(err)
            exact.append(ref)
            out.append(Check(f"chain L={L} beta={beta:g}: energy", value, err, computed(ref, BETHE_SOURCE),
                             thermal, size_note))
        fit = fit_powers(sizes, e, de, (2.0,))
        bias = fit_powers(sizes, exact, de, (2.0,)).limit - CHAIN_GROUND_STATE_ENERGY.value
        out.append(Check(f"chain e_inf (L={sizes[0]}..{sizes[-1]})", fit.limit, fit.limit_err,
                         CHAIN_GROUND_STATE_ENERGY, abs(bias), fit_note))
        return out

    return Case(name, sum(jobs.values(), ()), evaluate, CHAIN_GROUND_STATE_ENERGY)


# ------------------------------------------------------------------------------------------ square lattice
def square_beta(L: int) -> float:
    """Inverse temperature of the ground-state runs: max(64, L^2/2).

    The lowest excitations of a finite antiferromagnet are the rotor ('tower of states') levels
    E_S = S(S+1) / (2 chi_perp N) with chi_perp ~ 0.066 / J (Anderson, Phys. Rev. 86, 694 (1952);
    Neuberger and Ziman, Phys. Rev. B 39, 2608 (1989); citations and value from memory), so the triplet
    gap is D ~ 15 J / N.  beta = N/2 gives beta D ~ 7.6 and an energy excess 3 D e^{-beta D} / N below
    1e-6 per site for L >= 12; beta >= 64 covers the smaller sizes."""
    return float(max(64.0, L * L / 2.0))


def _extrapolate(sizes: Sequence[int], y: Sequence[float], dy: Sequence[float],
                 powers: tuple[float, ...]) -> tuple[float, float, float]:
    """Limit of the fit y(L) = y_inf + sum_k c_k L^-p_k, its error, and the systematic allowance: the change
    of the limit when the smallest size is left out (stability against the neglected higher-order
    corrections, common practice, no source); 0 when too few sizes remain for a fit with dof >= 1."""
    fit = fit_powers(sizes, y, dy, powers)
    shift = drop_smallest_shift(sizes, y, dy, powers, full=fit).value
    return fit.limit, fit.limit_err, abs(shift) if math.isfinite(shift) else 0.0


def square_ground_state_cases(sizes: Sequence[int], *, warmup: int = 5000, measure: int = 40_000,
                              bins: int = 200, measure_for: Mapping[int, int] | None = None,
                              max_seconds: float | None = None) -> list[Case]:
    """Square-lattice Heisenberg L x L at beta = :func:`square_beta`: e_0 and m_s by extrapolation.

    e(L) = e_inf + a/L^3 + b/L^4 (leading L^-3 correction of the energy: Neuberger and Ziman,
    Phys. Rev. B 39, 2608 (1989), from memory).  m_s^2(L) = 3 m_stag2(L) (rotational average of the
    singlet ground state: the z component carries 1/3 of <M_s.M_s>), fitted with
    m_s^2(L) = m_s^2 + a/L + b/L^2; m_s = sqrt(m_s^2).  Systematic allowance of both: the change of the
    limit when the smallest size is left out (see :func:`_extrapolate`).  Powers and m_s are those of
    ``qmc analyze --extrapolate`` (:mod:`qmc.analysis.size_extrapolation`)."""
    sizes = sorted(int(L) for L in sizes)
    jobs = {}
    for L in sizes:
        spec = ModelSpec("square", (L, L), (HeisenbergTerm("nn", 1.0),))
        jobs[L] = sim_jobs(f"square/L={L}/beta={square_beta(L):g}", spec, square_beta(L), warmup,
                           (measure_for or {}).get(L, measure), bins, L * L, 1.2, max_seconds)
    span = f"L={sizes[0]}..{sizes[-1]}"
    e_note = (f"square e0: fit e(L) = e_inf + a/L^3 + b/L^4 to {span} at beta = max(64, L^2/2); sys = "
              f"change of e_inf when the smallest L is left out")
    m_note = (f"square m_s: m_s^2(L) = 3 m_stag2(L), fit m_s^2 + a/L + b/L^2 to {span}; sys = change of m_s "
              f"when the smallest L is left out")

    def series(results: Mapping[str, Any], obs: str) -> tuple[list[float], list[float]]:
        pairs = [mean_error(merged(results, jobs[L]).bins[obs]) for L in sizes]
        return [p[0] for p in pairs], [p[1] for p in pairs]

    def evaluate_energy(results: Mapping[str, Any]) -> list[Check]:
        e, de = series(results, "energy")
        value, err, sys = _extrapolate(sizes, e, de, default_powers("energy", 2)[0])
        return [Check(f"square e0 ({span})", value, err, SQUARE_GROUND_STATE_ENERGY, sys, e_note)]

    def evaluate_ms(results: Mapping[str, Any]) -> list[Check]:
        m2, dm2 = series(results, "m_stag2")
        value, err, sys = _extrapolate(sizes, m2, dm2, default_powers("m_stag2", 2)[0])
        fv = full_vector_magnetisation(value, err, sys)
        sys_ms = abs(fv["m_s_drop_smallest_shift"]) if math.isfinite(fv["m_s_drop_smallest_shift"]) else 0.0
        return [Check(f"square m_s ({span})", fv["m_s"], fv["m_s_err"], SQUARE_STAGGERED_MAGNETIZATION,
                      sys_ms, m_note)]

    all_jobs = sum(jobs.values(), ())
    return [Case("square e0", all_jobs, evaluate_energy, SQUARE_GROUND_STATE_ENERGY),
            Case("square m_s", all_jobs, evaluate_ms, SQUARE_STAGGERED_MAGNETIZATION)]


# ------------------------------------------------------------------------------------------ bilayer
def bilayer_critical_case(sizes: Sequence[int], couplings: Sequence[float], *, beta_per_L: float = 2.0,
                          warmup: int = 2000, measure: int = 20_000, bins: int = 200,
                          measure_for: Mapping[int, int] | None = None, seed: int = 7,
                          max_seconds: float | None = None) -> Case:
    """Bilayer J_intra = 1, J_inter = g on L x L x 2 at beta = beta_per_L * L for g in ``couplings``.

    For the largest pair of sizes (L, 2L) the crossings g_B of the Binder ratio <m_z^4>/<m_z^2>^2 and g_rho
    of rho_s L are located (local quadratic fits, parametric-bootstrap errors:
    :func:`qmc.analysis.find_crossing`).  The two estimators approach g_c from opposite sides (in trial
    runs of this suite at beta = 2L: g_B = 2.475(4) and g_rho = 2.526(3) for L = 8, 16), so g_c is
    bracketed: value = (g_B + g_rho)/2, sys = |g_B - g_rho|/2 (half the bracket)."""
    sizes = sorted(int(L) for L in sizes)
    couplings = sorted(float(g) for g in couplings)
    jobs: dict[tuple[int, float], tuple[SimJob, ...]] = {}
    for L in sizes:
        for g in couplings:
            spec = ModelSpec("bilayer", (L, L), (HeisenbergTerm("intra", 1.0), HeisenbergTerm("inter", g)))
            jobs[L, g] = sim_jobs(f"bilayer/L={L}/g={g:.4f}/beta={beta_per_L * L:g}", spec, beta_per_L * L,
                                  warmup, (measure_for or {}).get(L, measure), bins, 2 * L * L,
                                  0.3 * (4 + g) + 0.3, max_seconds)
    L1, L2 = (sizes[-2], sizes[-1]) if len(sizes) >= 2 else (sizes[0], sizes[0])
    name = f"bilayer g_c (L={L1},{L2})"

    def evaluate(results: Mapping[str, Any]) -> list[Check]:
        curves: dict[str, dict[int, tuple]] = {"binder_stag": {}, "stiffness_L": {}}
        for L in (L1, L2):
            rows = {q: ([], [], []) for q in curves}
            for g in couplings:
                res = merged(results, jobs[L, g])
                est = derived_estimates(res.bins, res.n_sites, res.linear_size, names=tuple(curves))
                for q in curves:
                    rows[q][0].append(g)
                    rows[q][1].append(est[q].value)
                    rows[q][2].append(est[q].error)
            for q in curves:
                curves[q][L] = tuple(np.array(a) for a in rows[q])
        found = {}
        rng = np.random.default_rng(seed)
        for q, c in curves.items():
            cr = find_crossing(c[L1], c[L2], L1, L2, rng=rng, degree=2, n_boot=400)
            if cr is None or not cr.ok:
                raise ValueError(f"no crossing of {q} between L={L1} and L={L2} inside g = "
                                 f"{couplings[0]}..{couplings[-1]}")
            found[q] = cr
        gb, gr = found["binder_stag"], found["stiffness_L"]
        value = 0.5 * (gb.g + gr.g)
        err = 0.5 * math.hypot(gb.g_err, gr.g_err)
        note = (f"bilayer g_c: crossings of (L={L1}, {L2}) at beta = {beta_per_L:g} L: Binder ratio "
                f"g = {gb.g:.4f}({gb.g_err:.4f}), rho_s L g = {gr.g:.4f}({gr.g_err:.4f}); value = midpoint, "
                f"sys = half the bracket")
        return [Check(name, value, err, BILAYER_CRITICAL_COUPLING, 0.5 * abs(gb.g - gr.g), note)]

    return Case(name, sum(jobs.values(), ()), evaluate, BILAYER_CRITICAL_COUPLING)


# ------------------------------------------------------------------------------------------ suites
def build_cases(mode: str) -> list[Case]:
    """The cases of ``mode`` ("quick": a few minutes on two cores; "thorough": hours, for a new install)."""
    if mode == "quick":
        return [
            chain_energy_case((8, 16, 32, 64), measure=60_000, measure_for={8: 200_000, 16: 100_000},
                              max_seconds=40.0),
            cluster_case("4x4 Heisenberg", "square", (4, 4), 4.0, measure=400_000),
            cluster_case("4x4 J-Q2 (Q/J=1)", "square", (4, 4), 2.0, Q=1.0, measure=400_000),
            xxz_cluster_case("chain L=12 xxz (delta=0.5, h=0.6)", "chain", (12,), 2.0, 1.0, 0.5, 0.6,
                             measure=400_000),
        ]
    if mode == "thorough":
        long = 1200.0  # split longer simulations into replicas (seconds, estimated)
        return [
            chain_energy_case((8, 16, 32, 64, 128), measure=200_000, measure_for={8: 1_000_000, 16: 500_000},
                              max_seconds=long),
            cluster_case("4x4 Heisenberg", "square", (4, 4), 4.0, measure=4_000_000, max_seconds=long),
            cluster_case("4x4 Heisenberg", "square", (4, 4), 1.0, measure=4_000_000, max_seconds=long),
            cluster_case("4x4 J-Q2 (Q/J=1)", "square", (4, 4), 2.0, Q=1.0, measure=4_000_000,
                         max_seconds=long),
            cluster_case("4x2 bilayer (g=2.5)", "bilayer", (4, 2), 2.0, J_inter=2.5, measure=4_000_000,
                         max_seconds=long),
            cluster_case("chain L=16", "chain", (16,), 4.0, measure=2_000_000, max_seconds=long),
            *square_ground_state_cases((8, 10, 12, 16, 20, 24, 32), measure=100_000,
                                       measure_for={8: 400_000, 10: 300_000, 12: 200_000}, max_seconds=long),
            bilayer_critical_case((8, 16, 32), [2.44 + 0.02 * k for k in range(8)], measure=40_000,
                                  max_seconds=long),
            *(sun_order_case(N, (8, 12, 16, 24, 32), measure=100_000, max_seconds=long) for N in (4, 5)),
            xxz_cluster_case("4x4 easy-plane (delta=0.5, h=0.8)", "square", (4, 4), 2.0, 1.0, 0.5, 0.8,
                             measure=2_000_000, max_seconds=long),
            xxz_cluster_case("4x4 easy-axis (delta=2, h=1.5)", "square", (4, 4), 2.0, 1.0, 2.0, 1.5,
                             measure=2_000_000, max_seconds=long),
            xxz_cluster_case("4x4 XY ferromagnet (h=0.3)", "square", (4, 4), 2.0, -1.0, 0.0, 0.3,
                             measure=2_000_000, max_seconds=long),
            saturation_case(16, (4.5, 5.0), 16.0, max_seconds=long),
            kt_case((8, 16, 32, 64), [0.32 + 0.01 * k for k in range(12)], max_seconds=long),
        ]
    raise UserError(f"unknown mode {mode!r}; choose one of {', '.join(MODES)}", "qmc validate")
