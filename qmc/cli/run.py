"""``qmc run``: run, resume or grow the tasks of a configuration, serially or as an MPI job.

Exit status: 0 every selected task is done; :data:`EXIT_UNFINISHED` (75) the run was stopped before the
end (SIGTERM, Ctrl-C or ``--max-time``: every running task wrote a checkpoint; rerun to continue); 1 a task
failed; 2 bad input; 74 (:data:`qmc.storage.faults.WRITE_FAULT_EXIT`) the machine refused a write (full
disk, quota, read-only or vanished directory, I/O error).  A second Ctrl-C interrupts at once (130).  The
log goes to ``RUN_DIR/run.log``.
"""

from __future__ import annotations

import logging
import signal
import sys
import time
from pathlib import Path
from typing import Any

import click

__all__ = ["EXIT_UNFINISHED", "run_cmd"]

EXIT_UNFINISHED = 75
"""Exit status of a run stopped before its end, to be continued by running it again (the value of
EX_TEMPFAIL in BSD's sysexits.h, "temporary failure: try again later")."""


class _RunLog(logging.FileHandler):
    """``run.log``.  A line the machine refuses to write (a full disk) is dropped without the logging
    module's traceback: the run reports the fault itself, once."""

    def handleError(self, record: logging.LogRecord) -> None:
        pass


def _open_log(run_dir: Path) -> tuple[logging.Logger, logging.Handler]:
    from qmc.storage.faults import write_fault

    logger = logging.getLogger("qmc.run")
    logger.setLevel(logging.INFO)
    logger.propagate = False
    try:
        handler = _RunLog(run_dir / "run.log", encoding="utf-8")
    except OSError as exc:
        raise write_fault(run_dir / "run.log", exc) from None
    handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(message)s"))
    logger.addHandler(handler)
    return logger, handler


def _install_signals(flag: Any) -> dict[int, Any]:
    def on_term(signum: int, _frame: Any) -> None:
        flag.set("SIGTERM received", signum)

    def on_int(signum: int, _frame: Any) -> None:
        if flag.is_set():
            raise KeyboardInterrupt
        flag.set("interrupted (Ctrl-C)", signum)

    old: dict[int, Any] = {}
    try:
        old[signal.SIGTERM] = signal.signal(signal.SIGTERM, on_term)
        old[signal.SIGINT] = signal.signal(signal.SIGINT, on_int)
    except ValueError:  # not the main thread: no signal handling
        pass
    return old


def _restore_signals(old: dict[int, Any]) -> None:
    for sig, handler in old.items():
        signal.signal(sig, handler)


def _listing(ids: list[str], limit: int = 10) -> str:
    return ", ".join(ids[:limit]) + (f", ... ({len(ids) - limit} more)" if len(ids) > limit else "")


@click.command("run")
@click.argument("config", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--out", "out", type=click.Path(path_type=Path), default=None,
              help="Run directory (default: [run] output of the configuration).")
@click.option("--only", "only", multiple=True, metavar="TASK",
              help="Run only this task id (repeat the option, or separate ids by commas).")
@click.option("--force", is_flag=True,
              help="Reuse a run directory whose tasks this configuration cannot continue (other seed, "
                   "lattice or terms; another beta, warm-up or bin length for a task of the same name): the "
                   "old index and those task files are renamed aside (never deleted), all others are kept.")
@click.option("--quiet", "-q", is_flag=True, help="No progress display (for batch jobs); the log is kept.")
@click.option("--max-time", "max_time", type=click.FloatRange(min=0, min_open=True), default=None,
              metavar="SECONDS", help="Wall-time budget: checkpoint and stop cleanly when used up (exit "
                                      f"status {EXIT_UNFINISHED}: unfinished, rerun to continue).")
def run_cmd(config: Path, out: Path | None, only: tuple[str, ...], force: bool, quiet: bool,
            max_time: float | None) -> None:
    """Run all unfinished tasks of CONFIG (largest lattices first); rerun the same command to resume.

    A task is one point of the scan in one of its independent copies; its bins, checkpoint and
    provenance go to one file in the run directory.

    \b
    A run grows; it is not restarted:
    * more measure_steps with the same bin length (measure_steps / bins) continue every finished task
      from its checkpoint, appending bins bit-identical to a run that was this long from the start;
    * new scan points (another L, more couplings) add tasks; the existing ones are kept.
    A change of the bin length or warm-up, or of the physics (seed, lattice, terms, a task's beta), is
    refused with the reason; --force then renames the affected files aside and says which were kept.

    \b
    Exit status:
      0   every selected task is done
      75  stopped before the end (SIGTERM, Ctrl-C, --max-time): every running task wrote
          a checkpoint; run the same command again to continue (bins bit-identical to an
          uninterrupted run).  So `qmc run X && qmc analyze X` analyses only finished runs.
      1   a task failed (message in index.json and run.log; the other tasks went on)
      2   bad input (configuration, run directory, options)
      74  the machine refused a write (full disk, quota, read-only or vanished directory,
          I/O error): one message names the file and the cause; every task keeps its last
          complete checkpoint, so the same command continues once there is room

    Several runs of the same configuration may share one run directory (a job array, MPI jobs,
    or both): each task is claimed before it runs, a task whose process died is taken over, and
    a job that has done its share exits 0 naming the tasks that other jobs still run.

    Started by an MPI launcher (`mpiexec -n K qmc run CONFIG`), the tasks are spread over the K ranks:
    rank 0 hands out tasks (largest first) and computes too, and a replica-exchange ladder runs its
    chains side by side on up to [exchange] max_ranks ranks.  Results do not depend on K.
    """
    from qmc.mpi.world import mpi_world
    from qmc.run.outcome import StopFlag

    t_start = time.time()
    world = mpi_world()  # before the signal handlers, so that MPI start-up cannot replace them
    flag = StopFlag()
    old = _install_signals(flag)
    try:
        if world is not None and world.idle:  # an extra process of a launcher without mpi4py
            code = 0
        elif world is not None and world.rank != 0:
            from qmc.mpi.farm import run_worker

            code = run_worker(world, stop_flag=flag)
        else:
            code = _run_main(config, out, only, force, quiet, max_time, t_start, flag, world)
    finally:
        _restore_signals(old)
    if code:
        sys.exit(code)


