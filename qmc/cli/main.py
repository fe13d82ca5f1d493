"""Command line: ``qmc run | status | summary | inspect | analyze | report | new | validate``.

Bad input of any kind (configuration, run directory, task file, option) prints one line
``error: <where>: <what>`` on standard error and exits with status 2, without a traceback.  Exit status of
``qmc run``: 0 when every selected task is done, 75 (:data:`qmc.cli.run.EXIT_UNFINISHED`) when the run
stopped before the end (SIGTERM, Ctrl-C, ``--max-time``; checkpoints are written first, rerun to
continue), 1 when a task failed (recorded in the index and the log; the other tasks went on), 74
(:data:`qmc.storage.faults.WRITE_FAULT_EXIT`) when the machine refused a write (full disk, quota,
read-only or vanished directory, I/O error: one message names the file and the cause; every task keeps
its last complete checkpoint).  The commands live in :mod:`qmc.cli.run` (run), :mod:`qmc.cli.results`
(summary, inspect, analyze), :mod:`qmc.cli.status` (status), :mod:`qmc.cli.report` (report) and
:mod:`qmc.cli.setup` (new, validate).
"""

from __future__ import annotations

import sys
from typing import Any

import click

from qmc.cli.report import report_cmd
from qmc.cli.results import analyze_cmd, inspect_cmd, summary_cmd
from qmc.cli.run import run_cmd
from qmc.cli.setup import new_cmd, validate_cmd
from qmc.cli.status import status_cmd
from qmc.errors import UserError
from qmc.storage.faults import WRITE_FAULT_EXIT, WriteFault, fault_text

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
        except WriteFault as exc:  # the machine refused a write before the run got going
            click.echo(f"error: {fault_text(exc)}", err=True)
            sys.exit(WRITE_FAULT_EXIT)
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
    """Stochastic series expansion quantum Monte Carlo for sign-free S=1/2 and SU(N) spin models.

    Write a configuration (`qmc new`), run it (`qmc run`, serially or under mpiexec; rerun to resume,
    edit and rerun to grow it), watch it (`qmc status`), then read the results (`qmc summary`,
    `qmc analyze`, `qmc report`,
    `qmc inspect`).
    """


for _command in (run_cmd, status_cmd, summary_cmd, inspect_cmd, analyze_cmd, report_cmd, new_cmd,
                 validate_cmd):
    cli.add_command(_command)


def main() -> None:
    """Entry point of the ``qmc`` script."""
    cli(prog_name="qmc")
