"""An exchange-ladder team whose members are threads of the test, with an in-memory allgather/sendrecv (the
same two calls an MPI team makes), and :func:`run_team` running ``run_group`` on such a team."""

from __future__ import annotations

import queue
import threading
from pathlib import Path
from typing import Any

import numpy as np

from helpers.stopping import StopAfter
from qmc.run.ladder_run import run_group
from qmc.run.outcome import StopFlag

__all__ = ["ThreadTeam", "run_team"]


class _Hub:
    def __init__(self, size: int) -> None:
        self.size = size
        self.barrier = threading.Barrier(size, timeout=120)
        self.slots: list[Any] = [None] * size
        self.boxes = {(a, b): queue.Queue() for a in range(size) for b in range(size)}


class ThreadTeam:
    """Team member ``member`` of a hub shared by threads."""

    def __init__(self, hub: _Hub, member: int) -> None:
        self.hub, self.member, self.size = hub, member, hub.size
        self.meetings = 0

    def allgather(self, obj: Any) -> list[Any]:
        self.meetings += 1
        self.hub.slots[self.member] = obj
        self.hub.barrier.wait()
        out = list(self.hub.slots)
        self.hub.barrier.wait()
        return out

    def allgather_array(self, row: np.ndarray) -> np.ndarray:
        return np.array(self.allgather(np.asarray(row, dtype=np.int64).copy()))

    def sendrecv(self, obj: Any, member: int) -> Any:
        self.hub.boxes[(self.member, member)].put(obj)
        return self.hub.boxes[(member, self.member)].get(timeout=120)

    def close(self) -> None:
        pass


def run_team(unit, run_dir: Path, size: int, text: str, stop_member: int | None = None,
             stop_steps: int = 0) -> list[list[Any]]:
    """``run_group`` on ``size`` threads; returns each member's outcomes."""
    hub = _Hub(size)
    results: list[Any] = [None] * size

    def work(r: int) -> None:
        flag = StopFlag()
        sink = StopAfter(flag, stop_steps) if r == stop_member else None
        try:
            results[r] = run_group(unit, run_dir, stop_flag=flag, progress=sink, config_text=text,
                                   team=ThreadTeam(hub, r))
        except BaseException as exc:  # surfaced by the assertion below
            results[r] = exc

    threads = [threading.Thread(target=work, args=(r,)) for r in range(size)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=300)
    assert not any(t.is_alive() for t in threads), "a team member hangs"
    for r in results:
        assert not isinstance(r, BaseException), r
    return results
