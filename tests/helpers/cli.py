"""Calling the ``qmc`` command line in-process, and the shape every bad-input error must have."""

from __future__ import annotations

from click.testing import CliRunner, Result

from qmc.cli.main import cli

__all__ = ["assert_user_error", "invoke"]


def invoke(*args: object) -> Result:
    """``qmc ARGS...`` run in this process (arguments converted with ``str``)."""
    return CliRunner().invoke(cli, [str(a) for a in args])


def assert_user_error(result: Result, *fragments: str) -> None:
    """Exit 2, exactly one line on stderr starting with 'error: ' and holding every fragment, no traceback."""
    assert result.exit_code == 2, (result.output, result.exception)
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: "), result.stderr
    assert "Traceback" not in result.output
    for f in fragments:
        assert f in lines[0], lines[0]
