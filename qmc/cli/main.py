"""Command line: ``qmc run | summary | inspect | new | analyze | validate``.

Bad input of any kind (configuration, run directory, task file, option) prints one line
``error: <where>: <what>`` on standard error and exits with status 2, without a traceback.  Exit status of
``qmc run``: 0 when every selected task is done or the run stopped cleanly (SIGTERM, ``--max-time``),
1 when a task failed (recorded in the index and the log; the other tasks went on), 130 after Ctrl-C
(a checkpoint is written first).
"""

from __future__ import annotations

import json
import logging
import math
import signal
import sys
import time
from pathlib import Path
from typing import Any

import click

from qmc.errors import UserError

__all__ = ["cli", "main"]


class _Cli(click.Group):
    """Click group that reports UserErrors and click's own usage errors as one ``error:`` line."""

    def main(self, args: Any = None, prog_name: str | None = None, complete_var: str | None = None,
             standalone_mode: bool = True, **extra: Any) -> Any:
        try:
            rv = super().main(args, prog_name, complete_var, standalone_mode=False, **extra)
        except UserError as exc:
            click.echo(f"error: {exc}", err=True)
            sys.exit(2)
        except click.ClickException as exc:
            ctx = getattr(exc, "ctx", None)
            where = ctx.command_path if ctx is not None else "qmc"
            hint = f" (see '{where} --help')" if isinstance(exc, click.UsageError) else ""
            click.echo(f"error: {where}: {exc.format_message()}{hint}", err=True)
            sys.exit(exc.exit_code)
        except click.Abort:
            click.echo("error: aborted", err=True)
            sys.exit(130)
        if not standalone_mode:
            return rv
        sys.exit(rv if isinstance(rv, int) else 0)


@click.group(name="qmc", cls=_Cli, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="seriesloop", prog_name="qmc")
def cli() -> None:
    """Stochastic series expansion quantum Monte Carlo for sign-free S=1/2 spin models."""


def main() -> None:
    """Entry point of the ``qmc`` script."""
    cli(prog_name="qmc")


# ----------------------------------------------------------------------------------------------------------
# qmc run


def _open_log(run_dir: Path) -> tuple[logging.Logger, logging.Handler]:
    logger = logging.getLogger("qmc.run")
    logger.setLevel(logging.INFO)
    logger.propagate = False
    handler = logging.FileHandler(run_dir / "run.log", encoding="utf-8")
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


@cli.command("run")
@click.argument("config", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--out", "out", type=click.Path(path_type=Path), default=None,
              help="Run directory (default: [run] output of the configuration).")
@click.option("--only", "only", multiple=True, metavar="TASK",
              help="Run only this task id (repeat the option, or separate ids by commas).")
@click.option("--force", is_flag=True,
              help="Reuse a run directory made with a different configuration: its index and the task files "
                   "of changed tasks are renamed aside (never deleted).")
@click.option("--quiet", "-q", is_flag=True, help="No progress display (for batch jobs); the log is kept.")
@click.option("--max-time", "max_time", type=click.FloatRange(min=0, min_open=True), default=None,
              metavar="SECONDS", help="Wall-time budget: checkpoint and stop cleanly (exit 0) when used up.")
def run_cmd(config: Path, out: Path | None, only: tuple[str, ...], force: bool, quiet: bool,
            max_time: float | None) -> None:
    """Run all unfinished tasks of CONFIG (largest lattices first); rerun the same command to resume.

    SIGTERM (e.g. a cluster time limit) or --max-time: the running task writes a checkpoint and the
    command exits 0; the next `qmc run` continues where it stopped.  Started by an MPI launcher
    (`mpiexec -n K qmc run CONFIG`), the tasks are spread over the K ranks (see qmc.mpi.farm).
    """
    from qmc.mpi.farm import mpi_world
    from qmc.run.serial import StopFlag

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
    from qmc.run.progress import NullProgress, Progress
    from qmc.run.serial import prepare_run, run_serial, task_weight

    try:
        cfg = load_config(config)
        plan = prepare_run(cfg, out, only=only, force=force)
    except BaseException:
        if world is not None:  # the workers wait for the set-up: tell them the run will not start
            world.cancel()
        raise
    logger, handler = _open_log(plan.run_dir)
    progress = NullProgress() if quiet else Progress()
    try:
        logger.info("qmc run %s: %d task(s) to run, %d done already, run directory %s", cfg.path,
                    len(plan.tasks), len(plan.done), plan.run_dir)
        for m in plan.moved:
            logger.warning("--force: renamed aside %s", m)
            progress.message(f"note: renamed aside {m}")
        progress.plan([(t.task_id, task_weight(t), t.sampling.warmup_steps + t.sampling.measure_steps,
                        plan.index["tasks"][t.task_id]["steps_done"]) for t in plan.tasks])
        deadline = t_start + max_time if max_time is not None else None
        if world is not None:
            from qmc.mpi.farm import run_farm

            report = run_farm(world, plan, stop_flag=flag, progress=progress, logger=logger,
                              deadline=deadline)
        else:
            report = run_serial(plan, stop_flag=flag, progress=progress, logger=logger, deadline=deadline)
        progress.close()
        return _report(plan, report, flag, quiet, logger)
    finally:
        logger.removeHandler(handler)
        handler.close()


