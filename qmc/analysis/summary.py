"""Per-task summary: every stored bin observable (binning analysis) plus derived quantities (jackknife).

``summarize_task`` returns

    {"task": task_id, "params": {...}, "info": {...},
     "observables": {name: {"mean", "error", "tau_int", "tau_int_steps"}},  # derived: + "bias_corrected"
     "vbs": {"cos4_hist", "counts", ...},                        # when a VBS histogram is stored
     "target": {"met", "bins", "checks": [...]},                 # with a precision target
     "ground_state": {"outcome", "betas", "stages": [...], ...}, # with a search by beta doubling
     "warnings": [text, ...]}

``tau_int`` is in units of bins (1/2 for uncorrelated bins), see :mod:`qmc.analysis.binning`.
``tau_int_steps = tau_int * steps_per_bin`` is the same time in Monte Carlo steps.  It is the
autocorrelation time of the underlying steps when the bins are correlated (tau_int >> 1/2); for nearly
uncorrelated bins it is only an upper bound (a bin of B steps whose chain decorrelates within tau_s steps
has tau_int = tau_s / g with 2 tau_s >= g >= 1, g <= B, so tau_s <= tau_int * B; common practice, no
source), flagged by ``tau_int_steps_bound`` (tau_int < 1).

Precision target (``target``, when the task has one): ``met`` says whether the run ended because the
target was met (at ``bins`` bins, the number stored), ``checks`` judges every goal on the stored bins
with the rule of :mod:`qmc.chain.target` (``observable``, ``mean``, ``error``, ``allowed``, ``plateau``,
``met``, ``goal`` as written: ``"1e-04"`` or ``"0.5%"``).

Ground-state search (``ground_state``, a task with ``[ground_state]``): the beta ladder and outcome of
:func:`qmc.analysis.groundstate.search_summary`; the observables of the summary are those of the last stage
(the converged one when the search converged), at ``info["beta"]``.

Independent copies: tasks that differ only in their copy index (``params["copy"]``, see
:data:`~qmc.analysis.tasks.COPY_PARAMS`) are independent Markov chains of the same parameters.
:func:`group_copies` merges them into one :class:`~qmc.analysis.tasks.AnalysisTask` per parameter set
by concatenating their bins (equal bin lengths; see :mod:`qmc.analysis.chains`) and adding their VBS
histograms.  When the bin lengths are incompatible the record keeps the copies in ``parts`` and
:func:`summarize_task` combines per-copy estimates by inverse-variance weighting.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

import numpy as np

from qmc.chain.target import bound_text, check_goals

from .binning import MIN_SERIES, error_estimate
from .chains import bins_compatible, merge_bin_dicts, weighted_mean
from .derived import derived_estimates
from .groundstate import search_summary
from .tasks import COPY_PARAMS, AnalysisTask, as_record, canonical_params, params_key
from .vbs import vbs_anisotropy

__all__ = ["group_copies", "summarize_task", "few_bins_warning"]


def _sum_histograms(records: list[AnalysisTask]) -> tuple[np.ndarray | None, float | None]:
    hists = [
        (np.asarray(r.vbs_histogram), r.vbs_hist_range)
        for r in records
        if r.vbs_histogram is not None and r.vbs_hist_range is not None and np.asarray(r.vbs_histogram).size
    ]
    if not hists:
        return None, None
    shape, rng = hists[0][0].shape, hists[0][1]
    if any(h.shape != shape or not np.isclose(float(q), float(rng)) for h, q in hists):
        return hists[0][0], rng
    return np.sum([h for h, _ in hists], axis=0), rng


def group_copies(tasks: Iterable[Any]) -> list[AnalysisTask]:
    """Merge tasks whose parameters agree except the copy index into one record each (input order kept).

    Merged record: ``task_id`` joins the copies' ids with ``+``; ``params`` lose the copy index;
    ``copies`` lists the ids; bins are concatenated (rebinned to the largest bin length when the
    lengths divide it), or kept apart in ``parts`` when incompatible; VBS histograms are summed.
    """
    groups: dict[tuple, list[AnalysisTask]] = {}
    for t in tasks:
        rec = as_record(t)
        groups.setdefault(params_key(rec.params), []).append(rec)
    out = []
    for members in groups.values():
        first = members[0]
        params = {k: v for k, v in first.params.items() if k not in COPY_PARAMS}
        ids = tuple(m.task_id for m in members)
        hist, hrange = _sum_histograms(members)
        lengths = [m.steps_per_bin for m in members]
        common = dict(
            task_id="+".join(ids),
            params=params,
            n_sites=first.n_sites,
            linear_size=first.linear_size,
            beta=first.beta,
            vbs_histogram=hist,
            vbs_hist_range=hrange,
            status=",".join(sorted({m.status for m in members})),
            exchange=first.exchange,
            copies=ids,
        )
        if len(members) == 1 or bins_compatible(lengths):
            bins, spb = merge_bin_dicts([m.bins for m in members], lengths)
            out.append(AnalysisTask(bins=bins, steps_per_bin=spb, **common))
        else:
            out.append(AnalysisTask(bins={}, steps_per_bin=0, parts=tuple(members), **common))
    return out


def _in_steps(tau_bins: float, steps_per_bin: int) -> dict[str, float | bool]:
    """``tau_int_steps`` and ``tau_int_steps_bound`` of a bin autocorrelation time (module docstring)."""
    return {"tau_int_steps": float(tau_bins) * steps_per_bin, "tau_int_steps_bound": bool(tau_bins < 1.0)}


def _stored(rec: AnalysisTask, warn: dict[str, list[str]]) -> dict[str, dict[str, float]]:
    obs = {}
    for name in sorted(rec.bins):
        est = error_estimate(rec.bins[name])
        obs[name] = {"mean": est.mean, "error": est.error, "tau_int": est.tau_int,
                     **_in_steps(est.tau_int, rec.steps_per_bin)}
        if not est.plateau_ok:
            warn["plateau"].append(name)
        if not est.halves_ok:
            warn["halves"].append(name)
    for name, d in derived_estimates(rec.bins, rec.n_sites, rec.linear_size, beta=rec.beta).items():
        obs[name] = {
            "mean": d.value,
            "error": d.error,
            "tau_int": d.tau_int,
            **_in_steps(d.tau_int, rec.steps_per_bin),
            "bias_corrected": d.bias_corrected,
        }
        if not np.isfinite(d.value):
            warn["undefined"].append(name)
        elif not d.plateau_ok:
            warn["plateau"].append(name)
    return obs


def _weighted(parts: list[dict[str, dict[str, float]]]) -> dict[str, dict[str, float]]:
    names = set(parts[0])
    for p in parts[1:]:
        names &= set(p)
    obs = {}
    for name in sorted(names):
        mean, err = weighted_mean([p[name]["mean"] for p in parts], [p[name]["error"] for p in parts])
        tau = float(np.nanmean([p[name]["tau_int"] for p in parts]))
        steps = float(np.nanmean([p[name]["tau_int_steps"] for p in parts]))
        obs[name] = {"mean": mean, "error": err, "tau_int": tau, "tau_int_steps": steps,
                     "tau_int_steps_bound": any(p[name]["tau_int_steps_bound"] for p in parts)}
    return obs


def few_bins_warning(summaries: Iterable[dict[str, Any]]) -> str | None:
    """One line for all the tasks with fewer than MIN_SERIES bins (``info["few_bins"]``), saying how many
    bins to ask for; None when there are none.

    Their error bars are the naive ones, lower bounds: the binning analysis needs at least MIN_SERIES bins
    to see whether the error has converged (:mod:`qmc.analysis.binning`).  The advice keeps the bin
    length, so that a finished run grows instead of starting over."""
    summaries = list(summaries)
    few = [s for s in summaries if s["info"].get("few_bins")]
    if not few:
        return None
    least = min(s["info"]["n_bins"] for s in few)
    lengths = sorted({int(s["info"]["steps_per_bin"]) for s in few})
    if len(lengths) == 1:
        ask = (f"bins = {MIN_SERIES} with measure_steps = {MIN_SERIES * lengths[0]} keeps the bin length of "
               f"{lengths[0]} steps")
    else:
        ask = (f"bins = {MIN_SERIES} with measure_steps = {MIN_SERIES} x (steps per bin) keeps the bin "
               "lengths")
    return (f"{len(few)} of {len(summaries)} task(s) have fewer than {MIN_SERIES} bins (the fewest: "
            f"{least}): their error bars are naive lower bounds, as the binning analysis needs at least "
            f"{MIN_SERIES} bins; ask for more ({ask}, and qmc run continues the finished tasks)")


def summarize_task(task_data: Any) -> dict[str, Any]:
    """Summary dict of one task or of merged copies (see module docstring)."""
    rec = as_record(task_data)
    warn: dict[str, list[str]] = {"plateau": [], "halves": [], "undefined": []}
    if rec.parts:
        obs = _weighted([_stored(p, warn) for p in rec.parts])
        n_bins = sum(min((len(b) for b in p.bins.values()), default=0) for p in rec.parts)
    else:
        obs = _stored(rec, warn)
        n_bins = min((len(b) for b in rec.bins.values()), default=0)
    warnings = []
    tid = rec.task_id
    if n_bins == 0:
        warnings.append(f"{tid}: no bins stored yet")
        warn = {k: [] for k in warn}
    few = 0 < n_bins < MIN_SERIES  # said once per run by few_bins_warning, not per observable
    if warn["plateau"] and not few:
        names = ", ".join(sorted(set(warn["plateau"])))
        warnings.append(
            f"{tid}: error not converged in the binning analysis (too few independent bins): {names}"
        )
    if warn["halves"]:
        names = ", ".join(sorted(set(warn["halves"])))
        warnings.append(
            f"{tid}: first and second half of the bins disagree (drift; warm-up too short?): {names}"
        )
    if warn["undefined"]:
        names = ", ".join(sorted(set(warn["undefined"])))
        warnings.append(f"{tid}: derived quantity undefined for these means: {names}")
    summary: dict[str, Any] = {
        "task": tid,
        "params": canonical_params(rec.params),
        "info": {
            "n_sites": rec.n_sites,
            "linear_size": rec.linear_size,
            "beta": rec.beta,
            "steps_per_bin": rec.steps_per_bin,
            "n_bins": n_bins,
            "few_bins": few,
            "status": rec.status,
            "copies": list(rec.copies) or [tid],
        },
        "observables": obs,
        "warnings": warnings,
    }
    if rec.vbs_histogram is not None and rec.vbs_hist_range is not None:
        cos4 = rec.bins.get("vbs_cos4")
        summary["vbs"] = vbs_anisotropy(rec.vbs_histogram, rec.vbs_hist_range, cos4)
    if rec.target and not rec.parts:
        summary["target"] = target_summary(rec, n_bins)
    if rec.ground_state and not rec.parts:
        gs = summary["ground_state"] = search_summary(rec.ground_state, tid)
        if gs["outcome"] == "not reached":
            names = ", ".join(gs["observables"])
            warnings.append(f"{tid}: ground state not reached: the observables {names} did not agree for two "
                            f"doublings in a row up to max_beta = {gs['max_beta']:g}")
    return summary


def target_summary(rec: AnalysisTask, n_bins: int) -> dict[str, Any]:
    """The ``target`` entry of a summary (module docstring)."""
    goals = [(str(name), float(value), bool(rel)) for name, value, rel in rec.target or []]
    names = [g[0] for g in goals]
    if n_bins and all(n in rec.bins for n in names):
        table = np.column_stack([rec.bins[n][:n_bins] for n in names])
        checks = [{"observable": c.name, "goal": bound_text(g), "mean": c.mean,
                   "error": c.error, "allowed": c.allowed, "plateau": c.plateau, "met": c.met}
                  for g, c in zip(goals, check_goals(goals, table, names), strict=True)]
    else:
        checks = [{"observable": g[0], "goal": bound_text(g), "met": False} for g in goals]
    return {"met": bool(rec.target_met), "bins": n_bins, "checks": checks}
