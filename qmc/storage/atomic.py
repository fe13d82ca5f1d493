"""Atomic replacement of a file: a kill at any moment leaves either the previous or the new complete file.

A new version is written to a temporary file beside the target (:func:`temporary_path`:
``<name>.<pid>@<host>.tmp``, so that several processes sharing a directory never write the same temporary
file), flushed and fsync-ed, renamed onto the target with ``os.replace`` (atomic on POSIX file systems),
and the directory is fsync-ed so that the rename itself survives a crash.  Used for task files, the run
index, the run's copy of its configuration and the claim files.

A write that fails for a reason of the machine (no space, quota, read-only or vanished directory, I/O
error) removes its temporary file, leaves the target as it was, and raises one
:class:`~qmc.storage.faults.WriteFault` naming the target and the cause.  Temporary files left by killed
writers are removed by :func:`remove_leftovers`.
"""

from __future__ import annotations

import os
import re
import time
from pathlib import Path

from qmc.storage.faults import write_fault
from qmc.storage.processes import pid_alive, this_host

__all__ = ["temporary_path", "atomic_write_bytes", "atomic_write_text", "remove_leftovers",
           "LEFTOVER_SECONDS"]

LEFTOVER_SECONDS = 3600.0
"""A temporary file of a writer on another host is taken as left over once it is this many seconds old
(a writer on this host is asked directly whether it still exists)."""

_TEMPORARY = re.compile(r"^(?P<base>.+)\.(?P<pid>\d+)@(?P<host>[^/@]*)\.tmp$")


def temporary_path(path: str | os.PathLike) -> Path:
    """Where this process writes a new version of ``path`` before it replaces ``path``:
    ``<name>.<pid>@<host>.tmp``."""
    path = Path(path)
    return path.with_name(f"{path.name}.{os.getpid()}@{this_host()}.tmp")


def _fsync_directory(path: Path) -> None:
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
    except OSError:  # some platforms cannot open directories; the rename is still atomic
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def atomic_write_bytes(path: str | os.PathLike, data: bytes | bytearray | memoryview, durable: bool = True
                       ) -> None:
    """Replace ``path`` by ``data`` atomically; WriteFault (temporary file removed, ``path`` unchanged) when
    the machine refuses the write.  ``durable=False`` skips the fsync calls (the replacement is still
    atomic for every reader, but a crash of the machine may lose it): for files rewritten every few
    seconds whose loss does not matter, such as heartbeats."""
    path = Path(path)
    tmp = temporary_path(path)
    try:
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o666)
        try:
            view = memoryview(data).cast("B")
            while view:
                view = view[os.write(fd, view):]
            if durable:
                os.fsync(fd)
        finally:
            os.close(fd)
        os.replace(tmp, path)
    except BaseException as exc:
        try:
            tmp.unlink(missing_ok=True)
        except OSError:
            pass
        if isinstance(exc, OSError):
            raise write_fault(path, exc) from None
        raise
    if durable:
        _fsync_directory(path.parent)


def atomic_write_text(path: str | os.PathLike, text: str, durable: bool = True) -> None:
    """Write ``text`` (UTF-8) to ``path`` atomically (see :func:`atomic_write_bytes`)."""
    atomic_write_bytes(path, text.encode("utf-8"), durable)


def remove_leftovers(directory: str | os.PathLike, older_than: float = LEFTOVER_SECONDS) -> list[Path]:
    """Remove the temporary files in ``directory`` whose writers are gone: those of a process of this host
    that no longer exists, those of another host older than ``older_than`` seconds, and those of the
    earlier naming ``<name>.tmp`` (one writer per directory); returns what was removed."""
    removed: list[Path] = []
    try:
        candidates = list(Path(directory).glob("*.tmp"))
    except OSError:
        return removed
    now = time.time()
    for p in candidates:
        m = _TEMPORARY.match(p.name)
        try:
            if m is None:
                gone = True
            elif m["host"] == this_host():
                gone = not pid_alive(int(m["pid"]))
            else:
                gone = now - p.stat().st_mtime > older_than
            if gone:
                p.unlink()
                removed.append(p)
        except OSError:  # removed meanwhile, or not ours to remove
            continue
    return removed
