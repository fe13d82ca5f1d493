"""The ``/ground_state`` group of a task file: a ground-state search by beta doubling as plain values.

Written by the run (:mod:`qmc.run.ground_state`) and read by the run (to resume) and by the analysis (to
report the beta ladder), through :func:`search_mapping` and :func:`read_search`; the HDF5 side is
:func:`qmc.storage.hdf5_values.fill_mapping` / ``read_mapping`` as for any group of the file::

    /ground_state            attrs start_beta, max_beta, observables (JSON list), n_sigma, outcome
                             ("running", "converged" or "not reached")
    /ground_state/stages/<k> every finished stage k = 0, 1, ...: attrs beta, steps_per_bin, names (JSON
                             list), target_met, and from stage 1 on agree (1: it agrees with stage k-1);
                             dataset bins float64[n, len(names)]; subgroup sigmas with one attr per
                             observable (the separation from stage k-1 in combined error bars)
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from qmc.errors import UserError

__all__ = ["Stage", "SearchRecord", "search_mapping", "read_search"]


@dataclass
class Stage:
    """One finished stage: its ``beta``, bins (``bins`` float64[n, len(names)] with column ``names``), whether
    its precision target was met, and (from the second stage on) whether it ``agree``-s with the stage before
    and the ``sigmas`` of each compared observable."""

    beta: float
    steps_per_bin: int
    names: tuple[str, ...]
    bins: np.ndarray
    target_met: bool = False
    agree: bool | None = None
    sigmas: dict[str, float] = field(default_factory=dict)


@dataclass
class SearchRecord:
    """A search's settings, ``outcome`` and finished ``stages``."""

    start_beta: float
    max_beta: float
    observables: tuple[str, ...]
    n_sigma: float
    outcome: str
    stages: list[Stage]


def search_mapping(rec: SearchRecord) -> dict[str, Any]:
    """The mapping stored as ``/ground_state`` (module docstring)."""
    stages = {}
    for k, s in enumerate(rec.stages):
        d: dict[str, Any] = {"beta": float(s.beta), "steps_per_bin": int(s.steps_per_bin),
                             "names": json.dumps(list(s.names)), "bins": np.asarray(s.bins, dtype=np.float64),
                             "target_met": int(s.target_met)}
        if s.agree is not None:
            d["agree"] = int(s.agree)
            d["sigmas"] = {name: float(v) for name, v in s.sigmas.items()}
        stages[str(k)] = d
    return {"start_beta": float(rec.start_beta), "max_beta": float(rec.max_beta),
            "observables": json.dumps(list(rec.observables)), "n_sigma": float(rec.n_sigma),
            "outcome": rec.outcome, "stages": stages}


def _names(value: Any) -> tuple[str, ...]:
    return tuple(json.loads(value) if isinstance(value, str) else value)


def read_search(group: Mapping[str, Any], where: str = "") -> SearchRecord:
    """The search stored in ``group`` (the ``read_mapping`` of ``/ground_state``); UserError naming ``where``
    when it cannot be read."""
    try:
        stages = []
        saved = group.get("stages", {})
        for key in sorted(saved, key=int):
            st = saved[key]
            names = _names(st["names"])
            agree = bool(st["agree"]) if "agree" in st else None
            stages.append(Stage(beta=float(st["beta"]), steps_per_bin=int(st["steps_per_bin"]), names=names,
                                bins=np.asarray(st["bins"], dtype=np.float64).reshape(-1, len(names)),
                                target_met=bool(st.get("target_met", 0)), agree=agree,
                                sigmas={k: float(v) for k, v in st.get("sigmas", {}).items()}))
        return SearchRecord(start_beta=float(group["start_beta"]), max_beta=float(group["max_beta"]),
                            observables=_names(group["observables"]), n_sigma=float(group["n_sigma"]),
                            outcome=str(group["outcome"]), stages=stages)
    except (KeyError, ValueError, TypeError) as exc:
        raise UserError(f"damaged task file: its ground-state search cannot be read ({type(exc).__name__}: "
                        f"{exc})", where) from None
