"""An exchange ladder with its task files: :func:`run_group`, the ladder's way along the shared path.

A ladder (:class:`qmc.exchange.ladder.Ladder`) is one unit of work for a *team* of processes
(:mod:`qmc.exchange.team`): one process in a serial run, up to M MPI ranks under the farm, each running a
contiguous block of the chains and writing their task files through the shared path of
:mod:`qmc.run.task_run`.  What the ladder adds to it:

* resuming: the members read their files and agree (:func:`qmc.exchange.meeting.agree`) on the newest step
  that every file of the ladder holds, current or previous checkpoint (:mod:`qmc.exchange.records`), or
  start over when there is none; files that end where a finished, shorter run ended (the configuration now
  asks for more bins) first hold the meeting that run had no reason to hold (:meth:`Ladder.rejoin`);
* decision points are the meetings: before each chunk a member casts its vote (stop if its stop flag is
  set or its time budget would not cover the rest of the interval and the next one; a failed write;
  a checkpoint due by its clock), and at the meeting all members act on all votes: stop if any member
  asks, write when member 0's clock says so.  The vote on the precision target is added by the ladder at
  the meeting itself, from the bins at that step: the ladder is done when every chain meets its target.
  All files of a ladder thus always hold the same step, and any error on one member is raised on all
  of them;
* each record carries the ladder state, the previous checkpoint and the ``/exchange`` group.

Bins are bit-identical for every team size (tests/exchange/test_ladder_team.py, tests/mpi/test_mpi.py).
"""

from __future__ import annotations

import logging
import os
from collections.abc import Sequence
from typing import Any

import numpy as np

from qmc.chain.simulation import Simulation
from qmc.config.parser import Task, build_model
from qmc.errors import UserError
from qmc.exchange.ladder import GROUP_STATE_KEYS, Ladder, chain_costs, ladder_tasks
from qmc.exchange.meeting import LadderError, Vote, agree
from qmc.exchange.records import (
    exchange_record,
    ladder_checkpoint,
    ladder_settings,
    restorable_states,
    with_previous,
    written_with,
)
from qmc.exchange.team import LadderTeam, SoloTeam, chain_blocks
from qmc.run.outcome import StopSignal, TaskOutcome, failure_message
from qmc.run.pacing import Pacer
from qmc.run.progress import ProgressSink
from qmc.run.task_identity import finished
from qmc.run.task_run import Decision, RunContext, TaskRun, run_guarded
from qmc.storage.faults import WriteFault
from qmc.storage.task_file import TaskData

__all__ = ["LadderRun", "run_group"]


def _same_state(a: dict[str, Any] | None, b: dict[str, Any] | None) -> bool:
    return a is not None and b is not None and all(np.array_equal(np.asarray(a[k]), np.asarray(b[k]))
                                                   for k in GROUP_STATE_KEYS)


