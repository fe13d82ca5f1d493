"""Faults of the machine while writing: a full disk, a quota, a read-only or vanished directory, an I/O error.

Every file a run writes goes through :mod:`qmc.storage.atomic`, which turns the operating system's error into
one :class:`WriteFault` naming the file and the cause.  A write fault is not a problem of the task: the run
stops (every running task keeps its last complete checkpoint, the temporary file of the failed write is
removed) and ``qmc run`` exits with :data:`WRITE_FAULT_EXIT` after one message.
"""

from __future__ import annotations

import errno
import os

__all__ = ["WRITE_FAULT_EXIT", "WriteFault", "write_fault", "fault_text"]

WRITE_FAULT_EXIT = 74
"""Exit status of ``qmc run`` stopped by a write fault (74 is ``EX_IOERR`` of the BSD ``sysexits.h``
convention: "an error occurred while doing I/O on some file")."""

_CAUSES = {
    errno.ENOSPC: "no space left on the device",
    errno.EDQUOT: "disk quota exceeded",
    errno.EROFS: "the file system is read-only",
    errno.ENOENT: "its directory no longer exists",
    errno.ENOTDIR: "its directory no longer exists",
    errno.EACCES: "permission denied",
    errno.EPERM: "permission denied",
    errno.EIO: "input/output error of the device",
    errno.EFBIG: "file too large (the file-size limit of this process, ulimit -f)",
    errno.ESTALE: "stale file handle (the network file system lost the directory)",
}


class WriteFault(Exception):
    """Writing ``path`` failed for a reason of the machine (``cause``, ``errno`` when known).

    ``str(fault)`` is ``"cannot write <path>: <cause>"``.
    """

    def __init__(self, path: str | os.PathLike, cause: str, errno_: int | None = None) -> None:
        super().__init__(str(path), cause, errno_)
        self.path = str(path)
        self.cause = cause
        self.errno = errno_

    def __str__(self) -> str:
        return f"cannot write {self.path}: {self.cause}"


def write_fault(path: str | os.PathLike, exc: BaseException) -> WriteFault:
    """The :class:`WriteFault` of an ``OSError`` raised while writing ``path`` (a WriteFault stays)."""
    if isinstance(exc, WriteFault):
        return exc
    code = getattr(exc, "errno", None)
    cause = _CAUSES.get(code) if code is not None else None
    if cause is None:
        text = getattr(exc, "strerror", None) or str(exc) or type(exc).__name__
        cause = text[0].lower() + text[1:] if text else "unknown error"
    return WriteFault(path, cause, code)


def fault_text(fault: WriteFault | str) -> str:
    """The one message of a run stopped by a write fault: the fault, and what is left and what to do."""
    return (f"{fault}; the run stopped and the last complete checkpoint of every task is intact (the "
            "failed write left nothing behind); make room or repair the directory, then run the same "
            "command again to continue")
