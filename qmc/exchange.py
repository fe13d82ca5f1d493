"""Replica exchange along one scanned coupling: the chains of an exchange group run side by side.

An exchange group (``Task.exchange_group``) is the set of tasks that differ only in the coupling named by
``[sampling] exchange``; sorted by that coupling they form a *ladder* of M chains that advance in lockstep
and swap configurations at exchange points.  The ladder in memory (swap rule, random stream, cutoff
padding, walker bookkeeping) is :class:`Ladder` in :mod:`qmc.exchange_ladder`, re-exported here with its
helpers; this module runs ladders with their task files.

Design choice: a whole ladder is one unit of work, run by one process that interleaves its chains
(:func:`run_group`).  This is always correct and bit-identical however a run is spread over ranks;
parallelism comes from running different ladders (sizes, other parameters, replicas) on different ranks.
Running a ladder's chains on separate ranks would only pay off for few, very long ladders, and every rank
would wait at each exchange point for the slowest chain (cost grows with the coupling).

Files: each task of the ladder has its own task file (see :mod:`qmc.storage`) with an ``/exchange`` group:
attrs ``parameter, group, position, value, values, task_ids, exchange_every, acceptance_up,
acceptance_down, round_trips_total`` and datasets ``attempted, accepted, warmup_attempted,
warmup_accepted`` (per pair, M-1), ``round_trips`` (per configuration), ``n_up, n_down`` (per position)
and ``walker`` (per bin: the configuration at this position when the bin closed).  All files of a ladder
are checkpointed at the same step, at an exchange point; the checkpoint holds the chain state plus the
ladder state under ``exchange:<key>``, and the previous checkpoint under ``previous:<key>``: the files are
replaced one by one, so after a kill between two of them the ladder resumes from the newest step that
every file holds (bins are deterministic, so re-running a stretch reproduces them bit for bit).
"""

from __future__ import annotations

import json
import logging
import os
import time
import traceback
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from qmc.config import Task, build_model
from qmc.errors import UserError
from qmc.exchange_ladder import GROUP_STATE_KEYS, Ladder, check_ladder_models, exchange_seed_key, ladder_tasks
from qmc.pacing import next_chunk, write_due
from qmc.progress import NullProgress, ProgressSink
from qmc.provenance import session_entry, task_provenance
from qmc.rng import stream_seed
from qmc.storage import TaskRecord, now_iso, read_task, task_path, write_task
from qmc.task_identity import task_fingerprint

__all__ = [
    "Ladder", "ladder_tasks", "check_ladder_models", "check_ladders", "exchange_seed_key", "work_units",
    "run_group", "run_unit", "exchange_summary", "GROUP_STATE_KEYS",
]

_CP_GROUP = "exchange:"
_CP_PREV = "previous:"


def check_ladders(tasks: Sequence[Task]) -> int:
    """Check every exchange ladder among ``tasks`` (same terms at every point, uniform group couplings)
    before anything runs; raises UserError.  Returns the number of ladders."""
    groups: dict[str, list[Task]] = {}
    for t in tasks:
        if t.exchange_group is not None:
            groups.setdefault(t.exchange_group, []).append(t)
    for members in groups.values():
        ordered = ladder_tasks(members)
        check_ladder_models(ordered, [build_model(t) for t in ordered])
    return len(groups)


# ----------------------------------------------------------------------------------------------------------
# user-facing statistics


def _rate(acc: int, att: int) -> float:
    return acc / att if att else float("nan")


