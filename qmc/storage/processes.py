"""Which process is this, and is another one still alive: the identity used by temporary files and claims.

A process is named by its host (:func:`this_host`) and its process id.  Whether a process on *this* host
still exists is :func:`pid_alive` (a zombie -- ended but not yet collected by its parent -- counts as
ended); a process on another host cannot be asked, so claims use heartbeats for those
(:mod:`qmc.storage.claims`).
"""

from __future__ import annotations

import functools
import os
import re
import socket

__all__ = ["this_host", "pid_alive"]


@functools.lru_cache(maxsize=1)
def this_host() -> str:
    """This machine's host name, reduced to characters that are safe in file names (``[A-Za-z0-9_.-]``)."""
    return re.sub(r"[^A-Za-z0-9_.-]", "_", socket.gethostname()) or "localhost"


def pid_alive(pid: int) -> bool:
    """Whether process ``pid`` exists on this host and has not ended (a zombie has ended)."""
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # exists, belongs to another user
        return True
    except OSError:
        return False
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii", errors="replace") as fh:
            state = fh.read().rsplit(")", 1)[-1].split()[0]
        return state not in ("Z", "X")
    except (OSError, IndexError):  # no /proc (not Linux): os.kill's answer stands
        return True
