"""Replica exchange along one scanned coupling: the chains of an exchange group run side by side.

An exchange group (``Task.exchange_group``) is the set of tasks that differ only in the coupling named by
``[sampling] exchange``; sorted by that coupling they form a *ladder* of M chains that advance in lockstep
and swap configurations at exchange points.  The ladder in memory (swap rule, random stream, cutoff
padding, walker bookkeeping) is :class:`Ladder` in :mod:`qmc.exchange.ladder`, re-exported here with its
helpers; this module runs ladders with their task files.

A ladder is one unit of work for a *team* of processes (:mod:`qmc.exchange.team`): one process in a serial
run, up to M MPI ranks under the farm (:mod:`qmc.mpi.farm`), each running a contiguous block of the chains
and writing their task files.  The members meet only at synchronisation points, where they agree on
stopping and on checkpoint writes (:meth:`_GroupRun.execute`), so all files of a ladder always hold the
same step; any error on one member is raised on all of them.  Bins are bit-identical for every team
size (tests/test_ladder_team.py, tests/test_mpi.py).

Files: each task of the ladder has its own task file with an ``/exchange`` group:
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

from qmc.config.parser import Task, build_model
from qmc.engine.rng import stream_seed
from qmc.errors import UserError
from qmc.exchange.ladder import (
    GROUP_STATE_KEYS,
    Ladder,
    LadderError,
    chain_costs,
    check_ladder_models,
    exchange_seed_key,
    ladder_tasks,
)
from qmc.exchange.team import LadderTeam, SoloTeam, chain_blocks
from qmc.run.pacing import next_chunk, write_due
from qmc.run.progress import NullProgress, ProgressSink
from qmc.run.task_identity import task_fingerprint
from qmc.storage.provenance import now_iso, session_entry, task_provenance
from qmc.storage.task_file import TaskRecord, read_task, task_path, write_task

__all__ = [
    "Ladder", "ladder_tasks", "check_ladder_models", "check_ladders", "exchange_seed_key", "work_units",
    "run_group", "run_unit", "is_ladder", "exchange_summary", "GROUP_STATE_KEYS",
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


def is_ladder(unit: Sequence[Task]) -> bool:
    """Whether a unit of :func:`work_units` is an exchange ladder (else a single task)."""
    return not (len(unit) == 1 and unit[0].exchange_group is None)


def run_unit(unit: Sequence[Task], run_dir: str | os.PathLike, *, team: LadderTeam | None = None,
             **kwargs: Any) -> list[Any]:
    """Run one unit of :func:`work_units`: :func:`qmc.run.serial.run_task` for a single task without exchange,
    :func:`run_group` for a ladder (on ``team``, default this process alone).  Returns the TaskOutcome of
    every task of the unit run here."""
    if not is_ladder(unit):
        from qmc.run.serial import run_task

        return [run_task(unit[0], run_dir, **kwargs)]
    return run_group(unit, run_dir, team=team, **kwargs)


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
    """One execution of :func:`run_group` by one member of the ladder's team (all its members run it)."""

    def __init__(self, tasks: list[Task], run_dir: Path, stop_flag: Any, sink: Any, log: logging.Logger,
                 deadline: float | None, config_text: str | None, config_fp: str,
                 checkpoint_seconds: float | None, team: LadderTeam) -> None:
        self.tasks, self.run_dir, self.stop_flag, self.sink, self.log = tasks, run_dir, stop_flag, sink, log
        self.deadline = deadline
        self.config_text, self.config_fp = config_text, config_fp
        self.interval = float(checkpoint_seconds or tasks[0].sampling.checkpoint_seconds)
        self.team = team
        self.models = [build_model(t) for t in tasks]
        self.local = chain_blocks(len(tasks), team.size, chain_costs(tasks, self.models))[team.member]
        self.members = [_Member(tasks[i], run_dir) for i in self.local]
        self.ladder: Ladder | None = None
        self.stop_reason = ""
        self.write_seconds = 0.0
        self.write_error: str | None = None

    # -------------------------------------------------------------------------------------------- team
    def _agree(self, fn: Any) -> list[Any]:
        """Run ``fn()`` here, share its result with the other members and return all results (member
        order); an exception on any member is raised on every member (a UserError as such)."""
        try:
            mine: tuple[Any, Any] = (None, fn())
        except UserError as exc:
            mine = (("user", exc.message, exc.where), None)
        except Exception as exc:
            mine = (("other", f"{type(exc).__name__}: {exc}", traceback.format_exc()), None)
        got = self.team.allgather(mine)
        for err, _ in got:
            if err is not None:
                kind, text, extra = err
                if kind == "user":
                    raise UserError(text, extra)
                raise LadderError(text)
        return [r for _, r in got]

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

    def _read_files(self) -> list[tuple[Any, dict] | None]:
        """This member's task files (None where missing), checked against the tasks and the settings."""
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
        return found

    def _load(self) -> bool:
        """Create or restore the ladder (all members agree on the step); False when every file says done."""
        models = self.models
        found: list[tuple[Any, dict] | None] = []
        cands: list[dict[int, tuple[dict, dict]]] = []

        def scan() -> dict[str, Any]:
            found.extend(self._read_files())
            cands.extend((_candidates(f[0]) if f is not None else {}) for f in found)
            local = set.intersection(*(set(c) for c in cands)) if all(cands) else set()
            group = {}
            for step in local:  # the ladder state each step in every local file; they must agree
                group[step] = cands[0][step][1]
                for c in cands[1:]:
                    g = c[step][1]
                    if any(not np.array_equal(np.asarray(g[k]), np.asarray(group[step][k]))
                           for k in GROUP_STATE_KEYS):
                        group[step] = None
            return {"done": all(f is not None and f[0].status == "done" for f in found), "steps": local,
                    "group": group}

        scans = self._agree(scan)
        if all(x["done"] for x in scans):
            for mem, f in zip(self.members, found, strict=True):
                mem.bins_done, mem.steps_done = f[0].bins_done, f[0].steps_done
            return False
        common = set.intersection(*(x["steps"] for x in scans))
        step = max(common) if common else None
        if step is not None:
            ref = scans[0]["group"][step]
            for x in scans:
                g = x["group"][step]
                if ref is None or g is None or any(not np.array_equal(np.asarray(g[k]), np.asarray(ref[k]))
                                                   for k in GROUP_STATE_KEYS):
                    raise UserError(f"the task files of exchange group {self.tasks[0].exchange_group} "
                                    f"disagree about the ladder state at step {step}; move them away to "
                                    "start over", str(self.members[0].path.parent))
        self._agree(lambda: self._start(models, found, cands, step))
        for mem in self.members:
            mem.session = session_entry(now_iso(), self.ladder.steps_done)
            mem.sessions.append(mem.session)
        return True

    def _start(self, models: list, found: list, cands: list, step: int | None) -> None:
        """Build the ladder: from the start (``step`` None) or from every file's checkpoint at ``step``."""
        if step is None:  # start over: some file never got past its first write (or none exists)
            self.ladder = Ladder(self.tasks, models, team=self.team)
            for mem, f in zip(self.members, found, strict=True):
                mem.sessions = list(f[0].provenance.get("sessions", [])) if f is not None else []
            spread = self._spread()
            if self.team.member == 0:
                self.log.info("exchange group %s: starting %d chains along %s (%d sites, beta %g, "
                              "%d steps)%s",
                              self.tasks[0].exchange_group, len(self.tasks), self.tasks[0].exchange,
                              models[0].n_sites, self.tasks[0].beta, self.ladder.total_steps, spread)
            return
        chains = [c[step][0] for c in cands]
        self.ladder = Ladder(self.tasks, models, chain_states=chains, group_state=cands[0][step][1],
                             team=self.team)
        for j, (mem, f) in enumerate(zip(self.members, found, strict=True)):
            data, info = f
            sim = self.ladder.sims[self.local[j]]
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
        spread = self._spread()
        if self.team.member == 0:
            self.log.info("exchange group %s: resuming %d chains at step %d of %d%s",
                          self.tasks[0].exchange_group, len(self.tasks), step, self.ladder.total_steps,
                          spread)

    def _spread(self) -> str:
        if self.team.size == 1:
            return ""
        self.log.info("exchange group %s: here chains %d..%d of %d (team member %d of %d)",
                      self.tasks[0].exchange_group, self.local.start, self.local.stop - 1, len(self.tasks),
                      self.team.member, self.team.size)
        return f", side by side on {self.team.size} ranks"

    # -------------------------------------------------------------------------------------------- writing
    def _record(self, j: int, status: str, text: str, source: str, t: float) -> TaskRecord:
        """The file content of local member ``j`` (ladder position ``self.local[j]``)."""
        lad, mem = self.ladder, self.members[j]
        i = self.local[j]
        task = self.tasks[i]
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
        """Rewrite this member's task files (all at the ladder's current step)."""
        t0 = time.perf_counter()
        t = time.time()
        text, source = self._config()
        lad = self.ladder
        assert lad is not None
        for j, mem in enumerate(self.members):
            rec = self._record(j, status, text, source, t)
            mem.path.parent.mkdir(parents=True, exist_ok=True)
            write_task(mem.path, rec)
            mem.last = rec
            sim = lad.sims[self.local[j]]
            mem.prev = {k: v for k, v in rec.checkpoint.items() if not k.startswith(_CP_PREV)}
            mem.prev_steps = sim.steps_done
            mem.bins_done, mem.steps_done = sim.bins_done, sim.steps_done
        self.write_seconds = time.perf_counter() - t0
        self.last_write = time.monotonic()
        self.pending = False

    def _try_write(self, status: str) -> None:
        """:meth:`_write`; a failure is kept for the next meeting of the team (where every member stops)."""
        try:
            self._write(status)
        except Exception as exc:
            if self.team.size == 1:
                raise
            self.write_error = f"writing the task files failed: {type(exc).__name__}: {exc}"

    def record_failure(self, message: str) -> None:
        """Rewrite each local member's last good file with status ``failed``."""
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
    def _local_stop(self, next_seconds: float) -> str:
        """Why this member wants to stop ("" if it does not)."""
        flag = self.stop_flag
        if flag is not None and flag.is_set():
            return getattr(flag, "reason", "") or "stop requested"
        need = next_seconds + self.write_seconds + 0.05
        if self.deadline is not None and time.time() + need >= self.deadline:
            return "time budget used up"
        return ""

    def execute(self) -> str:
        """Advance the ladder to the end or to an agreed stop.

        Stops and checkpoint writes happen only at synchronisation points, decided from the votes the
        members cast before their last chunk of steps ahead of that point: stop if any member asks (stop
        flag, or its time budget would not cover the rest of the interval and the next one), write when the
        first member's clock says a checkpoint is due.  All members thus stop and write at the same step."""
        if not self._load():
            self.sink.task_started(self.members[0].task.task_id, self.members[0].steps_done,
                                   self.members[0].steps_done, self.tasks[0].sampling.bins)
            if self.team.member == 0:
                self.log.info("exchange group %s: already done", self.tasks[0].exchange_group)
            return "done"
        lad = self.ladder
        assert lad is not None
        m = len(self.local)
        self.sink.task_started(self.members[0].task.task_id, m * lad.steps_done, m * lad.total_steps,
                               self.tasks[0].sampling.bins)
        if any(mem.prev is None for mem in self.members):  # a fresh start: files at step 0 first
            self._write("running")
        self.last_write = time.monotonic()
        self.pending = False
        chunk, step_time = 16, 0.0
        stopping = False
        while not lad.done and not stopping:
            target = lad.next_stop()
            while lad.steps_done < target:
                # the vote the members share at the next meeting (the latest one cast counts)
                left = target - lad.steps_done + lad.every
                lad.vote = {"stop": self._local_stop(step_time * m * left), "error": self.write_error,
                            "write": write_due(time.monotonic() - self.last_write, self.pending,
                                               self.interval, False)}
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
                    step_time = dt / (done * m)  # per chain step: a ladder step advances all local chains
                chunk = next_chunk(chunk, dt, done)
                self.sink.task_advanced(m * lad.steps_done, lad.sims[self.local.start].bins_done)
            if lad.done or lad.voted_at != lad.steps_done:
                continue
            errors = [v["error"] for v in lad.votes if v["error"]]
            if errors:
                raise LadderError(errors[0])
            reasons = [v["stop"] for v in lad.votes if v["stop"]]
            if reasons:
                stopping, self.stop_reason = True, reasons[0]
            elif lad.votes[0]["write"]:
                self._try_write("running")
        status = "done" if lad.done else "stopped"
        self._write(status)
        if self.team.member == 0:
            if status == "done":
                self.log.info("exchange group %s: done (%d chains, %d bins each)",
                              self.tasks[0].exchange_group, len(self.tasks),
                              lad.sims[self.local.start].bins_done)
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
    team: LadderTeam | None = None,
) -> list[Any]:
    """Run (or resume) the ladder of one exchange group until done, stopped or out of time.

    Same contract as :func:`qmc.run.serial.run_task`, for all tasks of the group at once: returns one
    :class:`qmc.run.serial.TaskOutcome` per task in ladder order (all with the same status); a problem of the
    group is recorded as status ``failed`` with its message in every task of it, never raised.  With a
    ``team`` of several processes (:mod:`qmc.exchange.team`; every member calls this with the same tasks)
    each member runs and writes the tasks of its block of the ladder and returns their outcomes.
    """
    from qmc.run.serial import TaskOutcome

    t_call = time.time()
    log = logger if logger is not None else logging.getLogger("qmc.run")
    sink = progress if progress is not None else NullProgress()
    ordered = ladder_tasks(tasks)
    team = team if team is not None else SoloTeam()
    try:
        run = _GroupRun(ordered, Path(run_dir), stop_flag, sink, log, deadline, config_text,
                        config_fingerprint, checkpoint_seconds, team)
    except Exception as exc:  # the models cannot be built: the same on every member, nothing written
        message = str(exc) if isinstance(exc, UserError) else f"{type(exc).__name__}: {exc}"
        log.error("exchange group %s failed: %s", ordered[0].exchange_group, message)
        sink.task_finished("failed")
        local = chain_blocks(len(ordered), team.size)[team.member]
        return [TaskOutcome(ordered[i].task_id, "failed", message, 0, ordered[i].sampling.bins, 0,
                            ordered[i].sampling.warmup_steps + ordered[i].sampling.measure_steps, 0.0,
                            str(task_path(Path(run_dir), ordered[i].task_id))) for i in local]
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
