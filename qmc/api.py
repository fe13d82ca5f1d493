"""The Python interface of seriesloop, for notebooks and scripts (``import qmc`` exposes these names).

    import qmc
    config = qmc.load_config("configs/quickstart.toml")    # parse and check a configuration
    run_dir = qmc.run_config(config)                       # run it here, serially, with progress
    df = qmc.load_run(run_dir)                             # tidy pandas DataFrame, one row per (task, obs.)
    bins = qmc.load_bins(run_dir, "L8_c0")                 # raw per-bin values of one task (numpy)
    result = qmc.analyze(run_dir)                          # the finite-size analysis of ``qmc analyze``
    qmc.report(run_dir)                                    # the HTML page of ``qmc report``

Everything here is what the command line does too; the files are the same, so a run started with
``qmc run`` (or under MPI) is read here, and a run started here is resumed by ``qmc run`` and the other
way round.  Bad input raises :class:`qmc.errors.UserError` with the problem and where it was found.
"""

from __future__ import annotations

import logging
import os
import signal
import threading
import time
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from qmc.errors import UserError

__all__ = ["load_config", "run_config", "load_run", "load_task", "load_bins", "analyze", "report"]

PathLike = str | os.PathLike


def load_config(path: PathLike) -> Any:
    """Parse and check the configuration file ``path``; returns the parsed ``RunConfig``.

    ``config.tasks()`` lists the tasks it expands to (``task_id``, ``params``); ``config.output_dir`` is the
    run directory named by ``[run] output``.
    """
    from qmc.config.parser import load_config as parse

    return parse(path)


def run_config(config: Any, out: PathLike | None = None, *, progress: bool = True,
               max_time: float | None = None, only: Sequence[str] = ()) -> Path:
    """Run every unfinished task of ``config`` (a path or :func:`load_config` result) in this process.

    Same files and bins as ``qmc run``: resumes what is unfinished, skips what is done, refuses a run
    directory made with a different configuration.  ``out`` overrides ``[run] output``; ``progress``
    shows the progress display on standard error; ``max_time`` (seconds) checkpoints and stops when used
    up; ``only`` restricts the run to these task ids.  An interrupt (Ctrl-C, or the notebook's stop
    button) writes a checkpoint of the running task first and then raises ``KeyboardInterrupt``; call
    again to continue.  Returns the run directory.  Raises UserError when a task failed (message and
    run.log named).
    """
    from qmc.config.run_config import RunConfig
    from qmc.run.outcome import StopFlag
    from qmc.run.plan import prepare_run
    from qmc.run.progress import NullProgress, Progress
    from qmc.run.serial import run_serial

    cfg = config if isinstance(config, RunConfig) else load_config(config)
    plan = prepare_run(cfg, out, only=tuple(only))
    flag = StopFlag()
    logger = logging.getLogger("qmc.run")  # as ``qmc run``: INFO lines to RUN_DIR/run.log only
    logger.setLevel(logging.INFO)
    logger.propagate = False
    handler = logging.FileHandler(plan.run_dir / "run.log", encoding="utf-8")
    handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(message)s"))
    logger.addHandler(handler)
    old = None
    if threading.current_thread() is threading.main_thread():
        old = signal.signal(signal.SIGINT, lambda signum, _frame: flag.set("interrupted", signum))
    shown = Progress() if progress else NullProgress()
    try:
        deadline = None if max_time is None else time.time() + max_time
        outcome = run_serial(plan, stop_flag=flag, progress=shown, logger=logger, deadline=deadline)
    finally:
        shown.close()
        if old is not None:
            signal.signal(signal.SIGINT, old)
        logger.removeHandler(handler)
        handler.close()
    if outcome.failed:
        ids = ", ".join(o.task_id for o in outcome.failed)
        raise UserError(f"task(s) {ids} failed: {outcome.failed[0].message} (details in run.log)",
                        str(plan.run_dir))
    if flag.signal is not None:
        raise KeyboardInterrupt(f"run interrupted; checkpoints written in {plan.run_dir}: call again to "
                                "continue")
    return plan.run_dir


