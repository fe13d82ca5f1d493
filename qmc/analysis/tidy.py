"""The results of a run in tidy form: one row per task and observable (for a pandas DataFrame).

Each row holds ``task``, the task's scan parameters (``L``, ``beta``, the couplings, ``copy``; the descriptive
parameters :data:`DESCRIPTIVE_PARAMS` are left out), then

    observable     the observable's name (stored per bin, or derived by jackknife: binder_stag, ...)
    mean, error    the estimate and one standard error from the binning analysis
    tau_int        integrated autocorrelation time in Monte Carlo steps = tau_int_bins * steps_per_bin
    tau_int_bins   the same in units of bins (1/2 for uncorrelated bins, see :mod:`qmc.analysis.binning`)
    n_bins         number of bins measured, steps_per_bin their length in Monte Carlo steps
    derived        True for quantities computed from several bin series by jackknife (chi_uniform is stored
                   per bin for most models and derived only for models with directed loops)
    status         the task's status (done, stopped, ...)

When the bins are much longer than the correlation time, ``tau_int_bins`` is 1/2 and ``tau_int`` =
``steps_per_bin / 2`` is only an upper bound of the correlation time in steps: the bins hide shorter times.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

from .derived import DERIVED_INPUTS
from .summary import group_copies, summarize_task
from .tasks import as_record, canonical_value

__all__ = ["DESCRIPTIVE_PARAMS", "TIDY_COLUMNS", "tidy_rows"]

DESCRIPTIVE_PARAMS = ("lattice", "size", "boundary")
"""Parameters a task file records to describe its lattice; constant within a run, so not columns."""

TIDY_COLUMNS = ("observable", "mean", "error", "tau_int", "tau_int_bins", "n_bins", "steps_per_bin",
                "derived", "status")
"""Columns after ``task`` and the scan parameters, in this order."""


def tidy_rows(tasks: Iterable[Any], merge_copies: bool = False) -> tuple[list[str], list[dict[str, Any]]]:
    """Column names and rows (see the module docstring) of TaskData-like ``tasks``.

    With ``merge_copies`` the independent copies of a parameter point are first merged
    (:func:`qmc.analysis.summary.group_copies`): one row set per point, without the ``copy`` column.
    """
    records = group_copies(tasks) if merge_copies else [as_record(t) for t in tasks]
    params: list[str] = []
    rows = []
    for rec in records:
        s = summarize_task(rec)
        scan = {k: canonical_value(v) for k, v in rec.params.items() if k not in DESCRIPTIVE_PARAMS}
        params += [k for k in scan if k not in params]
        info = s["info"]
        for name, o in s["observables"].items():
            rows.append({"task": s["task"], **scan, "observable": name, "mean": o["mean"],
                         "error": o["error"], "tau_int": o["tau_int"] * info["steps_per_bin"],
                         "tau_int_bins": o["tau_int"], "n_bins": info["n_bins"],
                         "steps_per_bin": info["steps_per_bin"],
                         "derived": name in DERIVED_INPUTS and name not in rec.bins,
                         "status": info["status"]})
    return ["task", *params, *TIDY_COLUMNS], rows
