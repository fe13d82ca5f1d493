"""What a configuration changes in an existing run directory: :func:`survey`.

A run grows: a configuration with more scan points, or more bins of the same length, keeps every task file
of the directory (finished tasks continue from their checkpoints, :mod:`qmc.run.task_identity`) and only
adds work.  A precision target (``[sampling] target``) decides only how many bins of a chain are made: a
task that stopped at its target continues when the target changes or is removed, and one that has all its
steps stays finished when a target is added.  ``[ground_state]`` is part of a task's chain
(:func:`~qmc.run.task_identity.task_fingerprint`): a file of the same name made without it (or with
another beta ladder) is another chain.  What cannot grow the run, and is refused unless forced:

* other physics (master seed, lattice or terms, :func:`qmc.config.fingerprint.physics_fingerprint`): the
  old index and every task file whose chain is not exactly one of the new tasks' would mix with the new
  ones;
* a task file of the same name written for another chain (e.g. another beta), another warm-up, bins of
  another length (a bin is an average over its own number of steps, so a series cannot change its length),
  or bins of the other kind of estimators (``[sampling] estimators``).

Forced (``--force``), those files and the old index are renamed aside, never deleted; every other task
file is kept.  :class:`Survey` says which is which and why, for the messages of ``qmc run``.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from qmc.config.parser import RunConfig, Task, load_config
from qmc.errors import UserError
from qmc.run.task_identity import (
    BIN_LENGTH,
    CHAIN,
    ESTIMATORS,
    WARMUP,
    finished,
    mismatch_text,
    stored_relation,
)
from qmc.storage.run_index import load_index
from qmc.storage.task_file import task_header, task_path

__all__ = ["Survey", "survey", "PHYSICS"]

PHYSICS = "physics"
"""Reason of a file set aside because the seed, lattice or terms changed."""

_REASONS = {
    PHYSICS: "the master seed, lattice or terms differ from those of the run",
    CHAIN: "written for another model, lattice, beta, seed or exchange ladder than the task of the same name",
    WARMUP: "measured after another number of warm-up steps",
    BIN_LENGTH: "bins of another length (measure_steps / bins)",
    ESTIMATORS: "measured with the other kind of estimators ([sampling] estimators)",
}


@dataclass
class Survey:
    """The run directory against a configuration.

    ``index``: the run index to keep (None: a new one is written); ``index_aside``: why the old one is set
    aside, a reason key or text for :meth:`reason` ("" when it is kept or there is none); ``status``: per
    task of the configuration with a kept file, ``(status, failure message, header)`` with the status as
    the new configuration sees it (``done`` only when the file has all the steps asked for); ``aside``:
    files to rename aside with the reason (for :meth:`reason`); ``kept``: ids of the tasks whose files are
    kept; ``grown``: those of them that were finished and now continue; ``others``: ids in the old index
    that the configuration no
    longer has (their files stay in the run)."""

    index: dict[str, Any] | None
    index_aside: str = ""
    status: dict[str, tuple[str, str, dict[str, Any]]] = field(default_factory=dict)
    aside: list[tuple[Path, str]] = field(default_factory=list)
    kept: list[str] = field(default_factory=list)
    grown: list[str] = field(default_factory=list)
    others: list[str] = field(default_factory=list)

    @staticmethod
    def reason(key: str) -> str:
        """The words for a reason key (other text is returned as it is)."""
        return _REASONS.get(key, key)


def _listing(ids: Sequence[str], limit: int = 4) -> str:
    return ", ".join(ids[:limit]) + (f" and {len(ids) - limit} more" if len(ids) > limit else "")


def _old_physics(run_dir: Path, index: dict[str, Any], config: RunConfig) -> str | None:
    """The physics fingerprint of the run: from the index, else from the run's config.toml (indexes written
    before it was recorded), else the new one when the configuration fingerprint is unchanged."""
    if isinstance(index.get("physics"), str):
        return index["physics"]
    if index.get("fingerprint") == config.fingerprint():
        return config.physics_fingerprint()
    try:
        return load_config(run_dir / "config.toml").physics_fingerprint()
    except UserError:
        return None


def _stored(head: dict[str, Any]) -> tuple[int, int, int]:
    """Steps per bin, bins and steps in all that a task file's header records."""
    return (int(head.get("bins_steps_per_bin", 0)), int(head.get("bins_bins_total", 0)),
            int(head.get("checkpoint_steps_total", 0)))