def load_task(path: PathLike, task: str | None = None) -> Any:
    """One task: ``path`` is its file, or a run directory and ``task`` its id.

    Returns the ``TaskData`` record: ``params``, ``bins`` (name -> float64 array, one value per bin),
    ``steps_per_bin``, ``n_sites``, ``beta``, ``vbs_histogram``, ``provenance``, ``config_text``, ...
    """
    from qmc.storage.run_index import load_index
    from qmc.storage.task_file import read_task, task_path

    path = Path(path)
    if task is None:
        if path.is_dir():
            raise UserError("a run directory: name the task too, e.g. load_task(run_dir, 'L8_c0')", str(path))
        return read_task(path)
    file = task_path(path, task)
    if not file.exists():
        index = load_index(path) if path.is_dir() else None
        known = sorted(index["tasks"]) if index else sorted(p.stem for p in (path / "tasks").glob("*.h5"))
        raise UserError(f"no task {task!r} (known: {', '.join(known) or 'none'})", str(path))
    return read_task(file)


def load_bins(path: PathLike, task: str | None = None) -> dict[str, np.ndarray]:
    """The raw bins of one task (see :func:`load_task` for the arguments): observable name -> float64 array
    with one bin average per entry (each over ``steps_per_bin`` Monte Carlo steps)."""
    return dict(load_task(path, task).bins)


def load_run(path: PathLike, *, merge_copies: bool = False) -> Any:
    """Every estimate of a run as a tidy pandas DataFrame: one row per task and observable.

    Columns: ``task``, the scan parameters (e.g. ``L``, ``J``, ``beta``, ``copy``), ``observable``,
    ``mean``, ``error`` (one standard error, binning analysis), ``tau_int`` (integrated autocorrelation
    time in Monte Carlo steps), ``tau_int_bins`` (the same in bins; 1/2 means the bins are uncorrelated and
    ``tau_int`` only an upper bound), ``n_bins``, ``steps_per_bin``, ``derived`` (jackknife quantities such
    as ``binder_stag``), ``status``.  ``merge_copies`` first combines independent copies of each point.
    ``path`` is a run directory or one task file.
    """
    import pandas as pd

    from qmc.analysis.tidy import tidy_rows
    from qmc.storage.task_file import read_run

    columns, rows = tidy_rows(read_run(path), merge_copies=merge_copies)
    return pd.DataFrame(rows, columns=columns)


def analyze(path: PathLike, out: PathLike | None = None, **options: Any) -> dict[str, Any]:
    """The analysis of ``qmc analyze``: returns its result dict (crossings, fits, ground-state check,
    warnings) and writes its tables to ``out`` (default ``RUN_DIR/analysis``).  ``options`` are those of
    :func:`qmc.analysis.analyze_run` (``quantity``, ``plot``, ``coupling``, ``extrapolate``, ...)."""
    from qmc.analysis import analyze_run
    from qmc.storage.task_file import read_run

    path = Path(path)
    target = Path(out) if out is not None else (path if path.is_dir() else path.parent) / "analysis"
    return analyze_run(read_run(path), target, **options)


def report(path: PathLike, out: PathLike | None = None, **options: Any) -> Path:
    """Write the self-contained HTML page of ``qmc report`` (default ``RUN_DIR/report.html``); returns its
    path.  ``options``: ``quantities``, ``coupling``, ``extrapolate`` and the other options of
    :func:`qmc.analysis.analyze_run`."""
    from importlib.metadata import version

    from qmc.analysis.html_report import write_report
    from qmc.storage.run_index import load_index
    from qmc.storage.task_file import read_run

    path = Path(path)
    target = Path(out) if out is not None else (path if path.is_dir() else path.parent) / "report.html"
    index = load_index(path) if path.is_dir() else None
    return write_report(read_run(path), target, index=index, version=version("seriesloop"), **options)
