"""Atomic replacement of a file: a kill at any moment leaves either the previous or the new complete file.

A new version is written to ``<name>.tmp`` beside the target, flushed and fsync-ed, renamed onto the target
with ``os.replace`` (atomic on POSIX file systems), and the directory is fsync-ed so that the rename itself
survives a crash.  Used for task files, the run index and the run's copy of its configuration.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

__all__ = ["temporary_path", "replacing", "atomic_write_text"]


def temporary_path(path: str | os.PathLike) -> Path:
    """Where a new version of ``path`` is written before it replaces ``path``: ``<name>.tmp``."""
    path = Path(path)
    return path.with_name(path.name + ".tmp")


def _fsync_path(path: Path, directory: bool = False) -> None:
    flags = os.O_RDONLY | (getattr(os, "O_DIRECTORY", 0) if directory else 0)
    try:
        fd = os.open(path, flags)
    except OSError:
        if directory:  # some platforms cannot open directories; the rename is still atomic
            return
        raise
    try:
        os.fsync(fd)
    except OSError:
        if not directory:
            raise
    finally:
        os.close(fd)


@contextmanager
def replacing(path: str | os.PathLike) -> Iterator[Path]:
    """Context for writing a new version of ``path``: yields the temporary path to write (and close) in
    the block; on leaving the block normally the file is fsync-ed and renamed onto ``path``, on an
    exception (also a KeyboardInterrupt) the temporary file is removed and ``path`` stays as it was."""
    path = Path(path)
    tmp = temporary_path(path)
    try:
        yield tmp
        _fsync_path(tmp)
        os.replace(tmp, path)
        _fsync_path(path.parent, directory=True)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def atomic_write_text(path: str | os.PathLike, text: str) -> None:
    """Write ``text`` (UTF-8) to ``path`` atomically."""
    with replacing(path) as tmp, open(tmp, "w", encoding="utf-8") as fh:
        fh.write(text)
        fh.flush()
