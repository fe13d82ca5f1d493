"""Commands that prepare and check: ``qmc new`` (an example configuration) and ``qmc validate`` (the
reference checks of the installed program)."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from qmc.errors import UserError

__all__ = ["new_cmd", "validate_cmd"]


@click.command("new")
@click.argument("kind")
@click.option("--out", "out", type=click.Path(path_type=Path), default=None,
              help="File to write (default: ./<KIND>.toml; '-' prints to standard output).")
@click.option("--force", is_flag=True, help="Overwrite an existing file.")
def new_cmd(kind: str, out: Path | None, force: bool) -> None:
    """Write the commented example configuration KIND: heisenberg, bilayer, columnar-dimer, jq2, jq3 or
    su3-jq2 or bilayer-field.

    Each file is a complete run: its comments explain the model, every key and the choice of sizes,
    temperatures and couplings.
    """
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


@click.command("validate")
@click.option("--quick", "mode", flag_value="quick", default=True,
              help="Short checks, a few minutes on two cores (default).")
@click.option("--thorough", "mode", flag_value="thorough",
              help="Longer checks with tighter error bars, hours; uses every core (for a new installation).")
def validate_cmd(mode: str) -> None:
    """Check the simulation against exact diagonalization of small clusters and published values.

    Prints one row per check (value, error bar, reference, its source, deviation in error bars,
    PASS/FAIL); the exit status is 1 when a check fails.
    """
    try:
        from qmc.validation.suite import run_validation
    except ImportError as exc:
        if exc.name not in ("qmc.validation.suite",):
            raise
        raise UserError("the validation suite is not installed", "qmc validate") from None
    code = run_validation(mode, click.echo)
    if code:
        sys.exit(int(code))
