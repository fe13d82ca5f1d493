"""Error raised by the analysis layer for bad input (a message and where it was found).

A subclass of ``qmc.errors.UserError``: the command line prints ``error: <where>: <message>`` and
exits with status 2, without a traceback.
"""

from __future__ import annotations

from qmc.errors import UserError

__all__ = ["AnalysisError"]


class AnalysisError(UserError):
    """Bad analysis input: ``message`` says what is wrong, ``where`` names the place."""

    def __init__(self, message: str, where: str = "analysis") -> None:
        super().__init__(message, where)