def _report(plan: Any, report: Any, flag: Any, quiet: bool, logger: logging.Logger) -> int:
    n_sel = len(plan.tasks) + len(plan.done)
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
    else:
        text = f"done: all {n_sel} task(s) finished in {plan.run_dir}"
        logger.info(text)
        if not quiet:
            click.echo(text, err=True)
    if report.failed:
        return 1
    if getattr(flag, "signal", None) == signal.SIGINT:
        return 130
    return 0


# ----------------------------------------------------------------------------------------------------------
# qmc summary


def _fmt(x: Any, spec: str) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "nan"
    return format(x, spec)


def _params_text(params: dict[str, Any]) -> str:
    return ", ".join(f"{k} = {list(v) if isinstance(v, tuple) else v}" for k, v in params.items())


def _summary_table(s: dict[str, Any]) -> str:
    info = s.get("info", {})
    head = f"task {s['task']}"
    if info:
        head += (f"  ({info.get('status', '?')}, {info.get('n_bins', 0)} bins of "
                 f"{info.get('steps_per_bin', 0)} steps, {info.get('n_sites', '?')} sites)")
    lines = [head, "  " + _params_text(s["params"])]
    obs = s["observables"]
    if obs:
        width = max(10, *(len(n) for n in obs))
        lines.append(f"  {'observable':<{width}}  {'mean':>16}  {'error':>10}  {'tau_int':>8}")
        for name, d in obs.items():
            lines.append(f"  {name:<{width}}  {_fmt(d.get('mean'), '16.9g')}  "
                         f"{_fmt(d.get('error'), '10.3g')}  {_fmt(d.get('tau_int'), '8.2f')}")
    if s.get("exchange"):
        lines.append("  " + _exchange_text(s["exchange"]))
    lines += [f"  warning: {w}" for w in s.get("warnings", [])]
    return "\n".join(lines)


def _exchange_text(x: dict[str, Any]) -> str:
    """One line on a task's replica exchange: its place in the ladder and its acceptance rates."""
    name, pos, values, tried = x["parameter"], x["position"], x["values"], x["attempted"]
    parts = []
    for j, rate, other in ((pos - 1, x["acceptance_down"], pos - 1), (pos, x["acceptance_up"], pos + 1)):
        if 0 <= j < len(tried) and 0 <= other < len(values):
            parts.append(f"with {name} = {values[other]:g}: {_fmt(rate, '.3f')} ({tried[j]} attempts)")
    return (f"exchange along {name}: position {pos + 1} of {len(values)}, acceptance "
            + ", ".join(parts) + f"; round trips of the ladder: {x['round_trips']}")


@cli.command("summary")
@click.argument("run_dir", type=click.Path(path_type=Path))
@click.option("--json", "as_json", is_flag=True, help="Print a JSON list instead of tables.")
@click.option("--merge-replicas", is_flag=True, help="Combine tasks that differ only in the replica number.")
def summary_cmd(run_dir: Path, as_json: bool, merge_replicas: bool) -> None:
    """Mean, error bar (binning analysis) and tau_int of every observable of every task in RUN_DIR.

    Derived quantities (binder_stag, specific_heat, corr_length, ...) come from the jackknife.  RUN_DIR may
    also be a single task file.
    """
    from qmc.analysis import group_replicas, summarize_task
    from qmc.analysis.tables import to_jsonable
    from qmc.exchange.tasks import exchange_summary
    from qmc.storage.task_file import read_run

    tasks = read_run(run_dir)
    records = group_replicas(tasks) if merge_replicas else tasks
    summaries = [summarize_task(t) for t in records]
    for rec, s in zip(records, summaries, strict=True):
        x = exchange_summary(getattr(rec, "exchange", None))  # replica exchange: acceptance rates
        if x is not None:
            s["exchange"] = x
    if as_json:
        out = []
        for s in summaries:
            d = {"task": s["task"], "params": s["params"], "observables": s["observables"],
                 "info": s.get("info", {}), "warnings": s.get("warnings", [])}
            if "exchange" in s:
                d["exchange"] = s["exchange"]
            out.append(to_jsonable(d))
        click.echo(json.dumps(out, indent=1))
        return
    if not summaries:
        click.echo(f"{run_dir}: no task files yet")
    click.echo("\n\n".join(_summary_table(s) for s in summaries))


