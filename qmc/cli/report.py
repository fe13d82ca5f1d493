"""``qmc report``: one self-contained HTML page about a run (see :mod:`qmc.analysis.html_report`)."""

from __future__ import annotations

from pathlib import Path

import click

__all__ = ["report_cmd"]


@click.command("report")
@click.argument("run_dir", type=click.Path(path_type=Path))
@click.option("--out", "out", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="The HTML file to write (default: RUN_DIR/report.html).")
@click.option("--quantity", "quantities", multiple=True, metavar="NAME",
              help="Dimensionless quantity whose crossings are analysed (repeat the option; default: every "
                   "one of binder_stag, stiffness_L, xi_over_L, binder_vbs the run has).")
@click.option("--coupling", default=None, help="Scan parameter to use as the coupling (default: detected).")
@click.option("--extrapolate", "extrapolate", multiple=True, metavar="OBS",
              help="Also extrapolate observable OBS to L -> infinity (as qmc analyze --extrapolate).")
def report_cmd(run_dir: Path, out: Path | None, quantities: tuple[str, ...], coupling: str | None,
               extrapolate: tuple[str, ...]) -> None:
    """Write one HTML page about the run in RUN_DIR, to open in a browser (no network needed).

    It shows the model and lattice in words and the configuration, the scan and the state of every task,
    the warnings, the ground-state check (beta against 2 beta), the crossings of the dimensionless
    quantities with their fits and caveats, every observable against the coupling for each size, the
    valence-bond histograms, a table of all estimates (also as CSV) and the provenance of the data.
    Plots are embedded in the page; nothing else is written.
    """
    from importlib.metadata import version

    from qmc.analysis.html_report import write_report
    from qmc.storage.run_index import load_index
    from qmc.storage.task_file import read_run

    tasks = read_run(run_dir)
    target = out if out is not None else (run_dir if run_dir.is_dir() else run_dir.parent) / "report.html"
    index = load_index(run_dir) if run_dir.is_dir() else None
    path = write_report(tasks, target, index=index, quantities=quantities, version=version("seriesloop"),
                        coupling=coupling, extrapolate=extrapolate)
    click.echo(f"written: {path}")