def exchange_summary(info: dict[str, Any] | None) -> dict[str, Any] | None:
    """Acceptance rates of one task's ``/exchange`` data (as :func:`qmc.storage.read_task` returns it).

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


# ----------------------------------------------------------------------------------------------------------
# work units


def work_units(tasks: Sequence[Task], all_tasks: Sequence[Task] | None = None) -> list[list[Task]]:
    """Split ``tasks`` into units of work: a single task, or a whole exchange ladder.

    A ladder is complete: every task of ``all_tasks`` (default ``tasks``) in the same exchange group joins
    it, in ladder order, at the place of its first member in ``tasks`` (the order of ``tasks`` is kept).
    """
    pool = list(all_tasks) if all_tasks is not None else list(tasks)
    members: dict[str, list[Task]] = {}
    for t in pool:
        if t.exchange_group is not None:
            members.setdefault(t.exchange_group, []).append(t)
    units: list[list[Task]] = []
    seen: set[str] = set()
    for t in tasks:
        if t.exchange_group is None:
            units.append([t])
        elif t.exchange_group not in seen:
            seen.add(t.exchange_group)
            group = members.get(t.exchange_group, [t])
            if t not in group:
                group = [*group, t]
            units.append(ladder_tasks(group))
    return units


def run_unit(unit: Sequence[Task], run_dir: str | os.PathLike, **kwargs: Any) -> list[Any]:
    """Run one unit of :func:`work_units`: :func:`qmc.runner.run_task` for a single task without exchange,
    :func:`run_group` for a ladder.  Returns the TaskOutcome of every task of the unit."""
    if len(unit) == 1 and unit[0].exchange_group is None:
        from qmc.runner import run_task

        return [run_task(unit[0], run_dir, **kwargs)]
    return run_group(unit, run_dir, **kwargs)


# ----------------------------------------------------------------------------------------------------------
# a ladder with its task files


class _Member:
    """File-side bookkeeping of one task of a ladder."""

    def __init__(self, task: Task, run_dir: Path) -> None:
        self.task = task
        self.path = task_path(run_dir, task.task_id)
        self.fingerprint = task_fingerprint(task)
        self.seed_words = stream_seed(task.seed, task.seed_key)
        self.rows: list[np.ndarray] = []
        self.walker: list[int] = []
        self.sessions: list[dict[str, Any]] = []
        self.last: TaskRecord | None = None
        self.prev: dict[str, np.ndarray] | None = None  # checkpoint arrays of the last write (or the restore)
        self.prev_steps = -1
        self.bins_done = 0
        self.steps_done = 0


def _split(cp: dict[str, np.ndarray]) -> tuple[int, dict, dict] | None:
    """(step, chain state, ladder state) of checkpoint arrays, None if incomplete."""
    chain = {k: v for k, v in cp.items() if ":" not in k}
    group = {k[len(_CP_GROUP):]: v for k, v in cp.items() if k.startswith(_CP_GROUP)}
    if "steps" not in chain or not group:
        return None
    return int(np.asarray(chain["steps"]).reshape(-1)[0]), chain, group


def _candidates(data: Any) -> dict[int, tuple[dict, dict]]:
    """Restorable states of one task file: step -> (chain state, ladder state); the current checkpoint
    and the previous one."""
    cp = data.checkpoint or {}
    out: dict[int, tuple[dict, dict]] = {}
    for part in (cp, {k[len(_CP_PREV):]: v for k, v in cp.items() if k.startswith(_CP_PREV)}):
        got = _split(part)
        if got is not None:
            out.setdefault(got[0], (got[1], got[2]))
    return out


def _decoded(info: dict[str, Any]) -> dict[str, Any]:
    """/exchange attributes with JSON-encoded lists decoded."""
    out = dict(info)
    for k, v in info.items():
        if isinstance(v, str) and v.startswith("["):
            try:
                out[k] = json.loads(v)
            except ValueError:
                pass
    return out


class _GroupRun:
    """One execution of :func:`run_group`."""

    def __init__(self, tasks: list[Task], run_dir: Path, stop_flag: Any, sink: Any, log: logging.Logger,
                 deadline: float | None, config_text: str | None, config_fp: str,
                 checkpoint_seconds: float | None) -> None:
        self.tasks, self.run_dir, self.stop_flag, self.sink, self.log = tasks, run_dir, stop_flag, sink, log
        self.deadline = deadline
        self.config_text, self.config_fp = config_text, config_fp
        self.interval = float(checkpoint_seconds or tasks[0].sampling.checkpoint_seconds)
        self.members = [_Member(t, run_dir) for t in tasks]
        self.ladder: Ladder | None = None
        self.stop_reason = ""
        self.write_seconds = 0.0

    # -------------------------------------------------------------------------------------------- setup
    def _config(self) -> tuple[str, str]:
        task = self.tasks[0]
        if self.config_text is not None:
            return self.config_text, os.path.abspath(task.source)
        for p in (self.run_dir / "config.toml", Path(task.source)):
            try:
                return p.read_text(encoding="utf-8"), str(p)
            except (OSError, UnicodeDecodeError):
                continue
        return "", task.source

    def _settings(self) -> dict[str, Any]:
        t = self.tasks[0]
        return {"parameter": t.exchange, "group": t.exchange_group,
                "exchange_every": t.sampling.exchange_every, "task_ids": [x.task_id for x in self.tasks],
                "values": [float(x.params[t.exchange]) for x in self.tasks]}

    def _load(self) -> bool:
        """Create or restore the ladder; False when every file says done."""
        models = [build_model(t) for t in self.tasks]
        settings = self._settings()
        found: list[tuple[Any, dict] | None] = []
        for mem in self.members:
            if not mem.path.exists():
                found.append(None)
                continue
            data = read_task(mem.path, with_checkpoint=True)
            if data.task_fingerprint != mem.fingerprint:
                raise UserError("was written for a different model, beta, sampling or seed than this task; "
                                "move it away (or run with --force, which renames it aside)", str(mem.path))
            info = _decoded(data.exchange or {})
            mine = {k: info.get(k) for k in settings}
            if not info or any(_norm(mine[k]) != _norm(v) for k, v in settings.items()):
                raise UserError(f"was not written by replica exchange along '{settings['parameter']}' with "
                                f"the partners {', '.join(settings['task_ids'])} every "
                                f"{settings['exchange_every']} steps; move it away (or run with --force)",
                                str(mem.path))
            found.append((data, info))
        if all(f is not None and f[0].status == "done" for f in found):
            for mem, f in zip(self.members, found, strict=True):
                mem.bins_done, mem.steps_done = f[0].bins_done, f[0].steps_done
            return False
        cands = [(_candidates(f[0]) if f is not None else {}) for f in found]
        common = set.intersection(*(set(c) for c in cands)) if all(cands) else set()
        step = max(common) if common else None
        if step is None:  # start over: some file never got past its first write (or none exists)
            self.ladder = Ladder(self.tasks, models)
            for mem, f in zip(self.members, found, strict=True):
                mem.sessions = list(f[0].provenance.get("sessions", [])) if f is not None else []
            self.log.info("exchange group %s: starting %d chains along %s (%d sites, beta %g, %d steps)",
                          self.tasks[0].exchange_group, len(self.tasks), self.tasks[0].exchange,
                          models[0].n_sites, self.tasks[0].beta, self.ladder.total_steps)
        else:
            chains = [c[step][0] for c in cands]
            group = cands[0][step][1]
            for c in cands[1:]:
                g = c[step][1]
                if any(not np.array_equal(np.asarray(g[k]), np.asarray(group[k])) for k in GROUP_STATE_KEYS):
                    raise UserError(f"the task files of exchange group {self.tasks[0].exchange_group} "
                                    f"disagree about the ladder state at step {step}; move them away to "
                                    "start over",
                                    str(self.members[0].path.parent))
            self.ladder = Ladder(self.tasks, models, chain_states=chains, group_state=group)
            for i, (mem, f) in enumerate(zip(self.members, found, strict=True)):
                data, info = f
                sim = self.ladder.sims[i]
                nb = sim.bins_done
                if data.bins_done < nb or tuple(data.bin_names) != sim.bin_names:
                    raise UserError(f"damaged task file: checkpoint at {sim.steps_done} steps does not match "
                                    f"its {data.bins_done} stored bins", str(mem.path))
                table = np.column_stack([data.bins[n][:nb] for n in sim.bin_names]).reshape(nb, -1)
                mem.rows = [np.array(r) for r in table]
                walker = np.asarray(info.get("walker", np.zeros(0)), dtype=np.int64).reshape(-1)
                if walker.size < nb:
                    raise UserError("damaged task file: the exchange walk is shorter than the bins",
                                    str(mem.path))
                mem.walker = [int(x) for x in walker[:nb]]
                mem.sessions = list(data.provenance.get("sessions", []))
                mem.prev = {**sim.state(), **{_CP_GROUP + k: v for k, v in self.ladder.group_state().items()}}
                mem.prev_steps = sim.steps_done
            self.log.info("exchange group %s: resuming %d chains at step %d of %d",
                          self.tasks[0].exchange_group, len(self.tasks), step, self.ladder.total_steps)
        self.models = models
        for mem in self.members:
            mem.session = session_entry(now_iso(), self.ladder.steps_done)
            mem.sessions.append(mem.session)
        return True

    # -------------------------------------------------------------------------------------------- writing
    def _record(self, i: int, status: str, text: str, source: str, t: float) -> TaskRecord:
        lad, mem, task = self.ladder, self.members[i], self.tasks[i]
        assert lad is not None
        sim, model = lad.sims[i], self.models[i]
        mem.session.update(stop=now_iso(t), steps_stop=sim.steps_done, ended=status)
        params = dict(task.params)
        for k, v in (("lattice", task.lattice_kind), ("size", list(task.size)), ("boundary", task.boundary)):
            params.setdefault(k, v)
        ncol = len(sim.bin_names)
        group = lad.group_state()
        checkpoint = dict(sim.state())
        checkpoint.update({_CP_GROUP + k: v for k, v in group.items()})
        cp_attrs: dict[str, Any] = {"steps_done": sim.steps_done, "bins_done": sim.bins_done,
                                    "steps_total": sim.total_steps, "time": t, "time_iso": now_iso(t)}
        if mem.prev is not None and mem.prev_steps != sim.steps_done:
            checkpoint.update({_CP_PREV + k: v for k, v in mem.prev.items()})
            cp_attrs["previous_steps_done"] = mem.prev_steps
        settings = self._settings()
        att, acc = group["attempted"], group["accepted"]
        m = len(self.tasks)
        exchange: dict[str, Any] = {
            **settings, "position": i, "value": float(task.params[task.exchange]),
            "acceptance_up": _rate(int(acc[i]), int(att[i])) if i < m - 1 else float("nan"),
            "acceptance_down": _rate(int(acc[i - 1]), int(att[i - 1])) if i > 0 else float("nan"),
            "round_trips_total": int(group["round_trips"].sum()),
            "walker": np.array(mem.walker, dtype=np.int64),
        }
        for k in ("attempted", "accepted", "warmup_attempted", "warmup_accepted", "round_trips", "n_up",
                  "n_down"):
            exchange[k] = group[k]
        return TaskRecord(
            task_id=task.task_id, status=status, message="", task_fingerprint=mem.fingerprint,
            config_text=text, config_path=source, config_fingerprint=self.config_fp, params=params,
            model=model.to_arrays(), provenance=task_provenance(task.seed, task.seed_key, mem.seed_words),
            sessions=[dict(x) for x in mem.sessions], bin_names=sim.bin_names,
            bins=np.array(mem.rows, dtype=np.float64).reshape(len(mem.rows), ncol),
            bins_attrs={"steps_per_bin": sim.steps_per_bin, "n_sites": model.n_sites,
                        "linear_size": model.linear_size, "beta": float(task.beta),
                        "bins_total": task.sampling.bins, "warmup_steps": sim.warmup_steps,
                        "measure_steps": sim.measure_steps},
            vbs_histogram=np.array(sim.vbs_histogram), vbs_hist_range=sim.vbs_hist_range,
            checkpoint=checkpoint, checkpoint_attrs=cp_attrs, exchange=exchange,
        )

    def _write(self, status: str) -> None:
        t0 = time.perf_counter()
        t = time.time()
        text, source = self._config()
        lad = self.ladder
        assert lad is not None
        for i, mem in enumerate(self.members):
            rec = self._record(i, status, text, source, t)
            mem.path.parent.mkdir(parents=True, exist_ok=True)
            write_task(mem.path, rec)
            mem.last = rec
            sim = lad.sims[i]
            mem.prev = {k: v for k, v in rec.checkpoint.items() if not k.startswith(_CP_PREV)}
            mem.prev_steps = sim.steps_done
            mem.bins_done, mem.steps_done = sim.bins_done, sim.steps_done
        self.write_seconds = time.perf_counter() - t0
        self.last_write = time.monotonic()
        self.pending = False

    def record_failure(self, message: str) -> None:
        """Rewrite each member's last good file with status ``failed``."""
        for mem in self.members:
            if mem.last is None:
                continue
            mem.last.status, mem.last.message = "failed", message
            try:
                write_task(mem.path, mem.last)
            except Exception as exc:
                self.log.error("task %s: could not record the failure in %s: %s", mem.task.task_id, mem.path,
                               exc)

    # -------------------------------------------------------------------------------------------- running
    def _should_stop(self, next_seconds: float) -> bool:
        flag = self.stop_flag
        if flag is not None and flag.is_set():
            self.stop_reason = getattr(flag, "reason", "") or "stop requested"
            return True
        need = next_seconds + self.write_seconds + 0.05
        if self.deadline is not None and time.time() + need >= self.deadline:
            self.stop_reason = "time budget used up"
            return True
        return False

    def execute(self) -> str:
        if not self._load():
            self.sink.task_started(self.tasks[0].task_id, self.members[0].steps_done,
                                   self.members[0].steps_done, self.tasks[0].sampling.bins)
            self.log.info("exchange group %s: already done", self.tasks[0].exchange_group)
            return "done"
        lad = self.ladder
        assert lad is not None
        m = lad.m
        self.sink.task_started(self.tasks[0].task_id, m * lad.steps_done, m * lad.total_steps,
                               self.tasks[0].sampling.bins)
        if any(mem.prev is None for mem in self.members):  # a fresh start: files at step 0 first
            self._write("running")
        self.last_write = time.monotonic()
        self.pending = False
        chunk, step_time = 16, 0.0
        while not lad.done:
            # only at exchange points (all chains at the same step): stop, or write
            if self._should_stop(step_time * m * (lad.next_stop() - lad.steps_done)):
                break
            target = lad.next_stop()
            while lad.steps_done < target:
                n = min(chunk, target - lad.steps_done)
                before = lad.steps_done
                t0 = time.perf_counter()
                new = lad.advance(n)
                dt = time.perf_counter() - t0
                for mem, rows, walk in zip(self.members, new, lad.walker_rows, strict=True):
                    mem.rows.extend(np.array(r) for r in rows)
                    mem.walker.extend(walk)
                    walk.clear()
                    self.pending = self.pending or len(rows) > 0
                done = lad.steps_done - before
                if done > 0:
                    step_time = dt / (done * m)  # per chain step: a ladder step advances all m chains
                chunk = next_chunk(chunk, dt, done)
                self.sink.task_advanced(m * lad.steps_done, lad.sims[0].bins_done)
            if write_due(time.monotonic() - self.last_write, self.pending, self.interval, lad.done):
                self._write("running")
        status = "done" if lad.done else "stopped"
        self._write(status)
        if status == "done":
            self.log.info("exchange group %s: done (%d chains, %d bins each)", self.tasks[0].exchange_group,
                          m, lad.sims[0].bins_done)
        else:
            self.log.info("exchange group %s: stopped at step %d of %d (%s); checkpoint written",
                          self.tasks[0].exchange_group, lad.steps_done, lad.total_steps, self.stop_reason)
        return status


