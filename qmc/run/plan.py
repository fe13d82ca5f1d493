"""Preparing a run directory for ``qmc run``: :func:`prepare_run` and the :class:`RunPlan` it returns.

:func:`prepare_run` checks a configuration against a run directory (:mod:`qmc.run.changes`: a run grows by
new scan points and more bins of the same length; other physics, warm-up or bin length is refused unless
forced, in which case the old index and the task files of changed tasks are renamed aside, never deleted),
writes ``config.toml`` and ``index.json``, and lists the unfinished tasks, largest lattices first.  Running
them is :func:`qmc.run.serial.run_serial` or :mod:`qmc.mpi`.
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
from qmc.run.changes import survey
from qmc.run.outcome import WHERE_KEYS
from qmc.run.stopping import check_run_observables
from qmc.run.task_identity import steps_total
from qmc.storage.atomic import atomic_write_text, remove_leftovers
from qmc.storage.claims import ClaimBook
from qmc.storage.faults import write_fault
from qmc.storage.run_index import new_index, write_index

__all__ = ["RunPlan", "prepare_run"]


@dataclass
class RunPlan:
    """What ``qmc run`` will do: ``tasks`` to run in order (unfinished, largest first), ``done`` ids that are
    finished already, the ``index`` (already written), and what became of the directory's contents
    (:mod:`qmc.run.changes`)."""

    run_dir: Path
    config: RunConfig
    tasks: list[Task]
    done: list[str]
    index: dict[str, Any]
    set_aside: list[tuple[str, str, str]] = field(default_factory=list)
    """``(path, renamed to, why)`` of every file renamed aside by ``--force``."""
    kept: list[str] = field(default_factory=list)
    """Ids of the configuration's tasks whose files were kept."""
    grown: list[str] = field(default_factory=list)
    """Ids of the finished tasks that now continue (more bins of the same length)."""
    others: list[str] = field(default_factory=list)
    """Ids in the index that the configuration no longer has (their files stay)."""

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


def _entry(task: Task) -> dict[str, Any]:
    return {"task_id": task.task_id, "params": dict(task.params), "bins_total": task.sampling.bins,
            "steps_total": steps_total(task)}


def prepare_run(config: RunConfig, out: str | os.PathLike | None = None, *, only: tuple[str, ...] = (),
                force: bool = False) -> RunPlan:
    """Check the run directory against ``config``, write ``config.toml`` and ``index.json``, list the work.

    Raises UserError, with nothing changed on disk, for: unknown ``only`` ids, a model that cannot be built,
    an output path that is a file, a directory holding a run that this configuration cannot grow (other
    physics, task files of another chain, warm-up or bin length; without ``force``), a foreign or damaged
    ``index.json`` (without ``force``) or task file.  With ``force`` the old index, a
    differing ``config.toml`` and the task files of changed tasks are renamed to ``<name>.<time>.old``.
    Raises :class:`~qmc.storage.faults.WriteFault` when the machine refuses to write in the run directory.
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
    found = survey(config, run_dir, force)
    aside = [(run_dir / "index.json", found.index_aside)] if found.index_aside else []
    copy = run_dir / "config.toml"
    same_file = copy.exists() and os.path.samefile(copy, config.path)
    if copy.is_file() and not same_file and found.index is None and copy.read_bytes() != config.text.encode():
        if found.index_aside:  # it goes with the index
            aside.append((copy, found.index_aside))
        elif not force:
            raise UserError("holds a config.toml that differs from this configuration and no run index; "
                            "choose another output directory, or use --force to rename it aside",
                            str(run_dir))
        else:
            aside.append((copy, "a config.toml without a run index"))

    # ... then changes
    stamp = _stamp()
    try:
        moved = [(str(p), str(_aside(p, stamp)), why) for p, why in aside + found.aside]
        (run_dir / "tasks").mkdir(parents=True, exist_ok=True)
        for folder in (run_dir, run_dir / "tasks"):  # writes interrupted by a kill: the previous complete
            remove_leftovers(folder)                 # files are in place
        if not same_file:
            atomic_write_text(copy, config.text)
        index = found.index
        if index is None:
            index = new_index(fp, os.path.abspath(config.path), config.name,
                              [_entry(t) for t in config.tasks()])
        index.update(fingerprint=fp, physics=config.physics_fingerprint(),
                     config_source=os.path.abspath(config.path), name=config.name)
        live = ClaimBook(run_dir).live()  # tasks other processes run now: their entries stay theirs
        for task in config.tasks():
            entry = index["tasks"].setdefault(task.task_id, new_index(fp, "", "", [_entry(task)])["tasks"][
                task.task_id])
            entry.update(params=dict(task.params), bins_total=task.sampling.bins,
                         steps_total=steps_total(task))
            entry.pop("note", None)
            if task.task_id in found.status:
                st, msg, head = found.status[task.task_id]
                entry.update(status=st, message=(msg or entry.get("message", "")) if st == "failed" else "",
                             bins_done=int(head.get("checkpoint_bins_done", 0)),
                             steps_done=int(head.get("checkpoint_steps_done", 0)))
            else:
                entry.update(status="pending", message="", bins_done=0, steps_done=0)
            for k in WHERE_KEYS:
                entry.pop(k, None)
        for tid in found.others:
            index["tasks"][tid]["note"] = "not in the current configuration (its file is kept)"
        write_index(run_dir, index, mine=[tid for tid in index["tasks"] if tid not in live])
    except OSError as exc:  # the machine refuses (a WriteFault of the atomic writes passes as it is)
        raise write_fault(run_dir, exc) from None

    order = {t.task_id: i for i, t in enumerate(config.tasks())}
    todo = [t for t in selected if index["tasks"][t.task_id]["status"] != "done"]
    todo.sort(key=lambda t: (-math.prod(t.size), -t.beta, order[t.task_id]))
    done = [t.task_id for t in selected if index["tasks"][t.task_id]["status"] == "done"]
    return RunPlan(run_dir, config, todo, done, index, moved, found.kept, found.grown, found.others)