class LadderRun(TaskRun):
    """One member's execution of a ladder (every member of the team runs one, with the same tasks)."""

    def __init__(self, tasks: list[Task], ctx: RunContext, team: LadderTeam) -> None:
        models = [build_model(t) for t in tasks]
        self.local = chain_blocks(len(tasks), team.size, chain_costs(tasks, models))[team.member]
        super().__init__([tasks[i] for i in self.local], [models[i] for i in self.local], ctx)
        self.tasks, self.all_models, self.team = tasks, models, team
        self.label = f"exchange group {tasks[0].exchange_group}"
        self.speaks = team.member == 0
        self.settings = ladder_settings(tasks)
        self.ladder: Ladder | None = None
        self.walkers: list[list[int]] = [[] for _ in self.local]
        self.previous: list[tuple[int, dict[str, np.ndarray]] | None] = [None] * len(self.local)
        self._current: list[tuple[int, dict[str, np.ndarray]] | None] = [None] * len(self.local)
        self.write_error: str | None = None

    # -------------------------------------------------------------------------------------------- resuming
    def _read_files(self) -> list[tuple[TaskData, dict[str, Any]] | None]:
        """This member's task files (None where missing) with their /exchange data, checked against the
        tasks and the ladder's settings."""
        found: list[tuple[TaskData, dict[str, Any]] | None] = []
        for book in self.books:
            data = book.read()
            if data is None:
                found.append(None)
                continue
            info = written_with(data.exchange, self.settings)
            if info is None:
                s = self.settings
                raise UserError(f"was not written by replica exchange along '{s['parameter']}' with the "
                                f"partners {', '.join(s['task_ids'])} every {s['exchange_every']} steps; "
                                "move it away (or run with --force)", str(book.path))
            found.append((data, info))
        return found

    def _load(self) -> bool:
        """Create or restore the ladder (all members agree on the step); False when every file says done."""
        found: list[tuple[TaskData, dict[str, Any]] | None] = []
        cands: list[dict[int, tuple[dict, dict]]] = []

        def scan() -> dict[str, Any]:
            found.extend(self._read_files())
            cands.extend(restorable_states(f[0].checkpoint) if f is not None else {} for f in found)
            local = set.intersection(*(set(c) for c in cands)) if all(cands) else set()
            group: dict[int, Any] = {}
            for step in local:  # the ladder state at each step in every local file; they must agree
                group[step] = cands[0][step][1]
                if not all(_same_state(c[step][1], group[step]) for c in cands[1:]):
                    group[step] = None
            done = all(f is not None and finished(book.task, f[0].status, f[0].steps_done,
                                                    f[0].target, f[0].target_met)
                       for f, book in zip(found, self.books, strict=True))
            ended = {f[0].steps_done for f in found if f is not None and f[0].steps_done == f[0].steps_total}
            return {"done": done, "steps": local, "group": group, "ended": ended}

        scans = agree(self.team, scan)
        if all(x["done"] for x in scans):
            return False
        common = set.intersection(*(x["steps"] for x in scans))
        step = max(common) if common else None
        if step is not None and not all(_same_state(x["group"][step], scans[0]["group"][step])
                                        for x in scans):
            raise UserError(f"the task files of exchange group {self.tasks[0].exchange_group} disagree about "
                            f"the ladder state at step {step}; move them away to start over",
                            str(self.books[0].path.parent))
        agree(self.team, lambda: self._start(found, cands, step))
        if step is not None:
            if any(step in x["ended"] for x in scans):  # the files end where a shorter run ended
                assert self.ladder is not None
                self.ladder.rejoin()
            for j, sim in enumerate(self._chains()):
                self.previous[j] = (sim.steps_done, ladder_checkpoint(sim.state(), self.ladder.group_state()))
        for book in self.books:
            book.begin_session(self.steps_done)
        return True

    def _start(self, found: list, cands: list, step: int | None) -> None:
        """Build the ladder: from the start (``step`` None) or from every file's checkpoint at ``step``."""
        tasks, log = self.tasks, self.ctx.log
        if step is None:  # start over: some file never got past its first write (or none exists)
            self.ladder = Ladder(tasks, self.all_models, team=self.team, watches=self.watches)
            for book, f in zip(self.books, found, strict=True):
                book.keep_sessions(f[0] if f is not None else None)
            spread = self._spread()
            if self.speaks:
                log.info("%s: starting %d chains along %s (%d sites, beta %g, %d steps)%s", self.label,
                         len(tasks), tasks[0].exchange, self.all_models[0].n_sites, tasks[0].beta,
                         self.ladder.total_steps, spread)
            return
        self.ladder = lad = Ladder(tasks, self.all_models, chain_states=[c[step][0] for c in cands],
                                   group_state=cands[0][step][1], team=self.team, watches=self.watches)
        self.fresh = False
        for j, (book, f) in enumerate(zip(self.books, found, strict=True)):
            data, info = f
            sim = lad.sims[self.local[j]]
            book.resume(data, sim)
            walker = np.asarray(info.get("walker", np.zeros(0)), dtype=np.int64).reshape(-1)
            if walker.size < sim.bins_done:
                raise UserError("damaged task file: the exchange walk is shorter than the bins",
                                str(book.path))
            self.walkers[j] = [int(x) for x in walker[:sim.bins_done]]
        spread = self._spread()
        if self.speaks:
            log.info("%s: resuming %d chains at step %d of %d%s", self.label, len(tasks), step,
                     lad.total_steps, spread)

    def _spread(self) -> str:
        if self.team.size == 1:
            return ""
        self.ctx.log.info("%s: here chains %d..%d of %d (team member %d of %d)", self.label, self.local.start,
                          self.local.stop - 1, len(self.tasks), self.team.member, self.team.size)
        return f", side by side on {self.team.size} ranks"

    # -------------------------------------------------------------------------------------------- running
    def _chains(self) -> list[Simulation]:
        assert self.ladder is not None
        return self.ladder.local_sims

    @property
    def steps_done(self) -> int:
        assert self.ladder is not None
        return self.ladder.steps_done

    @property
    def total_steps(self) -> int:
        assert self.ladder is not None
        return self.ladder.total_steps

    @property
    def target_reached(self) -> bool:
        """Every chain of the ladder met its target at the last meeting (:attr:`Ladder.finished`)."""
        assert self.ladder is not None
        return self.ladder.finished

    def done_text(self) -> str:
        return f"{len(self.tasks)} chains, {self._chains()[0].bins_done} bins each"

    def _chunk(self, pacer: Pacer) -> int:
        """Cast this member's vote for the next meeting, then up to the pacer's chunk of steps before it."""
        lad = self.ladder
        assert lad is not None
        target = lad.next_stop()
        ahead = pacer.step_seconds * (target - lad.steps_done + lad.every)  # this interval and the next
        stop = self.local_stop(ahead) or (str(self.fault) if self.fault is not None else "")
        lad.vote = Vote(stop, self.write_error, self.write_is_due() and self.fault is None)
        return min(pacer.chunk, target - lad.steps_done)

    def _advance(self, n: int) -> list[Sequence[np.ndarray]]:
        lad = self.ladder
        assert lad is not None
        new = lad.advance(n)
        for walker, walk in zip(self.walkers, lad.walker_rows, strict=True):
            walker.extend(walk)
            walk.clear()
        return new

    def _decision(self) -> Decision | None:
        """At a meeting just held: raise a member's error, stop if any member asks, write if member 0's
        clock says so."""
        lad = self.ladder
        assert lad is not None
        if lad.voted_at != lad.steps_done:
            return None
        errors = [v.error for v in lad.votes if v.error]
        if errors:
            raise LadderError(errors[0])
        reasons = [v.stop for v in lad.votes if v.stop]
        return Decision(reasons[0] if reasons else "", lad.votes[0].write)

    def _write_running(self) -> None:
        """A failed intermediate write on one member of a team is voted at the next meeting, where every
        member stops: a write fault as a stop (every member writes its checkpoint; this one tries again
        and reports the fault), any other error as an error."""
        try:
            self._write("running")
        except WriteFault as exc:
            if self.team.size == 1:
                raise
            self.fault = exc
        except Exception as exc:
            if self.team.size == 1:
                raise
            self.write_error = f"writing the task files failed: {failure_message(exc)}"

    # -------------------------------------------------------------------------------------------- records
    def _extras(self, j: int, sim: Simulation) -> dict[str, Any]:
        lad = self.ladder
        assert lad is not None
        group = lad.group_state()
        current = ladder_checkpoint(sim.state(), group)
        prev = self.previous[j]
        checkpoint, attrs = with_previous(current, prev[1] if prev else None, prev[0] if prev else -1,
                                          sim.steps_done)
        self._current[j] = (sim.steps_done, current)
        task = self.tasks[self.local[j]]
        exchange = exchange_record(self.settings, self.local[j], task.params[task.exchange], group,
                                   self.walkers[j])
        return {"checkpoint": checkpoint, "checkpoint_attrs": attrs, "exchange": exchange}

    def _written(self, j: int) -> None:
        self.previous[j] = self._current[j]


