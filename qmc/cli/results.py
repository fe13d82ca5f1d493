"""Commands that read results: ``qmc summary`` (per-task estimates), ``qmc inspect`` (one task file) and
``qmc analyze`` (finite-size analysis of a run)."""

from __future__ import annotations

import json
from pathlib import Path

import click

from qmc.errors import UserError

__all__ = ["summary_cmd", "inspect_cmd", "analyze_cmd"]


@click.command("summary")
@click.argument("run_dir", type=click.Path(path_type=Path))
@click.option("--json", "as_json", is_flag=True, help="Print a JSON list instead of tables.")
@click.option("--merge-copies", is_flag=True,
              help="Combine the independent copies of each parameter point into one estimate.")
def summary_cmd(run_dir: Path, as_json: bool, merge_copies: bool) -> None:
    """Mean, error bar and autocorrelation time of every observable of every task in RUN_DIR.

    The error is one standard error of the mean from a binning analysis of the stored bins; tau_int is
    the integrated autocorrelation time of the bins in units of bins (1/2: uncorrelated) and in Monte
    Carlo steps (bins times steps per bin; "<" marks an upper bound, when the bins are nearly
    uncorrelated).  Derived quantities (binder_stag, specific_heat, corr_length, ...) come from the
    jackknife.  Tasks with replica exchange also show their acceptance rates; tasks with a precision target
    whether it was met and at how many bins; a ground-state search its beta ladder and outcome.  RUN_DIR
    may also be a single task file.
    """
    from qmc.analysis import group_copies, summarize_task
    from qmc.analysis.summary import few_bins_warning
    from qmc.analysis.tables import to_jsonable
    from qmc.cli.text import summary_table
    from qmc.exchange.records import exchange_summary
    from qmc.storage.task_file import read_run

    tasks = read_run(run_dir)
    records = group_copies(tasks) if merge_copies else tasks
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
            d.update({k: s[k] for k in ("exchange", "target", "ground_state") if k in s})
            out.append(to_jsonable(d))
        click.echo(json.dumps(out, indent=1))
        return
    if not summaries:
        click.echo(f"{run_dir}: no task files yet")
    click.echo("\n\n".join(summary_table(s) for s in summaries))
    few = few_bins_warning(summaries)
    if few:
        click.echo(f"\nwarning: {few}")


@click.command("inspect")
@click.argument("file", type=click.Path(path_type=Path))
def inspect_cmd(file: Path) -> None:
    """What a task file holds: task, status, parameters, bins and steps done, checkpoint, provenance,
    configuration."""
    from qmc.cli.text import inspect_text
    from qmc.storage.task_file import read_task

    click.echo(inspect_text(read_task(file)))


@click.command("analyze")
@click.argument("run_dir", type=click.Path(path_type=Path))
@click.option("--quantity", default="binder_stag", show_default=True,
              help="Dimensionless quantity whose crossings between sizes are located (binder_stag, "
                   "stiffness_L, xi_over_L, binder_vbs, or any stored observable).")
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

    Writes observables.csv/.json (every observable per scan point, independent copies merged) and
    analysis.json: the crossings of QUANTITY between sizes, their extrapolation to infinite size with
    1/nu from the slopes, a data collapse, and a check that beta and 2 beta agree where both were run.

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