# ----------------------------------------------------------------------------------------------------------
# qmc inspect


def _inspect_text(d: Any) -> str:
    rows: list[tuple[str, str]] = [
        ("file", d.path), ("format", "dsqmc-task, version 1"), ("task", d.task_id), ("status", d.status),
    ]
    if d.message:
        rows.append(("message", d.message))
    rows.append(("params", _params_text(d.params)))
    m = d.model_info
    if m:
        groups = ", ".join(m.get("group_names", []) or [])
        rows.append(("model", f"{m.get('lattice_kind', '?')} lattice, {m.get('n_sites', '?')} sites, "
                              f"{m.get('n_terms', '?')} terms, term groups: {groups}"))
    rows.append(("beta", f"{d.beta:g}"))
    rows.append(("bins", f"{d.bins_done} of {d.bins_total} done, {d.steps_per_bin} steps per bin"))
    rows.append(("steps", f"{d.steps_done} of {d.steps_total} done"))
    rows.append(("checkpoint", f"{d.checkpoint_time or 'none'} (at step {d.steps_done})"))
    rows.append(("observables", ", ".join(d.bin_names)))
    if d.vbs_histogram is not None:
        rows.append(("vbs_histogram", f"{d.vbs_histogram.shape[0]}x{d.vbs_histogram.shape[1]} bins over "
                                      f"[-{d.vbs_hist_range:g}, {d.vbs_hist_range:g}]^2, "
                                      f"{int(d.vbs_histogram.sum())} samples"))
    if d.exchange:
        from qmc.exchange.tasks import exchange_summary

        x = exchange_summary(d.exchange)
        plain = {k: (v.tolist() if hasattr(v, "tolist") else v) for k, v in d.exchange.items()}
        short = {k: (f"[{len(v)} values]" if isinstance(v, list) and len(v) > 8 else v)
                 for k, v in plain.items()}
        rows.append(("exchange", _exchange_text(x) if x is not None else _params_text(short)))
    width = max(len(k) for k, _ in rows)
    lines = [f"{k:<{width}}  {v}" for k, v in rows]
    prov = dict(d.provenance)
    sessions = prov.pop("sessions", [])
    lines.append("provenance")
    pw = max((len(k) for k in prov), default=0)
    lines += [f"  {k:<{pw}}  {v}" for k, v in prov.items()]
    lines.append(f"sessions ({len(sessions)})")
    for i, s in enumerate(sessions, 1):
        lines.append(f"  {i}. {s.get('start')} -> {s.get('stop')}  steps {s.get('steps_start')} -> "
                     f"{s.get('steps_stop')}  {s.get('ended')}  on {s.get('host')} (pid {s.get('pid')})")
    lines.append(f"config ({d.config_path})")
    lines += [f"  | {line}" for line in d.config_text.rstrip("\n").split("\n")]
    return "\n".join(lines)


@cli.command("inspect")
@click.argument("file", type=click.Path(path_type=Path))
def inspect_cmd(file: Path) -> None:
    """What a task file holds: task, status, parameters, bins and steps done, checkpoint, provenance,
    configuration."""
    from qmc.storage.task_file import read_task

    click.echo(_inspect_text(read_task(file)))


# ----------------------------------------------------------------------------------------------------------
# qmc new


@cli.command("new")
@click.argument("kind")
@click.option("--out", "out", type=click.Path(path_type=Path), default=None,
              help="File to write (default: ./<KIND>.toml; '-' prints to standard output).")