def _run_main(config: Path, out: Path | None, only: tuple[str, ...], force: bool, quiet: bool,
              max_time: float | None, t_start: float, flag: Any, world: Any) -> int:
    """Serial run, or rank 0 of an MPI run; returns the exit status."""
    from qmc.config.parser import load_config
    from qmc.run.plan import prepare_run
    from qmc.run.progress import NullProgress, Progress
    from qmc.run.serial import run_serial
    from qmc.run.task_identity import steps_total, task_weight

    try:
        cfg = load_config(config)
        plan = prepare_run(cfg, out, only=only, force=force)
        logger, handler = _open_log(plan.run_dir)
    except BaseException:
        if world is not None:  # the workers wait for the set-up: tell them the run will not start
            world.cancel()
        raise
    progress = NullProgress() if quiet else Progress()
    try:
        logger.info("qmc run %s: %d task(s) to run, %d done already, run directory %s", cfg.path,
                    len(plan.tasks), len(plan.done), plan.run_dir)
        for line in _plan_notes(plan, force):
            logger.info(line)
            if line.startswith("--force"):  # what was set aside is said even with --quiet
                click.echo(f"note: {line}", err=True)
            else:
                progress.message(f"note: {line}")
        entries = plan.index["tasks"]
        progress.plan([(t.task_id, task_weight(t), steps_total(t), entries[t.task_id]["steps_done"])
                       for t in plan.tasks]
                      + [(tid, 1.0, 1, 1) for tid in plan.done])  # finished already: counted as done
        deadline = t_start + max_time if max_time is not None else None
        if world is not None:
            from qmc.mpi.farm import run_farm

            report = run_farm(world, plan, stop_flag=flag, progress=progress, logger=logger,
                              deadline=deadline)
        else:
            report = run_serial(plan, stop_flag=flag, progress=progress, logger=logger, deadline=deadline)
        progress.close()
        return _report(plan, report, quiet, logger)
    finally:
        logger.removeHandler(handler)
        handler.close()


def _plan_notes(plan: Any, force: bool) -> list[str]:
    """What the plan does with the run directory's contents, in lines for the terminal and the log."""
    from qmc.run.changes import Survey

    lines = []
    if force:
        by_reason: dict[str, list[tuple[str, str]]] = {}
        for old, new, why in plan.set_aside:
            by_reason.setdefault(why, []).append((old, new))
        for why, files in by_reason.items():
            names = ", ".join(f"{Path(o).name} -> {Path(n).name}" for o, n in files)
            lines.append(f"--force: renamed aside (never deleted) {len(files)} file(s), because "
                         f"{Survey.reason(why)}: {names}")
        if plan.kept:
            lines.append(f"--force: kept {len(plan.kept)} task file(s) whose chains are unchanged: "
                         f"{_listing(plan.kept)}")
        if not plan.set_aside:
            lines.append("--force: nothing needed to be set aside")
    if plan.grown:
        t = next(t for t in plan.config.tasks() if t.task_id == plan.grown[0])
        lines.append(f"{len(plan.grown)} finished task(s) continue from their checkpoints to "
                     f"{t.sampling.bins} bins of {t.sampling.measure_steps // t.sampling.bins} steps: "
                     f"{_listing(plan.grown)}")
    if plan.others:
        lines.append(f"{len(plan.others)} task(s) of this run are not in the configuration; their files are "
                     f"kept: {_listing(plan.others)}")
    return lines


def _report(plan: Any, report: Any, quiet: bool, logger: logging.Logger) -> int:
    from qmc.storage.faults import WRITE_FAULT_EXIT, fault_text

    n_sel = len(plan.tasks) + len(plan.done)
    if report.fault:  # one message, whatever else happened
        logger.error(fault_text(report.fault))
        click.echo(f"error: {fault_text(report.fault)}", err=True)
        return WRITE_FAULT_EXIT
    for o in report.failed:
        click.echo(f"error: task {o.task_id} failed: {o.message} (details in {plan.run_dir / 'run.log'})",
                   err=True)
    if report.unfinished:
        reason = report.stop_reason or ("tasks failed" if report.failed else "stopped")
        text = (f"stopped ({reason}): {len(report.unfinished)} of {n_sel} task(s) unfinished: "
                f"{_listing(report.unfinished)}; run the same command again to continue")
        logger.info(text)
        if not report.failed or report.stop_reason:
            click.echo(text, err=True)
    elif report.elsewhere:  # a job array: this process has done its share
        text = (f"note: {len(report.elsewhere)} of {n_sel} task(s) are being run by other processes sharing "
                f"{plan.run_dir}: {_listing(report.elsewhere)}; the rest is done")
        logger.info(text)
        click.echo(text, err=True)
    else:
        text = f"done: all {n_sel} task(s) finished in {plan.run_dir}"
        logger.info(text)
        if not quiet:
            click.echo(text, err=True)
    if report.failed:
        return 1
    return EXIT_UNFINISHED if report.unfinished else 0