def _norm(v: Any) -> Any:
    """Comparable form of a stored or in-memory setting (numbers as floats, sequences as lists)."""
    if isinstance(v, np.ndarray):
        v = v.tolist()
    if isinstance(v, (list, tuple)):
        return [_norm(x) for x in v]
    if isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, bool):
        return float(v)
    return v


def run_group(
    tasks: Sequence[Task],
    run_dir: str | os.PathLike,
    *,
    stop_flag: Any = None,
    progress: ProgressSink | None = None,
    logger: logging.Logger | None = None,
    deadline: float | None = None,
    config_text: str | None = None,
    config_fingerprint: str = "",
    checkpoint_seconds: float | None = None,
) -> list[Any]:
    """Run (or resume) the ladder of one exchange group until done, stopped or out of time.

    Same contract as :func:`qmc.runner.run_task`, for all tasks of the group at once: returns one
    :class:`qmc.runner.TaskOutcome` per task in ladder order (all with the same status); a problem of the
    group is recorded as status ``failed`` with its message in every task of it, never raised.
    """
    from qmc.runner import TaskOutcome

    t_call = time.time()
    log = logger if logger is not None else logging.getLogger("qmc.run")
    sink = progress if progress is not None else NullProgress()
    ordered = ladder_tasks(tasks)
    run = _GroupRun(ordered, Path(run_dir), stop_flag, sink, log, deadline, config_text, config_fingerprint,
                    checkpoint_seconds)
    try:
        status = run.execute()
        message = run.stop_reason if status == "stopped" else ""
    except Exception as exc:  # recorded in every task of the group; the traceback goes to the log
        message = str(exc) if isinstance(exc, UserError) else f"{type(exc).__name__}: {exc}"
        log.error("exchange group %s failed: %s\n%s", ordered[0].exchange_group, message,
                  traceback.format_exc().rstrip())
        run.record_failure(message)
        status = "failed"
    sink.task_finished(status)
    seconds = time.time() - t_call
    out = []
    for mem in run.members:
        s = mem.task.sampling
        out.append(TaskOutcome(mem.task.task_id, status, message, mem.bins_done, s.bins, mem.steps_done,
                               s.warmup_steps + s.measure_steps, seconds / len(run.members), str(mem.path)))
    return out
