"""``qmc validate [--quick | --thorough]``: short simulations compared with exact and published values.

Prints a table (case, value, error, sys, reference, source, deviation in error bars, PASS/FAIL; see
:mod:`qmc.validation.table`) through ``echo`` and returns the exit code: 0 when every check passes, 1
otherwise.  Progress with an ETA goes to standard error.  The cases are listed in
:mod:`qmc.validation.cases`; ``quick`` takes a few minutes on two cores, ``thorough`` hours (meant for a
new installation, e.g. on a cluster node: it uses every core available to the process).
"""

from __future__ import annotations

import sys
import time
from collections.abc import Callable
from typing import TextIO

__all__ = ["run_validation"]


def run_validation(mode: str = "quick", echo: Callable[[str], object] = print, *, workers: int | None = None,
                   stream: TextIO | None = None) -> int:
    """Run the ``mode`` suite ("quick" or "thorough"); returns 0 if all checks pass, else 1.

    ``workers``: processes to use (default: every core available); ``stream``: where progress goes
    (default standard error).  An unknown mode raises :class:`qmc.errors.UserError`.
    """
    from qmc.validation.cases import build_cases
    from qmc.validation.runner import run_cases
    from qmc.validation.table import format_table

    cases = build_cases(mode)
    t0 = time.perf_counter()
    checks = run_cases(cases, workers=workers, stream=stream if stream is not None else sys.stderr)
    elapsed = time.perf_counter() - t0
    echo(f"qmc validate --{mode}: {len(checks)} checks in {elapsed:.0f} s")
    echo(format_table(checks))
    return 0 if checks and all(c.passed for c in checks) else 1
