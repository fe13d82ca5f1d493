"""The serial runner behind ``qmc run``: the units of a plan one after the other in this process.

:func:`qmc.run.plan.prepare_run` checks a configuration against a run directory and lists the unfinished
tasks, largest lattices first; :func:`run_serial` runs them unit by unit (:mod:`qmc.run.units`: a single
task, or a replica-exchange ladder as one unit) and keeps ``index.json`` up to date.  :mod:`qmc.mpi` does
the same over MPI ranks.
"""

from __future__ import annotations

import logging
import time

from qmc.config.parser import config_fingerprint
from qmc.run.outcome import RunReport, StopSignal, TaskOutcome, mark_running, record_outcome
from qmc.run.plan import RunPlan
from qmc.run.progress import RunDisplay
from qmc.run.units import run_unit, work_units
from qmc.storage.run_index import write_index

__all__ = ["run_serial"]


def run_serial(plan: RunPlan, *, stop_flag: StopSignal | None = None, progress: RunDisplay | None = None,
               logger: logging.Logger | None = None, deadline: float | None = None) -> RunReport:
    """Run the plan's work in this process, one unit after the other, updating ``index.json`` after each;
    stop after a unit that was stopped (signal, ``deadline``)."""
    log = logger if logger is not None else logging.getLogger("qmc.run")
    outcomes: list[TaskOutcome] = []
    reason = ""
    fp = config_fingerprint(plan.config)
    for unit in work_units(plan.tasks, plan.config.tasks()):
        if stop_flag is not None and stop_flag.is_set():
            reason = getattr(stop_flag, "reason", "") or "stop requested"
            break
        if deadline is not None and time.time() >= deadline:
            reason = "time budget used up"
            break
        mark_running(plan.index, unit)
        write_index(plan.run_dir, plan.index)
        results = run_unit(unit, plan.run_dir, stop_flag=stop_flag, progress=progress, logger=log,
                           deadline=deadline, config_text=plan.config.text, config_fingerprint=fp)
        for outcome in results:
            outcomes.append(outcome)
            record_outcome(plan.index, outcome)
            if progress is not None:
                progress.outcome(outcome)
        write_index(plan.run_dir, plan.index)
        stopped = [o for o in results if o.status == "stopped"]
        if stopped:
            reason = stopped[0].message
            break
    return RunReport(outcomes, plan.unfinished(), reason)
