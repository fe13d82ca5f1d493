"""The printed result table of ``qmc validate``.

Columns: case, value, error (statistical, one sigma), sys (systematic allowance including the reference's
uncertainty), reference value (``>`` marks a one-sided check asking for a significant excess, ``<=`` one
asking for none), source, deviation |value - reference| / sqrt(error^2 + sys^2) (signed for one-sided
checks), PASS/FAIL.
Values are rounded to the second significant digit of their error; the notes of the cases (methods, fit
forms, allowances) follow the table, then a one-line summary.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from .checks import SIGMAS, Check

__all__ = ["HEADER", "format_table", "format_value", "format_reference"]

HEADER = ("case", "value", "error", "sys", "reference", "source", "dev/sigma", "result")


def _decimals(err: float, digits: int = 2) -> int | None:
    if not (math.isfinite(err) and err > 0.0):
        return None
    return int(min(12, max(0, digits - 1 - math.floor(math.log10(err)))))


def format_value(value: float, err: float) -> str:
    """``value`` with as many decimals as the second significant digit of ``err`` (8 significant digits
    when ``err`` is zero or undefined)."""
    if not math.isfinite(value):
        return str(value)
    d = _decimals(err)
    return f"{value:.8g}" if d is None else f"{value:.{d}f}"


def _small(x: float) -> str:
    if not math.isfinite(x):
        return str(x)
    return "0" if x == 0.0 else f"{x:.2g}"


def format_reference(check: Check) -> str:
    """Reference value: ``-0.669437(5)`` style when it has an uncertainty, else one decimal more than the
    value column (8 significant digits at least for an exact value without a QMC error)."""
    ref = check.reference
    mark = {1: "> ", -1: "<= "}.get(check.side, "")
    d = _decimals(ref.error, 1)
    if d is not None:
        unit = 10.0 ** (-d)
        return f"{mark}{ref.value:.{d}f}({int(round(ref.error / unit))})"
    dv = _decimals(check.error)
    return mark + (f"{ref.value:.8g}" if dv is None else f"{ref.value:.{min(dv + 1, 12)}f}")


def _row(c: Check) -> tuple[str, ...]:
    dev = c.deviation
    dev_s = f"{dev:.2f}" if math.isfinite(dev) else str(dev)
    return (c.case, format_value(c.value, c.error), _small(c.error), _small(c.sys), format_reference(c),
            c.reference.source, dev_s, "PASS" if c.passed else "FAIL")


def format_table(checks: Sequence[Check]) -> str:
    """The table, the notes and the summary as one string (no trailing newline)."""
    rows = [HEADER] + [_row(c) for c in checks]
    widths = [max(len(r[k]) for r in rows) for k in range(len(HEADER))]
    right = {1, 2, 3, 4, 6}

    def line(r: Sequence[str]) -> str:
        cells = [r[k].rjust(widths[k]) if k in right else r[k].ljust(widths[k]) for k in range(len(r))]
        return "  ".join(cells).rstrip()

    out = [line(rows[0]), line(["-" * w for w in widths])] + [line(r) for r in rows[1:]]
    notes = list(dict.fromkeys(c.note for c in checks if c.note))
    if notes:
        out += ["", "notes:"] + [f"  - {n}" for n in notes]
    n_fail = sum(not c.passed for c in checks)
    out += ["", f"criterion: PASS when |value - reference| <= {SIGMAS:g} sqrt(error^2 + sys^2)"]
    if any(c.side for c in checks):
        out.append(f"  one-sided rows: '> ref' PASS when value - ref >= {SIGMAS:g} sqrt(error^2 + sys^2), "
                   f"'<= ref' when value - ref <= {SIGMAS:g} sqrt(error^2 + sys^2)")
    if n_fail:
        out.append(f"FAILED: {n_fail} of {len(checks)} checks")
    else:
        out.append(f"all {len(checks)} checks passed")
    return "\n".join(out)
