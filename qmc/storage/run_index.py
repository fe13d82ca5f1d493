"""The run index ``RUN_DIR/index.json``: every task of a run with its status and counters.

Written by the process running the tasks (the serial runner, or rank 0 of an MPI farm), always atomically
(:mod:`qmc.storage.atomic`).  When several processes share the run directory (a job array, or MPI jobs
and serial jobs together, :mod:`qmc.storage.claims`), each keeps only the entries of the tasks it holds
claims on: :func:`write_index` with ``mine`` reads the file first, under a lock on
``RUN_DIR/claims/index.lock`` (``fcntl.lockf``, beside the claims), and takes every other entry from it.
An index of the earlier format name is read as it is (:mod:`qmc.storage.formats`) and rewritten under the
current name.
"""

from __future__ import annotations

import json
import os
from collections.abc import Collection, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from qmc.errors import UserError
from qmc.storage.atomic import atomic_write_text
from qmc.storage.faults import write_fault
from qmc.storage.formats import INDEX_FORMAT, INDEX_VERSION, known_format, note_old_format, short_reason
from qmc.storage.hdf5_values import plain
from qmc.storage.provenance import now_iso

__all__ = ["INDEX_NAME", "LOCK_NAME", "index_path", "new_index", "load_index", "write_index"]

INDEX_NAME = "index.json"
LOCK_NAME = "claims/index.lock"


def index_path(run_dir: str | os.PathLike) -> Path:
    """``RUN_DIR/index.json``."""
    return Path(run_dir) / INDEX_NAME


def new_index(fingerprint: str, config_source: str, name: str, tasks: list[dict[str, Any]]) -> dict[str, Any]:
    """A fresh run index.

    Layout::

        {"format": "seriesloop/run-index", "format_version": 1, "fingerprint": <config fingerprint>,
         "config_source": <path of the configuration given to qmc run>, "name": <run name>,
         "created": <iso time>, "updated": <iso time>,
         "tasks": {<task_id>: {"params": {...}, "file": "tasks/<task_id>.h5",
                               "status": "pending"|"queued"|"running"|"stopped"|"done"|"failed",
                               "message": "", "bins_done": int, "bins_total": int, "steps_done": int,
                               "steps_total": int, "seconds": float (wall time of all sessions),
                               "updated": <iso time>,
                               "rank": int (queued or running: the MPI rank),
                               "process": "<host>:<pid>" (queued or running: the process that claimed it)}}}

    ``queued`` is a task handed to an MPI rank that has not started it yet (it finishes its current unit
    first); the counters of running tasks are kept current (rewritten every few seconds).

    ``tasks`` entries must hold at least ``task_id``, ``params``, ``bins_total``, ``steps_total``.
    """
    t = now_iso()
    entries = {}
    for d in tasks:
        entries[d["task_id"]] = {
            "params": d["params"], "file": f"tasks/{d['task_id']}.h5", "status": "pending", "message": "",
            "bins_done": 0, "bins_total": int(d["bins_total"]), "steps_done": 0,
            "steps_total": int(d["steps_total"]), "seconds": 0.0, "updated": t,
        }
    return {"format": INDEX_FORMAT, "format_version": INDEX_VERSION, "fingerprint": fingerprint,
            "config_source": config_source, "name": name, "created": t, "updated": t, "tasks": entries}


def load_index(run_dir: str | os.PathLike) -> dict[str, Any] | None:
    """The run index of ``run_dir``, None if there is none; UserError if it is unreadable or foreign.

    An index of the earlier format name is returned with the current name (it is written that way)."""
    path = index_path(run_dir)
    if not path.exists():
        return None
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise UserError(f"the run index cannot be read ({short_reason(exc)})", str(path)) from None
    kind = known_format(data.get("format"), INDEX_FORMAT) if isinstance(data, dict) else None
    if kind is None:
        raise UserError(f"not a run index written by qmc (no format {INDEX_FORMAT!r})", str(path))
    if data.get("format_version") != INDEX_VERSION or not isinstance(data.get("tasks"), dict):
        raise UserError(f"run index version {data.get('format_version')!r} is not supported", str(path))
    if kind == "old":
        note_old_format(INDEX_FORMAT, data["format"], str(path))
        data["format"] = INDEX_FORMAT
    return data


@contextmanager
def _locked(run_dir: str | os.PathLike) -> Iterator[None]:
    """Hold the lock of the run index (``RUN_DIR/claims/index.lock``, ``fcntl.lockf``; none where there is no
    ``fcntl``).  Taken for the moment of a read-and-write, by the processes sharing a run directory."""
    try:
        import fcntl
    except ImportError:  # not POSIX: one writer per run directory
        yield
        return
    path = Path(run_dir) / LOCK_NAME
    try:
        path.parent.mkdir(exist_ok=True)
        fh = open(path, "a+b")
    except OSError as exc:
        raise write_fault(path, exc) from None
    with fh:
        fcntl.lockf(fh, fcntl.LOCK_EX)
        try:
            yield
        finally:
            fcntl.lockf(fh, fcntl.LOCK_UN)


def write_index(run_dir: str | os.PathLike, index: dict[str, Any], mine: Collection[str] | None = None
                ) -> None:
    """Write ``RUN_DIR/index.json`` atomically; WriteFault when the machine refuses.

    Without ``mine`` the whole ``index`` is written.  With ``mine`` (the task ids this process keeps) the
    file is read first, under the index lock, and the entries of all other tasks are copied from it into
    ``index`` before it is written, so that processes sharing the run directory keep each other's entries.
    """
    text = index_path(run_dir)
    if mine is None:
        index["updated"] = now_iso()
        atomic_write_text(text, json.dumps(index, indent=1, default=plain) + "\n")
        return
    keep = set(mine)
    with _locked(run_dir):
        try:
            current = json.loads(text.read_text(encoding="utf-8")) if text.exists() else None
        except (OSError, ValueError):
            current = None
        if isinstance(current, dict) and current.get("fingerprint") == index.get("fingerprint"):
            for tid, entry in (current.get("tasks") or {}).items():
                if tid not in keep and tid in index["tasks"] and isinstance(entry, dict):
                    index["tasks"][tid] = entry
        index["updated"] = now_iso()
        atomic_write_text(text, json.dumps(index, indent=1, default=plain) + "\n")
