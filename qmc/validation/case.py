"""What every check of ``qmc validate`` is made of: :class:`Case`, and the helpers that split a long
simulation into replicas and merge their bins again (:func:`sim_jobs`, :func:`merged`, :func:`mean_error`)."""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from qmc.analysis import error_estimate

from .checks import Check
from .jobs import Job, ModelSpec, SimJob, SimResult
from .references import Reference

__all__ = ["Case", "sim_jobs", "merged", "mean_error"]


@dataclass(frozen=True)
class Case:
    """A named check: ``evaluate(results)`` gets ``{job.key: result}`` for its ``jobs``.

    ``reference`` is used for the failure row when the case cannot be evaluated."""

    name: str
    jobs: tuple[Job, ...]
    evaluate: Callable[[Mapping[str, Any]], list[Check]]
    reference: Reference


def _steps(measure: int, bins: int) -> int:
    """Round ``measure`` up to a multiple of ``bins``."""
    return bins * max(1, math.ceil(measure / bins))


def sim_jobs(key: str, spec: ModelSpec, beta: float, warmup: int, measure: int, bins: int, n_sites: int,
          density: float, max_seconds: float | None) -> tuple[SimJob, ...]:
    """One simulation, or independent replicas (keys ``key/r=i``) of it when its estimated cost exceeds
    ``max_seconds``: each replica runs its own warm-up and ~1/k of the measurement with the same steps
    per bin, so their bins can be concatenated (:func:`merged`)."""
    one = SimJob(key, spec, float(beta), int(warmup), _steps(measure, bins), int(bins), n_sites, density)
    k = 1 if not max_seconds else max(1, math.ceil(one.cost / max_seconds))
    if k == 1:
        return (one,)
    per_bin = one.measure // one.bins
    bins_r = math.ceil(one.bins / k)
    return tuple(SimJob(f"{key}/r={i}", spec, float(beta), int(warmup), per_bin * bins_r, bins_r, n_sites,
                        density) for i in range(k))


def merged(results: Mapping[str, Any], jobs: Sequence[SimJob]) -> SimResult:
    """The bins of the replicas ``jobs``, concatenated (equal steps per bin: common practice, no source)."""
    parts: list[SimResult] = [results[j.key] for j in jobs]
    if len(parts) == 1:
        return parts[0]
    bins = {name: np.concatenate([p.bins[name] for p in parts]) for name in parts[0].bins}
    first = parts[0]
    return SimResult(bins, first.n_sites, first.linear_size, first.beta, sum(p.seconds for p in parts))


def mean_error(series: np.ndarray) -> tuple[float, float]:
    est = error_estimate(series)
    return est.mean, est.error