@click.option("--force", is_flag=True, help="Overwrite an existing file.")
def new_cmd(kind: str, out: Path | None, force: bool) -> None:
    """Write the commented example configuration KIND (heisenberg, bilayer, columnar-dimer, jq2, jq3)."""
    from qmc.config.templates import template

    text = template(kind)
    if out is not None and str(out) == "-":
        click.echo(text, nl=False)
        return
    path = out if out is not None else Path(f"{kind}.toml")
    if path.is_dir():
        path = path / f"{kind}.toml"
    if path.exists() and not force:
        raise UserError("the file exists; use --force to overwrite it or choose another --out", str(path))
    if not path.parent.is_dir():
        raise UserError(f"the folder {path.parent} does not exist", str(path))
    try:
        path.write_text(text, encoding="utf-8")
    except OSError as exc:
        raise UserError(f"cannot write the file ({exc.strerror or exc})", str(path)) from None
    click.echo(f"wrote {path}; edit it, then: qmc run {path}", err=True)


# ----------------------------------------------------------------------------------------------------------
# qmc analyze


@cli.command("analyze")
@click.argument("run_dir", type=click.Path(path_type=Path))
@click.option("--quantity", default="binder_stag", show_default=True,
              help="Dimensionless quantity whose crossings between sizes are located.")
@click.option("--coupling", default=None, help="Scan parameter to use as the coupling (default: detected).")
@click.option("--plot", is_flag=True, help="Also write plots (PNG and PDF).")
@click.option("--out", "out", type=click.Path(path_type=Path), default=None,
              help="Folder for tables and plots (default: RUN_DIR/analysis).")
@click.option("--json", "as_json", is_flag=True, help="Print the full result as JSON.")
@click.option("--extrapolate", "extrapolate", multiple=True, metavar="OBS",
              help="Extrapolate observable OBS to L -> infinity at every point of the other scan parameters "
                   "(repeat the option or separate names by commas); writes extrapolation.csv.")
@click.option("--powers", default=None, metavar="P1,P2,...",
              help="Correction powers of the fit y(L) = c_0 + sum_k c_k L^-p_k for every OBS (default: per "
                   "observable, e.g. 1,2 for m_stag2 and 3,4 for the energy of a 2D antiferromagnet).")
@click.option("--min-L", "min_L", type=click.FloatRange(min=0, min_open=True), default=None, metavar="L0",
              help="Leave out the sizes L < L0 from the extrapolation.")
def analyze_cmd(run_dir: Path, quantity: str, coupling: str | None, plot: bool, out: Path | None,
                as_json: bool, extrapolate: tuple[str, ...], powers: str | None, min_L: float | None) -> None:
    """Finite-size analysis of a run: observable tables, crossings of QUANTITY, extrapolation, plots.

    With --extrapolate, each OBS is fitted per point of the other scan parameters as
    y(L) = c_0 + sum_k c_k L^-p_k (weights 1/error^2); reported: c_0 with its error, chi^2/dof, the number
    of sizes, and the change of c_0 when the smallest size is dropped (read it before trusting a fit).
    For m_stag2 = <(M_s^z/N)^2> the full-vector staggered magnetisation m_s = sqrt(3 c_0) of a spin-rotation
    symmetric model is reported too.
    """
    from qmc.analysis import analyze_run, format_result
    from qmc.analysis.size_extrapolation import parse_powers
    from qmc.storage.task_file import read_run

    tasks = read_run(run_dir)
    target = out if out is not None else (run_dir if run_dir.is_dir() else run_dir.parent) / "analysis"
    if target.exists() and not target.is_dir():
        raise UserError("exists and is not a directory", str(target))
    result = analyze_run(tasks, target, quantity=quantity, plot=plot, coupling=coupling,
                         extrapolate=extrapolate, powers=parse_powers(powers), min_L=min_L)
    click.echo(json.dumps(result, indent=1) if as_json else format_result(result))


# ----------------------------------------------------------------------------------------------------------
# qmc validate (hook: the implementation lives in qmc.validation.suite)


@cli.command("validate")
@click.option("--quick", "mode", flag_value="quick", default=True, help="Short checks (default).")
@click.option("--thorough", "mode", flag_value="thorough", help="Longer checks with tighter error bars.")
def validate_cmd(mode: str) -> None:
    """Check the simulation against exact results (see qmc.validation.suite)."""
    try:
        from qmc.validation.suite import run_validation
    except ImportError as exc:
        if exc.name not in ("qmc.validation.suite",):
            raise
        raise UserError("the validation suite is not installed", "qmc validate") from None
    code = run_validation(mode, click.echo)
    if code:
        sys.exit(int(code))