def _status(head: dict[str, Any], task: Task) -> tuple[str, str]:
    status = head.get("status", "")
    if status == "failed":
        return status, head.get("message", "")
    target = json.loads(head["bins_target"]) if isinstance(head.get("bins_target"), str) else None
    if finished(task, status, int(head.get("checkpoint_steps_done", 0)), target,
                bool(head.get("bins_target_met", 0))):
        return "done", ""
    return "stopped", ""


def _refusal(run_dir: Path, physics: bool, bad: dict[str, list[str]], config: RunConfig,
             tasks: dict[str, Task], heads: dict[str, dict[str, Any]], n_kept: int) -> UserError:
    """The one message of an unforced change that cannot grow the run."""
    keep = f"; the other {n_kept} task file(s) would be kept" if n_kept else ""
    if physics:
        return UserError("holds a run of other physics (the master seed, lattice or terms differ from "
                         f"{config.path}); choose another output directory, or use --force to rename the old "
                         "index and the task files of changed tasks aside (never deleted)", str(run_dir))
    for key in (CHAIN, WARMUP, BIN_LENGTH, ESTIMATORS):
        ids = bad.get(key, [])
        if not ids:
            continue
        h = heads[ids[0]]
        why = mismatch_text(key, tasks[ids[0]], *_stored(h))
        fix = ""
        if key == BIN_LENGTH:
            spb = int(h.get("bins_steps_per_bin", 1)) or 1
            s = config.sampling
            fix = (f"; to continue with more bins keep the bin length: bins = measure_steps / {spb} (e.g. "
                   f"bins = {max(1, s.measure_steps // spb)} with measure_steps = "
                   f"{max(1, s.measure_steps // spb) * spb})")
        elif key == WARMUP:
            fix = "; restore the old warmup_steps to continue"
        return UserError(f"{len(ids)} task file(s) cannot continue ({_listing(ids)}): each {why}{fix}; or "
                         "choose another output directory, "
                         f"or use --force to rename these files aside and run their tasks from the start"
                         f"{keep}", str(run_dir))
    raise AssertionError("nothing to refuse")


def survey(config: RunConfig, run_dir: Path, force: bool) -> Survey:
    """Compare ``run_dir`` with ``config`` (see the module docstring); UserError, with nothing changed, for a
    change that needs ``force`` when it is not given, and for a damaged index (unless forced) or task file
    (always: a file that is not a task file is never moved)."""
    try:
        index = load_index(run_dir)
    except UserError:
        if not force:
            raise
        index, index_aside = None, "the run index cannot be read"
    else:
        index_aside = ""
    physics = False
    if index is not None:
        old = _old_physics(run_dir, index, config)
        physics = old != config.physics_fingerprint()
    tasks = {t.task_id: t for t in config.tasks()}
    heads: dict[str, dict[str, Any]] = {}
    bad: dict[str, list[str]] = {}
    out = Survey(index=index, index_aside=index_aside)
    for tid, task in tasks.items():
        path = task_path(run_dir, tid)
        if not path.exists():
            continue
        heads[tid] = head = task_header(path)
        relation = stored_relation(task, head.get("task_fingerprint", ""), *_stored(head))
        if relation in (CHAIN, WARMUP, BIN_LENGTH, ESTIMATORS):
            bad.setdefault(relation, []).append(tid)
            out.aside.append((path, PHYSICS if physics and relation == CHAIN else relation))
            continue
        status, message = _status(head, task)
        out.status[tid] = (status, message, head)
        out.kept.append(tid)
        if head.get("status") == "done" and status != "done":  # more bins, or another target
            out.grown.append(tid)
    old_ids = [tid for tid in (index or {}).get("tasks", {}) if tid not in tasks]
    if physics:
        out.aside += [(task_path(run_dir, t), PHYSICS) for t in old_ids if task_path(run_dir, t).exists()]
        out.index, out.index_aside = None, PHYSICS
    else:
        out.others = old_ids
    if (physics or bad) and not force:
        raise _refusal(run_dir, physics, bad, config, tasks, heads, len(out.kept))
    return out
