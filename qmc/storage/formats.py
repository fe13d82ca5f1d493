"""The names of our file formats, the older names still read, and the one notice about an old file.

Every file this program writes says what it is in a ``format`` attribute (task files, HDF5 root) or key
(the run index, JSON) plus a ``format_version``:

* task file: ``format = "seriesloop/task"``;
* run index: ``format = "seriesloop/run-index"``.

Releases before the project took its name wrote the same layout (version 1) under a hyphenated format
name, ``<former name>-task`` and ``<former name>-run-index`` (:data:`OLD_SUFFIXES`; current names have a
slash); such files are read as they are, and a file that is rewritten gets the new name.  Reading one is
said once per process (:func:`note_old_format`, a warning on the ``qmc.storage`` logger), not once per
file.
"""

from __future__ import annotations

import logging

__all__ = [
    "TASK_FORMAT", "TASK_VERSION", "INDEX_FORMAT", "INDEX_VERSION", "OLD_SUFFIXES", "known_format",
    "note_old_format", "old_format_noted", "quiet_old_format_notes", "short_reason",
]

TASK_FORMAT = "seriesloop/task"
TASK_VERSION = 1
INDEX_FORMAT = "seriesloop/run-index"
INDEX_VERSION = 1
OLD_SUFFIXES = {TASK_FORMAT: "-task", INDEX_FORMAT: "-run-index"}
"""For each current format name, how the names of the same layout written before the rename end: a single
word followed by this suffix (still read)."""

_LOG = logging.getLogger("qmc.storage")
_noted: set[str] = set()  # current format names for which an old file has been reported in this process
_quiet = False


def known_format(found: object, expected: str) -> str | None:
    """``"current"`` when ``found`` (a format attribute, str or bytes) is ``expected``, ``"old"`` when it
    is an earlier name of that format, else None."""
    if isinstance(found, bytes):
        found = found.decode("utf-8", "replace")
    if found == expected:
        return "current"
    suffix = OLD_SUFFIXES.get(expected)
    if (isinstance(found, str) and suffix is not None and found.endswith(suffix)
            and found[:-len(suffix)].isalnum()):
        return "old"
    return None


def note_old_format(expected: str, found: str, where: str) -> None:
    """Report, once per process and format, that a file of an earlier format name was read."""
    if expected in _noted:
        return
    _noted.add(expected)
    if not _quiet:
        _LOG.warning("note: %s is of the older format %r (read as before; files written from now on say "
                     "%r); further files of that format are read without this note", where, found, expected)


def old_format_noted(expected: str) -> bool:
    """Whether this process has read a file of an earlier name of ``expected``."""
    return expected in _noted


def quiet_old_format_notes() -> None:
    """Say nothing about old formats in this process (MPI workers: rank 0 has read every task file's
    header before they start, and has said it for the whole run)."""
    global _quiet
    _quiet = True


def short_reason(exc: BaseException) -> str:
    """First line of an exception's text, at most 160 characters (for one-line messages about a file)."""
    text = str(exc).split("\n")[0]
    return text if len(text) < 160 else text[:157] + "..."
