"""The serial runner behind ``qmc run``: the units of a plan one after the other in this process.

:func:`qmc.run.plan.prepare_run` checks a configuration against a run directory and lists the unfinished
tasks, largest lattices first; :func:`run_serial` runs them unit by unit (:mod:`qmc.run.units`: a single
task, or a replica-exchange ladder as one unit) and keeps ``index.json`` current (a unit's counters every
:data:`~qmc.run.sharing.INDEX_SECONDS` while it runs).  Other processes may share the run directory (a job
array): a unit is claimed before it runs and skipped while a live process holds it; units skipped are
tried again after the others, so a unit whose process died is taken over (:mod:`qmc.run.sharing`).
:mod:`qmc.mpi` does the same over MPI ranks.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Sequence
from typing import Any

from qmc.config.parser import Task, config_fingerprint
from qmc.run.outcome import RunReport, StopSignal, TaskOutcome, mark_running, record_outcome, record_progress
from qmc.run.plan import RunPlan
from qmc.run.progress import NullProgress, RunDisplay
from qmc.run.sharing import INDEX_SECONDS, ClaimLost, SharedRun
from qmc.run.units import run_unit, work_units
from qmc.storage.faults import WriteFault

__all__ = ["run_serial"]


class _UnitSink:
    """Progress sink of the running unit: shows it, keeps its index entries current and the claims alive
    (raises :class:`~qmc.run.sharing.ClaimLost` if another process took the unit over)."""

    def __init__(self, progress: Any, shared: SharedRun, unit: Sequence[Task]) -> None:
        self.progress, self.shared, self.unit = progress, shared, unit
        self.last = time.monotonic()

    def task_started(self, task_id: str, steps_done: int, steps_total: int, bins_total: int) -> None:
        self.progress.task_started(task_id, steps_done, steps_total, bins_total)

    def task_advanced(self, steps_done: int, bins_done: int) -> None:
        self.progress.task_advanced(steps_done, bins_done)
        if self.shared.beat() and not self.shared.holds(self.unit):
            raise ClaimLost(self.unit[0].task_id)
        if time.monotonic() - self.last >= INDEX_SECONDS:
            record_progress(self.shared.plan.index, self.unit, steps_done // len(self.unit), bins_done)
            self.shared.write_index()
            self.last = time.monotonic()

    def task_finished(self, status: str) -> None:
        self.progress.task_finished(status)

    def message(self, text: str) -> None:
        say = getattr(self.progress, "message", None)  # displays that show text lines
        if say is not None:
            say(text)


def _stop_reason(stop_flag: StopSignal | None, deadline: float | None) -> str:
    if stop_flag is not None and stop_flag.is_set():
        return getattr(stop_flag, "reason", "") or "stop requested"
    if deadline is not None and time.time() >= deadline:
        return "time budget used up"
    return ""


def run_serial(plan: RunPlan, *, stop_flag: StopSignal | None = None, progress: RunDisplay | None = None,
               logger: logging.Logger | None = None, deadline: float | None = None) -> RunReport:
    """Run the plan's work in this process, one unit after the other, updating ``index.json``; stop after a
    unit that was stopped (signal, ``deadline``) or a write fault.  Units held by other live processes are
    left to them (``RunReport.elsewhere``)."""
    log = logger if logger is not None else logging.getLogger("qmc.run")
    prog = progress if progress is not None else NullProgress()
    shared = SharedRun(plan, log)
    outcomes: list[TaskOutcome] = []
    reason = fault = ""
    fp = config_fingerprint(plan.config)
    todo = work_units(plan.tasks, plan.config.tasks())
    try:
        while todo and not (reason or fault):
            skipped = []
            for unit in todo:
                reason = _stop_reason(stop_flag, deadline)
                if reason:
                    break
                if not shared.claim(unit):
                    skipped.append(unit)
                    continue
                mark_running(plan.index, unit, process=shared.process)
                try:
                    shared.write_index()
                    sink = _UnitSink(prog, shared, unit)
                    results = run_unit(unit, plan.run_dir, stop_flag=stop_flag, progress=sink, logger=log,
                                       deadline=deadline, config_text=plan.config.text, config_fingerprint=fp)
                    for outcome in results:
                        outcomes.append(outcome)
                        record_outcome(plan.index, outcome)
                        prog.outcome(outcome)
                    shared.write_index()
                except ClaimLost:
                    shared.release(unit)
                    continue
                except WriteFault as exc:
                    fault = str(exc)
                    break
                shared.release(unit)
                faults = [o.message for o in results if o.fault]
                stopped = [o.message for o in results if o.status == "stopped"]
                if faults or stopped:
                    fault, reason = (faults or [""])[0], (faults or stopped)[0]
                    break
            if len(skipped) == len(todo):  # nothing could be claimed: the rest is held by live processes
                break
            todo = skipped
    finally:
        try:
            shared.write_index()
        except WriteFault as exc:
            fault = fault or str(exc)
        finally:
            shared.close()
    unfinished = plan.unfinished()
    elsewhere = shared.elsewhere(unfinished)
    return RunReport(outcomes, [t for t in unfinished if t not in elsewhere], fault or reason, fault,
                     list(elsewhere))
