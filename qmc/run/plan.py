"""Preparing a run directory for ``qmc run``: :func:`prepare_run` and the :class:`RunPlan` it returns.

:func:`prepare_run` checks a configuration against a run directory (refusing a directory that holds a
different configuration unless forced, in which case the old index and the task files of changed tasks are
renamed aside, never deleted), writes ``config.toml`` and ``index.json``, and lists the unfinished tasks,
largest lattices first.  Running them is :func:`qmc.run.serial.run_serial` or :mod:`qmc.mpi`.
"""

from __future__ import annotations

import math
import os
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from qmc.config.parser import RunConfig, Task, config_fingerprint, validate
from qmc.errors import UserError, did_you_mean
from qmc.exchange.ladder import check_ladders
from qmc.run.stopping import check_run_observables
from qmc.run.task_identity import steps_total, task_fingerprint
from qmc.storage.atomic import atomic_write_text
from qmc.storage.run_index import load_index, new_index, write_index
from qmc.storage.task_file import task_header, task_path

__all__ = ["RunPlan", "prepare_run"]


@dataclass
class RunPlan:
    """What ``qmc run`` will do: ``tasks`` to run in order (unfinished, largest first), ``done`` ids that are
    finished already, the ``index`` (already written), and files renamed aside by ``--force``."""

    run_dir: Path
    config: RunConfig
    tasks: list[Task]
    done: list[str]
    index: dict[str, Any]
    moved: list[str] = field(default_factory=list)

    def unfinished(self) -> list[str]:
        """The selected tasks (to run, or done before) whose index entry is not ``done``."""
        selected = [t.task_id for t in self.tasks] + self.done
        return [tid for tid in selected if self.index["tasks"][tid]["status"] != "done"]


def _stamp() -> str:
    return time.strftime("%Y%m%d-%H%M%S")


def _aside(path: Path, stamp: str) -> Path:
    """Rename ``path`` to ``<path>.<stamp>.old`` (adding a counter if needed); returns the new path."""
    target = path.with_name(f"{path.name}.{stamp}.old")
    k = 1
    while target.exists():
        target = path.with_name(f"{path.name}.{stamp}-{k}.old")
        k += 1
    os.replace(path, target)
    return target


def _select(config: RunConfig, only: tuple[str, ...] | list[str]) -> list[Task]:
    tasks = config.tasks()
    if not only:
        return tasks
    ids = {t.task_id for t in tasks}
    wanted: list[str] = []
    for item in only:
        wanted += [w.strip() for w in item.split(",") if w.strip()]
    for w in wanted:
        if w not in ids:
            listing = ", ".join(t.task_id for t in tasks[:8]) + (", ..." if len(tasks) > 8 else "")
            raise UserError(f"no task {w!r} in this configuration{did_you_mean(w, ids)}; the tasks are: "
                            f"{listing}", "--only")
    return [t for t in tasks if t.task_id in set(wanted)]


def _status_from_file(path: Path) -> tuple[str, str, dict[str, Any]]:
    head = task_header(path)
    status = head.get("status", "")
    if status not in ("done", "failed"):
        status = "stopped"
    return status, head.get("message", "") if status == "failed" else "", head


def _check_index(run_dir: Path, fp: str, force: bool) -> tuple[dict[str, Any] | None, list[Path]]:
    """The run index if it is ours and of the same configuration; else refuse, or (forced) set it aside."""
    try:
        index = load_index(run_dir)
    except UserError:
        if not force:
            raise
        return None, [run_dir / "index.json"]
    if index is not None and index.get("fingerprint") != fp:
        if not force:
            raise UserError(f"holds a run of a different configuration (made from "
                            f"{index.get('config_source', '?')}); choose another output directory, or use "
                            "--force to rename the old index aside (task files are never deleted)",
                            str(run_dir))
        return None, [run_dir / "index.json"]
    return index, []


