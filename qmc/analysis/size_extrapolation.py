"""Observables extrapolated to the thermodynamic limit L -> infinity (``qmc analyze --extrapolate``).

For every point of the other scan parameters, the per-size means y(L) +- dy(L) of an observable (binning
or jackknife errors of :mod:`qmc.analysis.summary`; copies of a task already merged) are fitted with

    y(L) = c_0 + sum_k c_k L^(-p_k)          (weights 1/dy^2, :func:`qmc.analysis.powerfit.fit_powers`)

and c_0 +- its error is reported with chi^2/dof, the number of sizes, and the stability column
``drop_smallest_shift`` = c_0(without the smallest L) - c_0(all sizes) with its statistical error
``drop_smallest_shift_err`` (:func:`qmc.analysis.powerfit.drop_smallest_shift`; both null when the reduced
fit would keep no degree of freedom).  A shift beyond two of its errors means the smallest size does not
follow the fitted form.  ``min_L`` leaves out the sizes below it.

The other scan parameters are all task parameters except the size, beta and the copy index
(:data:`qmc.analysis.scan.NOT_COUPLINGS`) and except parameters that follow the size one to one.  Beta:
when every size holds the same set of beta values (a scan at fixed temperatures) beta is one of the point's
parameters; otherwise (beta growing with L, e.g. beta = 2L, possibly with beta-doubled tasks) the largest
beta of each size is used, as a ground-state extrapolation needs.

Default powers (d = spatial dimension, read off the scan from N(L) ~ L^d; the defaults describe the
ordered antiferromagnet, the critical point and the disordered phase need the user's ``powers``):

* ``m_stag2``, d = 2: 1/L and 1/L^2.  Spin-wave theory (Huse, Phys. Rev. B 37, 2380 (1988)) and chiral
  perturbation theory (Neuberger and Ziman, Phys. Rev. B 39, 2608 (1989)) give m_s^2(L) = m_s^2 (1 + a/L +
  ...); the 1/L^2 term is the next order of the same expansion (citations and forms from memory).
* ``energy`` and the term-group energies, d = 2: 1/L^3 and 1/L^4.  The leading correction of the
  ground-state energy per site is ~ c/L^3 (zero-point energy of the spin waves; Neuberger and Ziman (1989),
  from memory); the next term of the same expansion is 1/L^4 (from memory).
* ``energy`` and the term-group energies, d = 1: 1/L^2, the conformal-field-theory correction
  -pi c v / (6 L^2) (Bloete, Cardy and Nightingale, Phys. Rev. Lett. 56, 742 (1986), from memory; the
  logarithmic corrections of the Heisenberg chain are not fitted).
* anything else: 1/L and 1/L^2, a second-order polynomial in 1/L (common practice, no source).

Full-vector order parameter: in an SU(2)-symmetric model (every Hamiltonian this version simulates:
Heisenberg terms and products of singlet projectors) the z component carries one third of <M_s.M_s>, so the
record of ``m_stag2`` also gives m_s^2 = 3 c_0 and m_s = sqrt(3 c_0) with
err(m_s) = 3 err(c_0) / (2 m_s), and the drop-smallest shift of m_s.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np

from .errors import AnalysisError
from .fit_quality import fit_quality
from .powerfit import drop_smallest_shift, fit_powers
from .scan import NOT_COUPLINGS

__all__ = [
    "FULL_VECTOR_OBSERVABLE",
    "SizeExtrapolation",
    "as_dicts",
    "default_powers",
    "extrapolate_sizes",
    "extrapolation_table",
    "format_extrapolations",
    "full_vector_magnetisation",
    "lattice_dimension",
    "parse_powers",
]

_SPIN_WAVE = ("spin-wave theory: m_s^2(L) = m_s^2 (1 + a/L + b/L^2 + ...) (Huse, PRB 37, 2380 (1988); "
              "Neuberger and Ziman, PRB 39, 2608 (1989); from memory)")
_ENERGY_2D = ("ground-state energy per site e(L) = e_0 + a/L^3 + b/L^4 (spin-wave zero-point energy; "
              "Neuberger and Ziman, PRB 39, 2608 (1989); from memory)")
_ENERGY_1D = ("conformal field theory: e(L) = e_0 - pi c v/(6 L^2) (Bloete, Cardy and Nightingale, "
              "PRL 56, 742 (1986); from memory)")
_GENERIC = "second-order polynomial in 1/L (common practice, no source)"
_ENERGY_NAMES = ("energy", "term_energy/")

FULL_VECTOR_OBSERVABLE = "m_stag2"
"""The observable whose record also carries the full-vector m_s^2 = 3 c_0 and m_s = sqrt(3 c_0)."""


def _is_energy(name: str) -> bool:
    return name == "energy" or any(name.startswith(p) for p in _ENERGY_NAMES[1:])


def default_powers(observable: str, dimension: int | None) -> tuple[tuple[float, ...], str]:
    """Default correction powers of ``observable`` in ``dimension`` dimensions and their origin (text)."""
    if dimension == 2 and observable == "m_stag2":
        return (1.0, 2.0), _SPIN_WAVE
    if dimension == 2 and _is_energy(observable):
        return (3.0, 4.0), _ENERGY_2D
    if dimension == 1 and _is_energy(observable):
        return (2.0,), _ENERGY_1D
    return (1.0, 2.0), _GENERIC


def parse_powers(text: str | None) -> tuple[float, ...] | None:
    """``"1,2"`` -> (1.0, 2.0); None stays None.  Raises AnalysisError for anything but distinct positive
    numbers."""
    if text is None:
        return None
    try:
        powers = tuple(float(p) for p in text.replace(" ", "").split(","))
    except ValueError:
        raise AnalysisError(f"expected numbers separated by commas, e.g. 1,2; got {text!r}",
                            "--powers") from None
    if not all(math.isfinite(p) and p > 0 for p in powers) or len(set(powers)) != len(powers):
        raise AnalysisError(f"the powers must be distinct positive numbers; got {text!r}", "--powers")
    return powers


def lattice_dimension(points: Sequence[dict]) -> int | None:
    """Spatial dimension d from N(L) ~ L^d between the smallest and largest size (None if not integral)."""
    sites = {float(p["L"]): float(p["info"]["n_sites"]) for p in points}
    if len(sites) < 2:
        return None
    lo, hi = min(sites), max(sites)
    d = math.log(sites[hi] / sites[lo]) / math.log(hi / lo)
    return round(d) if abs(d - round(d)) < 0.1 and round(d) >= 1 else None


@dataclass(frozen=True)
class SizeExtrapolation:
    """One fit: ``observable`` at the scan point ``params``; ``sizes``, ``values``, ``errors``, ``betas``
    are the data used; ``coef``/``coef_err`` are (c_0, c_1, ...); ``full_vector`` holds m_s^2, m_s with
    errors and the drop-smallest shift of m_s (``m_stag2`` of SU(2)-symmetric models only)."""

    observable: str
    params: dict[str, Any]
    limit: float
    limit_err: float
    powers: tuple[float, ...]
    powers_origin: str
    chi2_dof: float
    n_sizes: int
    drop_smallest_shift: float
    drop_smallest_shift_err: float
    sizes: tuple[float, ...]
    betas: tuple[float, ...]
    values: tuple[float, ...]
    errors: tuple[float, ...]
    coef: tuple[float, ...]
    coef_err: tuple[float, ...]
    full_vector: dict[str, float] | None = None


def _follows_size(points: Sequence[dict], key: str) -> bool:
    """True when ``key`` takes several values but one value per size."""
    by_size: dict[float, set] = {}
    for p in points:
        by_size.setdefault(p["L"], set()).add(repr(p["params"].get(key)))
    return len(set().union(*by_size.values())) > 1 and all(len(v) == 1 for v in by_size.values())


def _scan_groups(points: Sequence[dict], warnings: list[str]) -> list[tuple[dict, dict[float, dict]]]:
    """``[(params, {L: point})]``: one entry per point of the other scan parameters (see module docstring)."""
    keys = sorted(set().union(*(p["params"] for p in points)) - set(NOT_COUPLINGS))
    follow = [k for k in keys if _follows_size(points, k)]
    if follow:
        warnings.append(f"extrapolation: {', '.join(follow)} follow(s) the size L and is treated as part "
                        "of it")
    keys = [k for k in keys if k not in follow]
    groups: dict[tuple, list[dict]] = {}
    for p in points:
        groups.setdefault(tuple(repr(p["params"].get(k)) for k in keys), []).append(p)
    out = []
    for members in groups.values():
        betas: dict[float, set] = {}
        for p in members:
            betas.setdefault(p["L"], set()).add(p["beta"])
        fixed_t = len({frozenset(b) for b in betas.values()}) == 1 and len(betas) > 1
        sub: dict[Any, dict[float, dict]] = {}
        for p in members:
            chosen = sub.setdefault(p["beta"] if fixed_t else None, {})
            if p["L"] not in chosen or p["beta"] > chosen[p["L"]]["beta"]:
                chosen[p["L"]] = p
        for beta, by_size in sorted(sub.items(), key=lambda kv: kv[0] or 0.0):
            params = {k: members[0]["params"].get(k) for k in keys}
            if fixed_t:
                params["beta"] = beta
            out.append((params, dict(sorted(by_size.items()))))
    return out


def full_vector_magnetisation(limit: float, err: float, shift: float = float("nan")) -> dict[str, float]:
    """m_s^2 = 3 c_0, m_s = sqrt(3 c_0) (NaN unless c_0 > 0), their errors from err(c_0), and the change of
    m_s for a change ``shift`` of c_0 (see the module docstring)."""
    m2 = 3.0 * limit
    ms = math.sqrt(m2) if m2 > 0 else float("nan")
    moved = 3.0 * (limit + shift)
    return {"m_s2": m2, "m_s2_err": 3.0 * err, "m_s": ms, "m_s_err": 3.0 * err / (2.0 * ms),
            "m_s_drop_smallest_shift": (math.sqrt(moved) if moved > 0 else float("nan")) - ms}


def _fit_one(observable: str, params: dict, by_size: dict[float, dict], powers: tuple[float, ...],
             origin: str, full_vector: bool, warnings: list[str]) -> SizeExtrapolation | None:
    where = f"{observable} at {_params_text(params)}" if params else observable
    L, y, dy, betas, bad = [], [], [], [], []
    for size, p in by_size.items():
        o = p["observables"].get(observable)
        if o is None:
            continue
        if not (np.isfinite(o["mean"]) and np.isfinite(o["error"]) and o["error"] > 0):
            bad.append(f"{size:g}")
            continue
        L.append(int(size) if float(size).is_integer() else float(size))
        y.append(float(o["mean"]))
        dy.append(float(o["error"]))
        betas.append(float(p["beta"]))
    if bad:
        warnings.append(f"{where}: L = {', '.join(bad)} left out (no finite error bar: too few bins?)")
    if len(L) < len(powers) + 1:
        warnings.append(f"{where}: {len(L)} size(s), the fit with powers {_powers_text(powers)} needs "
                        f"{len(powers) + 1}: skipped")
        return None
    fit = fit_powers(L, y, dy, powers)
    shift = drop_smallest_shift(L, y, dy, powers, full=fit)
    if fit.dof == 0:
        warnings.append(f"{where}: as many sizes as parameters: exact fit, chi2/dof undefined")
    elif fit_quality(fit.chi2, fit.dof)["reliable"] is False:
        warnings.append(f"{where}: unreliable fit ({fit_quality(fit.chi2, fit.dof)['summary']}): a "
                        "correction is missing or the smallest sizes are not yet asymptotic; try --min-L or "
                        "--powers")
    if math.isfinite(shift.value) and shift.error > 0 and abs(shift.value) > 2.0 * shift.error:
        warnings.append(f"{where}: dropping the smallest size moves the limit by {shift.value:.3g} +- "
                        f"{shift.error:.2g} (more than 2 sigma): L = {min(L):g} does not follow the fitted "
                        "form; try --min-L or --powers")
    return SizeExtrapolation(
        observable, params, fit.limit, fit.limit_err, powers, origin, fit.chi2_dof, len(L), shift.value,
        shift.error, tuple(L), tuple(betas), tuple(y), tuple(dy), tuple(fit.coef.tolist()),
        tuple(fit.errors.tolist()),
        full_vector_magnetisation(fit.limit, fit.limit_err, shift.value)
        if full_vector and observable == FULL_VECTOR_OBSERVABLE else None)


def extrapolate_sizes(points: Sequence[dict], observables: Sequence[str],
                      powers: Sequence[float] | None = None, min_L: float | None = None,
                      full_vector: bool = True) -> tuple[list[SizeExtrapolation], list[str]]:
    """Fit every observable of ``observables`` at every point of the other scan parameters.

    ``points``: scan points (:func:`qmc.analysis.scan.scan_points`); ``observables``: names (an item may
    list several separated by commas); ``powers``: the same powers for every
    observable, or None for each one's default (:func:`default_powers`); ``min_L``: smallest size used;
    ``full_vector``: the model is SU(2)-symmetric (see the module docstring).  Returns the fits and
    warnings.  Raises AnalysisError (``where`` = the option) for an unknown observable, a run with one
    size, or an observable that no point has enough sizes for.
    """
    warnings: list[str] = []
    observables = list(dict.fromkeys(n.strip() for item in observables for n in item.split(",") if n.strip()))
    known = sorted(set().union(*(p["observables"] for p in points))) if points else []
    for name in observables:
        if name not in known:
            raise AnalysisError(f"unknown observable {name!r}; available: {', '.join(known)}",
                                "--extrapolate")
    sizes = sorted({float(p["L"]) for p in points})
    if len(sizes) < 2:
        raise AnalysisError(f"the run holds one system size (L = {', '.join(f'{s:g}' for s in sizes)}): "
                            "nothing to extrapolate; scan L over several sizes", "--extrapolate")
    used = [p for p in points if min_L is None or p["L"] >= min_L]
    kept = sorted({float(p["L"]) for p in used})
    dim = lattice_dimension(points)
    groups = _scan_groups(used, warnings) if used else []
    records: list[SizeExtrapolation] = []
    for name in observables:
        pw, origin = ((tuple(float(p) for p in powers), "given by the user") if powers
                      else default_powers(name, dim))
        fits = [_fit_one(name, params, by_size, pw, origin, full_vector, warnings)
                for params, by_size in groups]
        fits = [f for f in fits if f is not None]
        if not fits:
            most = max((sum(name in p["observables"] for p in by_size.values()) for _, by_size in groups),
                       default=0)
            cut = f" of L >= {min_L:g}" if min_L is not None else ""
            raise AnalysisError(f"{name}: too few sizes: at most {most} usable size(s){cut} per scan point "
                                f"(sizes {', '.join(f'{s:g}' for s in kept) or 'none'}), the fit with powers "
                                f"{_powers_text(pw)} needs {len(pw) + 1}", "--extrapolate")
        records += fits
    return records, warnings


def _powers_text(powers: Sequence[float]) -> str:
    return ",".join(f"{p:g}" for p in powers)


def _params_text(params: dict) -> str:
    return ", ".join(f"{k}={v}" for k, v in params.items())


_M2, _MS = "m_s2=3*limit", "m_s=sqrt(3*limit)"


def extrapolation_table(records: Sequence[SizeExtrapolation]) -> tuple[list[str], list[dict]]:
    """Columns and rows of ``extrapolation.csv``: one row per fit.  The full-vector staggered magnetisation
    appears when an ``m_stag2`` fit is present, its definition in the column names: ``m_s2=3*limit``,
    ``m_s2_err``, ``m_s=sqrt(3*limit)``, ``m_s_err``, ``m_s_drop_smallest_shift``."""
    pnames = list(dict.fromkeys(k for r in records for k in r.params))
    cols = ["observable", *pnames, "limit", "limit_err", "chi2_dof", "n_sizes", "L_min", "L_max", "powers",
            "drop_smallest_shift", "drop_smallest_shift_err"]
    full = any(r.full_vector for r in records)
    if full:
        cols += [_M2, "m_s2_err", _MS, "m_s_err", "m_s_drop_smallest_shift"]
    rows = []
    for r in records:
        row: dict[str, Any] = {"observable": r.observable, **r.params, "limit": r.limit,
                               "limit_err": r.limit_err, "chi2_dof": r.chi2_dof, "n_sizes": r.n_sizes,
                               "L_min": min(r.sizes), "L_max": max(r.sizes),
                               "powers": " ".join(f"{p:g}" for p in r.powers),
                               "drop_smallest_shift": r.drop_smallest_shift,
                               "drop_smallest_shift_err": r.drop_smallest_shift_err}
        if r.full_vector:
            fv = r.full_vector
            row.update({_M2: fv["m_s2"], "m_s2_err": fv["m_s2_err"], _MS: fv["m_s"],
                        "m_s_err": fv["m_s_err"], "m_s_drop_smallest_shift": fv["m_s_drop_smallest_shift"]})
        rows.append(row)
    return cols, rows


def _pm(value: float | None, err: float | None) -> str:
    if value is None or not math.isfinite(value):
        return "n/a"
    return f"{value:.7g} +- {err:.2g}" if err is not None and math.isfinite(err) else f"{value:.7g}"


def format_extrapolations(records: Sequence[dict]) -> list[str]:
    """Text lines of the fits (records as dicts, e.g. from the JSON result)."""
    if not records:
        return []
    lines = ["L -> infinity: weighted fit y(L) = c_0 + sum_k c_k L^-p_k to the per-size means; "
             "shift = change of c_0 when the smallest L is dropped"]
    for r in records:
        chi = r.get("chi2_dof")
        shift, shift_err = r.get("drop_smallest_shift"), r.get("drop_smallest_shift_err")
        at = f" [{_params_text(r['params'])}]" if r["params"] else ""
        lines.append(f"  {r['observable']}{at}: "
                     f"c_0 = {_pm(r['limit'], r['limit_err'])}"
                     f"  chi2/dof = {'n/a' if chi is None else f'{chi:.3g}'}"
                     f"  sizes = {r['n_sizes']} (L = {min(r['sizes']):g}..{max(r['sizes']):g})"
                     f"  powers = {_powers_text(r['powers'])}"
                     f"  shift = {'n/a' if shift is None else f'{shift:+.2g} +- {shift_err:.2g}'}")
        fv = r.get("full_vector")
        if fv:
            lines.append(f"    full-vector staggered magnetisation (SU(2) symmetry): m_s^2 = 3 c_0 = "
                         f"{_pm(fv['m_s2'], fv['m_s2_err'])}, "
                         f"m_s = sqrt(3 c_0) = {_pm(fv['m_s'], fv['m_s_err'])}")
    return lines


def as_dicts(records: Sequence[SizeExtrapolation]) -> list[dict[str, Any]]:
    """The fits as plain dicts (the ``extrapolations`` list of the JSON result)."""
    return [asdict(r) for r in records]
