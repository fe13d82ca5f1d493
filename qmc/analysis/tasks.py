"""Task records as seen by the analysis layer, and canonical parameter values.

The analysis reads any object with the attributes of ``qmc.storage.task_file.TaskData``:
``task_id, params, bins, steps_per_bin, n_sites, linear_size, beta, vbs_histogram,
vbs_hist_range, status, exchange``.  :class:`AnalysisTask` is a plain implementation used for merged
independent copies and for synthetic input.  Parameter values read from files may be numpy scalars, arrays or
bytes; :func:`canonical_value` turns them into plain Python values (floats rounded to 12 significant
digits) so that equal parameters compare and hash equal.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

__all__ = ["COPY_PARAMS", "AnalysisTask", "as_record", "canonical_params", "canonical_value", "params_key"]

COPY_PARAMS = ("copy", "replica")
"""Parameter names of a task's copy index: ``copy`` (0, 1, ... for ``[sampling] copies``), and ``replica``
in task files of earlier releases.  Tasks that differ only in it are independent chains of one point."""


@dataclass
class AnalysisTask:
    """A task (or a merge of independent copies) with per-bin observables; mirrors ``TaskData``.

    ``copies`` lists the task ids merged into it; ``parts`` holds the original copies when their bins
    could not be concatenated (unequal, incompatible bin lengths); their estimates are then combined by
    weighting.  ``target``, ``target_met`` and ``ground_state`` are those of ``TaskData`` (a single task's
    precision target and ground-state search; not kept for merged copies).
    """

    task_id: str
    params: dict[str, Any]
    bins: dict[str, np.ndarray]
    steps_per_bin: int
    n_sites: int
    linear_size: float
    beta: float
    vbs_histogram: np.ndarray | None = None
    vbs_hist_range: float | None = None
    status: str = "done"
    exchange: dict | None = None
    copies: tuple[str, ...] = ()
    parts: tuple[AnalysisTask, ...] = field(default_factory=tuple)
    target: list | None = None
    target_met: bool = False
    ground_state: dict | None = None


def canonical_value(v: Any) -> Any:
    """Plain, hashable Python value: numpy -> Python, sequences -> tuples, bytes -> str, floats rounded."""
    if isinstance(v, bytes):
        return v.decode("utf-8", "replace")
    if isinstance(v, np.ndarray):
        return canonical_value(v.tolist())
    if isinstance(v, np.generic):
        return canonical_value(v.item())
    if isinstance(v, (list, tuple)):
        return tuple(canonical_value(x) for x in v)
    if isinstance(v, Mapping):
        return tuple(sorted((str(k), canonical_value(x)) for k, x in v.items()))
    if isinstance(v, bool) or v is None or isinstance(v, (int, str)):
        return v
    if isinstance(v, float):
        return float(f"{v:.12g}")
    return str(v)


def canonical_params(params: Mapping[str, Any]) -> dict[str, Any]:
    """``{key: canonical_value(value)}``; tuples become lists again only when written as JSON."""
    return {str(k): canonical_value(v) for k, v in params.items()}


def params_key(params: Mapping[str, Any], exclude: tuple[str, ...] = COPY_PARAMS) -> tuple:
    """Hashable key of the parameters, ignoring the names in ``exclude``."""
    cp = canonical_params(params)
    return tuple(sorted((k, v) for k, v in cp.items() if k not in exclude))


def _number(x: Any) -> float:
    """int when integral (sizes), float otherwise."""
    f = float(np.asarray(x).item())
    return int(f) if f.is_integer() else f


def as_record(task: Any) -> AnalysisTask:
    """Copy a TaskData-like object into a :class:`AnalysisTask` (bins as float arrays)."""
    if isinstance(task, AnalysisTask):
        return task
    try:
        bins = {str(k): np.asarray(v, dtype=float) for k, v in dict(task.bins).items()}
        return AnalysisTask(
            task_id=str(task.task_id),
            params=dict(task.params),
            bins=bins,
            steps_per_bin=int(task.steps_per_bin),
            n_sites=int(task.n_sites),
            linear_size=_number(task.linear_size),
            beta=float(task.beta),
            vbs_histogram=getattr(task, "vbs_histogram", None),
            vbs_hist_range=getattr(task, "vbs_hist_range", None),
            status=str(getattr(task, "status", "done")),
            exchange=getattr(task, "exchange", None),
            copies=(str(task.task_id),),
            target=getattr(task, "target", None),
            target_met=bool(getattr(task, "target_met", False)),
            ground_state=getattr(task, "ground_state", None),
        )
    except AttributeError as exc:
        from .errors import AnalysisError

        raise AnalysisError(f"object is not a task record ({exc})", where="analysis.tasks") from None