def _check_task_files(config: RunConfig, run_dir: Path, force: bool
                      ) -> tuple[dict[str, tuple[str, str, dict[str, Any]]], list[Path]]:
    """Status of each existing task file; files of changed tasks are refused, or (forced) set aside.

    A file that is not a task file, or is damaged, is always refused (UserError), never moved.
    """
    status: dict[str, tuple[str, str, dict[str, Any]]] = {}
    aside: list[Path] = []
    for task in config.tasks():
        path = task_path(run_dir, task.task_id)
        if not path.exists():
            continue
        st = _status_from_file(path)
        if st[2].get("task_fingerprint") != task_fingerprint(task):
            if not force:
                raise UserError("was written for different parameters or sampling than this configuration's "
                                "task of the same name; use another output directory, or --force to rename "
                                "it aside", str(path))
            aside.append(path)
            continue
        status[task.task_id] = st
    return status, aside


def _entry(task: Task) -> dict[str, Any]:
    return {"task_id": task.task_id, "params": dict(task.params), "bins_total": task.sampling.bins,
            "steps_total": steps_total(task)}


def prepare_run(config: RunConfig, out: str | os.PathLike | None = None, *, only: tuple[str, ...] = (),
                force: bool = False) -> RunPlan:
    """Check the run directory against ``config``, write ``config.toml`` and ``index.json``, list the work.

    Raises UserError, with nothing changed on disk, for: unknown ``only`` ids, a model that cannot be built,
    an output path that is a file, a directory holding a different configuration (without ``force``), a
    foreign or damaged ``index.json`` (without ``force``) or task file.  With ``force`` the old index, a
    differing ``config.toml`` and the task files of changed tasks are renamed to ``<name>.<time>.old``.
    """
    where = "--out" if out is not None else config.where("run.output")
    run_dir = Path(os.path.abspath(out if out is not None else config.output_dir))
    if run_dir.exists() and not run_dir.is_dir():
        raise UserError(f"{run_dir} exists and is not a directory", where)
    if (run_dir / "tasks").exists() and not (run_dir / "tasks").is_dir():
        raise UserError(f"{run_dir / 'tasks'} exists and is not a directory", where)
    selected = _select(config, only)
    validate(config)
    check_run_observables(config)
    check_ladders(config.tasks())
    fp = config_fingerprint(config)

    # checks first (nothing is changed when one fails) ...
    index, aside = _check_index(run_dir, fp, force)
    copy = run_dir / "config.toml"
    same_file = copy.exists() and os.path.samefile(copy, config.path)
    if copy.is_file() and not same_file and index is None and copy.read_bytes() != config.text.encode():
        if not force:
            raise UserError("holds a config.toml that differs from this configuration and no run index; "
                            "choose another output directory, or use --force to rename it aside",
                            str(run_dir))
        aside.append(copy)
    status, files_aside = _check_task_files(config, run_dir, force)

    # ... then changes
    stamp = _stamp()
    try:
        moved = [str(_aside(p, stamp)) for p in aside + files_aside]
        (run_dir / "tasks").mkdir(parents=True, exist_ok=True)
        for tmp in (run_dir / "tasks").glob("*.h5.tmp"):
            tmp.unlink()  # a write interrupted by a kill; the previous complete file is in place
        if not same_file:
            atomic_write_text(copy, config.text)
        if index is None:
            index = new_index(fp, os.path.abspath(config.path), config.name,
                              [_entry(t) for t in config.tasks()])
        index["config_source"] = os.path.abspath(config.path)
        for task in config.tasks():
            entry = index["tasks"].setdefault(task.task_id, new_index(fp, "", "", [_entry(task)])["tasks"][
                task.task_id])
            if task.task_id in status:
                st, msg, head = status[task.task_id]
                entry.update(status=st, message=(msg or entry.get("message", "")) if st == "failed" else "",
                             bins_done=int(head.get("checkpoint_bins_done", 0)),
                             steps_done=int(head.get("checkpoint_steps_done", 0)))
            else:
                entry.update(status="pending", message="", bins_done=0, steps_done=0)
        write_index(run_dir, index)
    except OSError as exc:
        raise UserError(f"cannot write in the run directory ({exc.strerror or exc})", str(run_dir)) from None

    order = {t.task_id: i for i, t in enumerate(config.tasks())}
    todo = [t for t in selected if index["tasks"][t.task_id]["status"] != "done"]
    todo.sort(key=lambda t: (-math.prod(t.size), -t.beta, order[t.task_id]))
    done = [t.task_id for t in selected if index["tasks"][t.task_id]["status"] == "done"]
    return RunPlan(run_dir, config, todo, done, index, moved)
