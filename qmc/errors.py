"""User-facing errors: bad input that is reported as one line, without a traceback.

A :class:`UserError` carries the problem (``message``) and the place it was found (``where``), e.g.
``where = "configs/x.toml: scan.g"``.  ``str(err)`` is ``"where: message"``; the command-line interface
prints ``error: <str(err)>`` and exits with status 2.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable

__all__ = ["UserError", "did_you_mean", "describe_value"]


class UserError(Exception):
    """Bad user input (configuration, command-line argument, run directory).

    ``message`` states the problem and, where possible, the fix; ``where`` names the file and key
    (or the command) it came from.  Either may be empty.
    """

    def __init__(self, message: str, where: str = "") -> None:
        super().__init__(message, where)
        self.message = message
        self.where = where

    def __str__(self) -> str:
        return f"{self.where}: {self.message}" if self.where else self.message

    def __repr__(self) -> str:
        return f"UserError({self.message!r}, where={self.where!r})"


def did_you_mean(word: str, choices: Iterable[str]) -> str:
    """Return ``" (did you mean 'x'?)"`` for the closest choice to ``word``, or ``""`` if none is close.

    Closeness is difflib's ratio (cutoff 0.6), compared case-insensitively.
    """
    choices = list(choices)
    lowered = {c.lower(): c for c in choices}
    close = difflib.get_close_matches(str(word).lower(), list(lowered), n=1, cutoff=0.6)
    return f" (did you mean '{lowered[close[0]]}'?)" if close else ""


def describe_value(value: object) -> str:
    """Short description of a parsed TOML value for messages, e.g. ``the text 'ten'`` or ``a list``."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return f"the text {value!r}"
    if isinstance(value, int | float):
        return f"the number {value!r}"
    if isinstance(value, list):
        return "a list"
    if isinstance(value, dict):
        return "a table"
    return f"a {type(value).__name__} value"
