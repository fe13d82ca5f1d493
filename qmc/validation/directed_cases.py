"""Checks of the directed-loop path (``xxz`` and ``field`` terms) for ``qmc validate``.

* :func:`xxz_cluster_case` -- a periodic chain or square cluster with XXZ bonds in a uniform field against the
  exact diagonalization of :mod:`qmc.validation.exact.xxz` (energy, specific heat, magnetization,
  chi_uniform, m_stag2, stiffness).
* :func:`saturation_case` -- the square-lattice Heisenberg antiferromagnet (S = 1/2) is fully polarised for
  h >= h_s = 2 z J S = 4 J (common practice, no source): <S^z> = 1/2 above h_s, up to thermally excited
  magnons.  Each magnon mode has energy >= h - h_s =: D, so the missing magnetisation per site is at most
  the Bose occupation 1/(e^{beta D} - 1): the stated systematic allowance.
* :func:`kt_case` -- the S = 1/2 XY model H = -J sum (S^x S^x + S^y S^y) on the square lattice has its
  Kosterlitz-Thouless transition at T = 0.3427(2) J (Harada and Kawashima, Phys. Rev. B 55, R11949 (1997),
  from memory), where the stiffness jumps to the universal value 2 T / pi (Nelson and Kosterlitz, Phys. Rev.
  Lett. 39, 1201 (1977), from memory).  For each L the temperature T*(L) where rho_s(T) crosses 2T/pi is
  found by linear interpolation; T*(L) = T_KT + a / ln(L)^2 (the logarithmic approach of the KT
  renormalisation flow, common practice, no source) is fitted and the change of T_KT when the smallest L
  is left out is the systematic allowance.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from qmc.analysis import derived_estimates
from qmc.analysis.powerfit import fit_powers
from qmc.models import FieldTerm, XXZTerm

from .case import Case, mean_error, merged, sim_jobs
from .checks import Check
from .exact.xxz import xxz_observables
from .jobs import ExactJob, ModelSpec
from .references import Reference, computed

__all__ = ["xxz_cluster_case", "saturation_case", "kt_case", "KT_TEMPERATURE", "SATURATION"]

XXZ_OBSERVABLES = ("energy", "specific_heat", "magnetization", "chi_uniform", "m_stag2", "stiffness")

KT_TEMPERATURE = Reference(0.3427, 0.0002, "Harada and Kawashima, Phys. Rev. B 55, R11949 (1997)")
"""T_KT / J of the S = 1/2 square-lattice XY model, value and error bar from memory."""
SATURATION = Reference(0.5, 0.0, "saturation field h_s = 2 z J S = 4 J of the square lattice")
"""<S^z> per site above the saturation field (common practice, no source)."""


def xxz_cluster_case(label: str, kind: str, size: Sequence[int], beta: float, J: float, delta: float,
                     h: float, *, warmup: int = 2000, measure: int = 200_000, bins: int = 200,
                     max_seconds: float | None = None) -> Case:
    """XXZ bonds (J, delta) with a uniform field h on a periodic chain or square cluster vs exact
    diagonalization at the same beta."""
    size = tuple(int(s) for s in size)
    n_sites = int(np.prod(size))
    spec = ModelSpec(kind, size, (XXZTerm("nn", J, delta), FieldTerm(h)))
    sims = sim_jobs(f"xxz/{label}/beta={beta:g}", spec, beta, warmup, measure, bins, n_sites,
                    0.5 * abs(J) * (1 + abs(delta)) + 0.3 * abs(h) + 0.3, max_seconds)
    exact = ExactJob(f"exact-xxz/{label}/beta={beta:g}", xxz_observables,
                     dict(kind=kind, size=size, beta=float(beta), couplings={"nn": (J, delta)}, h=h),
                     seconds=3e-3 * 2.0**n_sites)
    name = f"{label} beta={beta:g}"
    note = (f"{name}: directed-loop QMC ({sum(j.measure for j in sims)} steps) vs exact diagonalization "
            "(S^z and momentum blocks); specific heat and chi_uniform by jackknife")

    def evaluate(results: Mapping[str, Any]) -> list[Check]:
        res = merged(results, sims)
        ref = results[exact.key]
        derived = derived_estimates(res.bins, res.n_sites, res.linear_size,
                                    names=("specific_heat", "chi_uniform"), beta=res.beta)
        out = []
        for obs in XXZ_OBSERVABLES:
            value, err = ((derived[obs].value, derived[obs].error) if obs in derived
                          else mean_error(res.bins[obs]))
            out.append(Check(f"{name}: {obs}", value, err, computed(ref[obs]), 0.0, note))
        return out

    return Case(name, sims + (exact,), evaluate, computed(float("nan")))


def saturation_case(L: int, fields: Sequence[float], beta: float, *, warmup: int = 2000,
                    measure: int = 20_000, bins: int = 100, max_seconds: float | None = None) -> Case:
    """<S^z> per site of the L x L Heisenberg antiferromagnet (xxz, delta = 1) at fields h >= 4 J."""
    jobs = {h: sim_jobs(f"saturation/L={L}/h={h:g}/beta={beta:g}",
                        ModelSpec("square", (L, L), (XXZTerm("nn", 1.0, 1.0), FieldTerm(h))), beta, warmup,
                        measure, bins, L * L, 1.0 + 0.5 * h, max_seconds) for h in fields}
    name = f"square saturation (L={L})"

    def evaluate(results: Mapping[str, Any]) -> list[Check]:
        out = []
        for h, sims in jobs.items():
            value, err = mean_error(merged(results, sims).bins["magnetization"])
            gap = h - 4.0
            thermal = 1.0 / math.expm1(beta * gap) if gap > 0 else float("inf")
            note = (f"saturation: <S^z> per site at h = {h:g} J, beta = {beta:g}; sys = Bose occupation "
                    f"1/(e^(beta (h - 4J)) - 1) of the lowest magnon")
            out.append(Check(f"square L={L} h={h:g}: magnetization", value, err, SATURATION, thermal, note))
        return out

    return Case(name, sum(jobs.values(), ()), evaluate, SATURATION)


def _crossing(temps: np.ndarray, rho: np.ndarray, drho: np.ndarray) -> tuple[float, float]:
    """T where rho(T) - 2T/pi changes sign (linear interpolation between the bracketing points) and its
    error from the two points' error bars."""
    f = rho - 2.0 * temps / math.pi
    k = np.flatnonzero(np.sign(f[:-1]) != np.sign(f[1:]))
    if k.size != 1:
        raise ValueError(f"rho_s(T) crosses 2T/pi {k.size} times in T = {temps[0]}..{temps[-1]}")
    i = int(k[0])
    slope = (f[i + 1] - f[i]) / (temps[i + 1] - temps[i])
    t = temps[i] - f[i] / slope
    w = (t - temps[i]) / (temps[i + 1] - temps[i])
    err = math.hypot((1 - w) * drho[i], w * drho[i + 1]) / abs(slope)
    return t, err


