"""What a ladder keeps in each of its task files, and reading it back.

Each task of a ladder has its own task file (:mod:`qmc.storage.task_file`) with an ``/exchange`` group
(:func:`exchange_record`): attrs ``parameter, group, position, value, values, task_ids, exchange_every,
acceptance_up, acceptance_down, round_trips_total`` and datasets ``attempted, accepted, warmup_attempted,
warmup_accepted`` (per pair, M-1), ``round_trips`` (per configuration), ``n_up, n_down`` (per position)
and ``walker`` (per bin: the configuration at this position when the bin closed).

Checkpoints: all files of a ladder are written at the same step, at a synchronisation point.  A file's
checkpoint holds the chain state plus the ladder state under ``exchange:<key>``
(:func:`ladder_checkpoint`), and the previous checkpoint under ``previous:<key>`` (:func:`with_previous`):
the files are replaced one by one, so after a kill between two of them the ladder resumes from the newest
step that every file holds (:func:`restorable_states`; bins are deterministic, so re-running a stretch
reproduces them bit for bit).
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from qmc.config.parser import Task

__all__ = [
    "LADDER_PREFIX", "PREVIOUS_PREFIX", "ladder_settings", "written_with", "ladder_checkpoint",
    "with_previous", "restorable_states", "exchange_record", "exchange_summary",
]

LADDER_PREFIX = "exchange:"
PREVIOUS_PREFIX = "previous:"
_COUNTS = ("attempted", "accepted", "warmup_attempted", "warmup_accepted", "round_trips", "n_up", "n_down")


def _rate(acc: int, att: int) -> float:
    return acc / att if att else float("nan")


# ----------------------------------------------------------------------------------------------------------
# settings: which ladder a file belongs to


def ladder_settings(tasks: Sequence[Task]) -> dict[str, Any]:
    """The settings every file of the ladder ``tasks`` (in ladder order) records and must match on resume."""
    t = tasks[0]
    return {"parameter": t.exchange, "group": t.exchange_group, "exchange_every": t.sampling.exchange_every,
            "task_ids": [x.task_id for x in tasks], "values": [float(x.params[t.exchange]) for x in tasks]}


def _decoded(info: Mapping[str, Any]) -> dict[str, Any]:
    """/exchange attributes with JSON-encoded lists decoded."""
    out = dict(info)
    for k, v in info.items():
        if isinstance(v, str) and v.startswith("["):
            try:
                out[k] = json.loads(v)
            except ValueError:
                pass
    return out


def _norm(v: Any) -> Any:
    """Comparable form of a stored or in-memory setting (numbers as floats, sequences as lists)."""
    if isinstance(v, np.ndarray):
        v = v.tolist()
    if isinstance(v, (list, tuple)):
        return [_norm(x) for x in v]
    if isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, bool):
        return float(v)
    return v


def written_with(info: Mapping[str, Any] | None, settings: Mapping[str, Any]) -> dict[str, Any] | None:
    """The decoded /exchange data of a file (``TaskData.exchange``) if it was written by the ladder of
    ``settings``, else None (no exchange data, or another parameter, partners or interval)."""
    if not info:
        return None
    data = _decoded(info)
    if any(_norm(data.get(k)) != _norm(v) for k, v in settings.items()):
        return None
    return data


# ----------------------------------------------------------------------------------------------------------
# checkpoints


def ladder_checkpoint(chain_state: Mapping[str, np.ndarray], group_state: Mapping[str, np.ndarray]
                      ) -> dict[str, np.ndarray]:
    """Checkpoint arrays of one chain of a ladder: its own state plus the ladder state (prefixed)."""
    out = dict(chain_state)
    out.update({LADDER_PREFIX + k: v for k, v in group_state.items()})
    return out


def with_previous(current: Mapping[str, np.ndarray], previous: Mapping[str, np.ndarray] | None,
                  previous_steps: int, steps: int) -> tuple[dict[str, np.ndarray], dict[str, Any]]:
    """The checkpoint to write (``current`` plus ``previous`` under ``previous:`` when it is of another
    step) and the extra checkpoint attributes (``previous_steps_done``)."""
    out, attrs = dict(current), {}
    if previous is not None and previous_steps != steps:
        out.update({PREVIOUS_PREFIX + k: v for k, v in previous.items()})
        attrs["previous_steps_done"] = previous_steps
    return out, attrs


def _split(cp: Mapping[str, np.ndarray]) -> tuple[int, dict, dict] | None:
    """(step, chain state, ladder state) of checkpoint arrays, None if incomplete."""
    chain = {k: v for k, v in cp.items() if ":" not in k}
    group = {k[len(LADDER_PREFIX):]: v for k, v in cp.items() if k.startswith(LADDER_PREFIX)}
    if "steps" not in chain or not group:
        return None
    return int(np.asarray(chain["steps"]).reshape(-1)[0]), chain, group


def restorable_states(checkpoint: Mapping[str, np.ndarray] | None) -> dict[int, tuple[dict, dict]]:
    """Restorable states of one task file: step -> (chain state, ladder state), from the current
    checkpoint and the previous one."""
    cp = checkpoint or {}
    out: dict[int, tuple[dict, dict]] = {}
    previous = {k[len(PREVIOUS_PREFIX):]: v for k, v in cp.items() if k.startswith(PREVIOUS_PREFIX)}
    for part in (cp, previous):
        got = _split(part)
        if got is not None:
            out.setdefault(got[0], (got[1], got[2]))
    return out


# ----------------------------------------------------------------------------------------------------------
# the /exchange group


def exchange_record(settings: Mapping[str, Any], position: int, value: float,
                    group_state: Mapping[str, np.ndarray], walker: Sequence[int]) -> dict[str, Any]:
    """The /exchange content of the file of ladder position ``position`` (coupling ``value``)."""
    att, acc = group_state["attempted"], group_state["accepted"]
    i, m = position, len(settings["task_ids"])
    out: dict[str, Any] = {
        **settings, "position": i, "value": float(value),
        "acceptance_up": _rate(int(acc[i]), int(att[i])) if i < m - 1 else float("nan"),
        "acceptance_down": _rate(int(acc[i - 1]), int(att[i - 1])) if i > 0 else float("nan"),
        "round_trips_total": int(group_state["round_trips"].sum()),
        "walker": np.array(walker, dtype=np.int64),
    }
    for k in _COUNTS:
        out[k] = group_state[k]
    return out


def exchange_summary(info: dict[str, Any] | None) -> dict[str, Any] | None:
    """Acceptance rates of one task's ``/exchange`` data (as ``read_task`` returns it).

    Returns ``{"parameter", "position", "values", "value", "attempted", "accepted", "acceptance",
    "acceptance_up", "acceptance_down", "round_trips"}`` (per-pair lists over the whole ladder; the
    ``_up``/``_down`` rates are those of the pairs with the next higher / lower coupling, NaN at the ends)
    or None without exchange data.
    """
    if not info or "attempted" not in info:
        return None
    att = [int(x) for x in np.asarray(info["attempted"]).reshape(-1)]
    acc = [int(x) for x in np.asarray(info["accepted"]).reshape(-1)]
    pos = int(info.get("position", 0))
    rates = [_rate(a, n) for a, n in zip(acc, att, strict=True)]
    values = info.get("values", [])
    values = [float(v) for v in np.asarray(values).reshape(-1)] if values is not None else []
    rt = info.get("round_trips", [])
    return {
        "parameter": info.get("parameter", ""),
        "position": pos,
        "value": float(info["value"]) if "value" in info else float("nan"),
        "values": values,
        "attempted": att,
        "accepted": acc,
        "acceptance": rates,
        "acceptance_up": rates[pos] if pos < len(rates) else float("nan"),
        "acceptance_down": rates[pos - 1] if 0 < pos <= len(rates) else float("nan"),
        "round_trips": int(np.sum(np.asarray(rt, dtype=np.int64))) if rt is not None else 0,
    }
