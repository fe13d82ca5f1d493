"""Where a result came from: program and library versions, git revision, host, seeds, run sessions.

:func:`environment` is computed once per process.  The git revision is ``git rev-parse HEAD`` run in the
directory of the installed ``qmc`` package; when git or the repository is absent it is ``""``
(``git_dirty`` tells whether tracked files differed from that revision).  :func:`session_entry` describes
one execution of a task (one process working on it from ``start`` to ``stop``); a task file keeps the list
of all its sessions.  Times are local times with offset (:func:`now_iso`).
"""

from __future__ import annotations

import functools
import os
import platform
import socket
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["DISTRIBUTION", "environment", "git_revision", "package_version", "task_provenance",
           "session_entry", "now_iso"]

DISTRIBUTION = "seriesloop"
"""Name of the installed distribution (``pip show seriesloop``); the import package is ``qmc``."""

_PACKAGE_DIR = Path(__file__).resolve().parent


def package_version() -> str:
    """Installed version of the ``seriesloop`` distribution, or ``"unknown"``."""
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version(DISTRIBUTION)
    except PackageNotFoundError:
        return "unknown"


def now_iso(t: float | None = None) -> str:
    """Local time with offset, seconds precision, e.g. ``2024-06-11T14:03:00+0200``."""
    return time.strftime("%Y-%m-%dT%H:%M:%S%z", time.localtime(time.time() if t is None else t))


def _git(*args: str) -> str | None:
    try:
        out = subprocess.run(["git", "-C", str(_PACKAGE_DIR), *args], capture_output=True, text=True,
                             timeout=10, check=False)
    except (OSError, subprocess.SubprocessError):
        return None
    return out.stdout.strip() if out.returncode == 0 else None


@functools.lru_cache(maxsize=1)
def git_revision() -> tuple[str, bool]:
    """``(revision, dirty)`` of the repository holding the package; ``("", False)`` without one."""
    rev = _git("rev-parse", "HEAD")
    if not rev:
        return "", False
    status = _git("status", "--porcelain", "--untracked-files=no")
    return rev, bool(status)


def _version(module: str) -> str:
    try:
        mod = __import__(module)
    except ImportError:
        return ""
    return str(getattr(mod, "__version__", ""))


@functools.lru_cache(maxsize=1)
def environment() -> dict[str, Any]:
    """Static facts about this process: versions, git revision, host, platform."""
    rev, dirty = git_revision()
    try:
        import h5py

        hdf5 = h5py.version.hdf5_version
    except ImportError:
        hdf5 = ""
    return {
        "package": DISTRIBUTION,
        "package_version": package_version(),
        "git_revision": rev,
        "git_dirty": dirty,
        "python_version": platform.python_version(),
        "numpy_version": np.__version__,
        "numba_version": _version("numba"),
        "h5py_version": _version("h5py"),
        "hdf5_version": hdf5,
        "host": socket.gethostname(),
        "platform": platform.platform(),
        "executable": sys.executable,
    }


def task_provenance(master_seed: int, seed_key: str, seed_words: np.ndarray) -> dict[str, Any]:
    """Attributes of the ``/provenance`` group of a task file (without the session list)."""
    return {**environment(), "master_seed": int(master_seed), "seed_key": seed_key,
            "stream_seed": np.asarray(seed_words, dtype=np.uint64)}


def session_entry(start_iso: str, steps_start: int) -> dict[str, Any]:
    """A new session record; the runner updates ``stop``, ``steps_stop``, ``ended`` and ``seconds`` (wall
    time since the start, to the millisecond) as it goes."""
    return {"start": start_iso, "stop": start_iso, "host": socket.gethostname(), "pid": os.getpid(),
            "steps_start": int(steps_start), "steps_stop": int(steps_start), "ended": "running"}