def run_group(
    tasks: Sequence[Task],
    run_dir: str | os.PathLike,
    *,
    stop_flag: StopSignal | None = None,
    progress: ProgressSink | None = None,
    logger: logging.Logger | None = None,
    deadline: float | None = None,
    config_text: str | None = None,
    config_fingerprint: str = "",
    checkpoint_seconds: float | None = None,
    team: LadderTeam | None = None,
) -> list[TaskOutcome]:
    """Run (or resume) the ladder of one exchange group until done, stopped or out of time.

    Same contract as :func:`qmc.run.single.run_task`, for all tasks of the group at once: returns one
    outcome per task in ladder order (all with the same status); a problem of the group is recorded as
    status ``failed`` with its message in every task of it, never raised.  With a ``team`` of several
    processes (every member calls this with the same tasks) each member runs and writes the tasks of its
    block of the ladder and returns their outcomes.
    """
    ordered = ladder_tasks(tasks)
    team = team if team is not None else SoloTeam()
    ctx = RunContext.of(run_dir, stop_flag=stop_flag, progress=progress, logger=logger, deadline=deadline,
                        config_text=config_text, config_fingerprint=config_fingerprint,
                        checkpoint_seconds=checkpoint_seconds)

    def tasks_here() -> list[Task]:  # when the models cannot be built (the same on every member)
        return [ordered[i] for i in chain_blocks(len(ordered), team.size)[team.member]]

    return run_guarded(f"exchange group {ordered[0].exchange_group}", lambda: LadderRun(ordered, ctx, team),
                       tasks_here, ctx)
