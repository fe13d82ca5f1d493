"""The single error type raised for bad model input, plus a did-you-mean helper.

A :class:`ModelError` carries a human message and, optionally, *where* the problem is, written as a path
into the user's input (``"terms[1].bonds"``, ``"size[0]"``).  ``str(err)`` is ``"where: message"`` so a
command-line front end can print it as one line without a traceback.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable

__all__ = ["ModelError", "did_you_mean", "unknown_name"]


class ModelError(ValueError):
    """Bad model input: ``message`` says what is wrong, ``where`` (or None) says where."""

    def __init__(self, message: str, where: str | None = None) -> None:
        super().__init__(message, where)  # both in args, so the error pickles (e.g. across MPI ranks)
        self.message = message
        self.where = where

    def __str__(self) -> str:
        return f"{self.where}: {self.message}" if self.where else self.message

    def within(self, prefix: str) -> ModelError:
        """The same error located inside ``prefix``: ``"terms[2]"`` + ``"bonds"`` -> ``"terms[2].bonds"``."""
        if not self.where:
            where = prefix
        elif self.where.startswith("["):
            where = prefix + self.where
        else:
            where = f"{prefix}.{self.where}"
        return ModelError(self.message, where)


def did_you_mean(word: object, choices: Iterable[str]) -> str:
    """``" (did you mean 'square'?)"`` for the closest choice, or ``""`` if nothing is close."""
    close = difflib.get_close_matches(str(word), list(choices), n=1, cutoff=0.5)
    return f" (did you mean {close[0]!r}?)" if close else ""


def unknown_name(what: str, word: object, choices: Iterable[str], where: str | None = None) -> ModelError:
    """A ModelError for an unknown name, with a did-you-mean hint and the list of valid names."""
    choices = list(choices)
    listing = ", ".join(repr(c) for c in choices) if choices else "(none)"
    return ModelError(f"unknown {what} {word!r}{did_you_mean(word, choices)}; known: {listing}", where)