def kt_case(sizes: Sequence[int], temps: Sequence[float], *, warmup: int = 2000, measure: int = 40_000,
            bins: int = 100, max_seconds: float | None = None) -> Case:
    """T_KT of the square-lattice S = 1/2 XY model (xxz with J = -1, delta = 0) from the stiffness
    crossings with 2T/pi (module docstring)."""
    sizes = sorted(int(L) for L in sizes)
    temps = sorted(float(t) for t in temps)
    jobs = {(L, T): sim_jobs(f"xy/L={L}/T={T:.4f}", ModelSpec("square", (L, L), (XXZTerm("nn", -1.0, 0.0),)),
                             1.0 / T, warmup, measure, bins, L * L, 1.0, max_seconds)
            for L in sizes for T in temps}
    name = f"XY T_KT (L={sizes[0]}..{sizes[-1]})"

    def evaluate(results: Mapping[str, Any]) -> list[Check]:
        t_star, dt_star = [], []
        for L in sizes:
            pairs = [mean_error(merged(results, jobs[L, T]).bins["stiffness"]) for T in temps]
            rho, drho = (np.array([p[k] for p in pairs]) for k in (0, 1))
            t, dt = _crossing(np.array(temps), rho, drho)
            t_star.append(t)
            dt_star.append(max(dt, 1e-6))
        x = [math.log(L) ** 2 for L in sizes]  # T* = T_KT + a / ln(L)^2: fit in 1/x with power 1
        fit = fit_powers(x, t_star, dt_star, (1.0,))
        sys = abs(fit_powers(x[1:], t_star[1:], dt_star[1:], (1.0,)).limit - fit.limit) if len(x) > 3 else 0.0
        listed = ", ".join(f"L={L}: {t:.4f}({d:.4f})" for L, t, d in zip(sizes, t_star, dt_star, strict=True))
        note = (f"XY T_KT: crossings of rho_s(T) with 2T/pi ({listed}), fit T* = T_KT + a/ln(L)^2; sys = "
                f"change when the smallest L is left out")
        return [Check(name, fit.limit, fit.limit_err, KT_TEMPERATURE, sys, note)]

    return Case(name, tuple(j for js in jobs.values() for j in js), evaluate, KT_TEMPERATURE)
