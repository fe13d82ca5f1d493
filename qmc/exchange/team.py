"""The processes that run one replica-exchange ladder together: a *team* of one or more MPI ranks.

A ladder of M chains is split into contiguous blocks, one per team member (:func:`chain_blocks`); member r
advances the chains of its block, and the members meet only at synchronisation points (exchange points
and the end of the warm-up).  This module is the transport: who the members are and the three collective
calls they have (:meth:`LadderTeam.allgather_array` for a row of numbers, :meth:`LadderTeam.allgather`
for objects, :meth:`LadderTeam.sendrecv` between two members); what they say with them is the ladder
protocol in :mod:`qmc.exchange.meeting`.  Every member keeps an identical copy of the ladder's own state
(swap RNG, labels, counters), so swap decisions need no coordinator and the bins do not depend on how
many members there are.

:class:`SoloTeam` is the one-process team (serial runs, a ladder on one rank); :class:`CommTeam` wraps an
mpi4py intracommunicator, made for the ranks of a team by :func:`form_team` (``MPI_Comm_create_group``:
collective over the team's ranks only, so the other ranks of the job go on with their own work).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any, Protocol

import numpy as np

__all__ = ["LadderTeam", "SoloTeam", "CommTeam", "chain_blocks", "team_size", "form_team"]


class LadderTeam(Protocol):
    """What a ladder needs from the processes that run it."""

    size: int
    member: int

    def allgather(self, obj: Any) -> list[Any]:
        """Every member's ``obj``, in member order (collective)."""
        ...

    def allgather_array(self, row: np.ndarray) -> np.ndarray:
        """Every member's int64 ``row`` (all of one length), stacked in member order: shape (size, n)."""
        ...

    def sendrecv(self, obj: Any, member: int) -> Any:
        """Send ``obj`` to ``member`` and receive that member's object (both call it)."""
        ...

    def close(self) -> None:
        """Release what the team holds."""
        ...


class SoloTeam:
    """A team of one process: the whole ladder is local."""

    size = 1
    member = 0

    def allgather(self, obj: Any) -> list[Any]:
        return [obj]

    def allgather_array(self, row: np.ndarray) -> np.ndarray:
        return np.asarray(row, dtype=np.int64).reshape(1, -1).copy()

    def sendrecv(self, obj: Any, member: int) -> Any:
        raise RuntimeError("a one-process team has no partner to exchange with")

    def close(self) -> None:
        pass


class CommTeam:
    """A team over an mpi4py intracommunicator (pickled objects; member = rank in ``comm``)."""

    TAG = 31

    def __init__(self, comm: Any, owned: bool = True) -> None:
        self.comm = comm
        self.size = int(comm.Get_size())
        self.member = int(comm.Get_rank())
        self.owned = owned

    def allgather(self, obj: Any) -> list[Any]:
        return list(self.comm.allgather(obj))

    def allgather_array(self, row: np.ndarray) -> np.ndarray:
        mine = np.ascontiguousarray(row, dtype=np.int64)
        out = np.empty((self.size, mine.size), dtype=np.int64)
        self.comm.Allgather(mine, out)  # buffer form: no pickling (about 5 us instead of 70 us for 2 ranks)
        return out

    def sendrecv(self, obj: Any, member: int) -> Any:
        return self.comm.sendrecv(obj, dest=member, sendtag=self.TAG, source=member, recvtag=self.TAG)

    def close(self) -> None:
        if self.owned and self.comm is not None:
            self.comm.Free()
            self.comm = None


def chain_blocks(m: int, size: int, costs: Sequence[float] | None = None) -> list[range]:
    """Split chain positions 0..m-1 into ``size`` contiguous non-empty blocks (needs 1 <= size <= m).

    Without ``costs`` the block lengths differ by at most one (the first ``m % size`` blocks are one
    longer).  With ``costs`` (the relative cost of a step of each chain, e.g. beta times the total
    operator weight) the largest block cost is as small as possible: the smallest achievable maximum T is
    found among the sums of contiguous runs, and blocks are filled from the left up to T while leaving one
    chain for each block still to come.  Deterministic: every team member computes the same blocks.
    """
    if not 1 <= size <= m:
        raise ValueError(f"a ladder of {m} chains cannot be split over {size} team members")
    if costs is None:
        base, extra = divmod(m, size)
        out, start = [], 0
        for r in range(size):
            n = base + (1 if r < extra else 0)
            out.append(range(start, start + n))
            start += n
        return out
    c = [float(x) for x in costs]
    if len(c) != m or any(not x > 0.0 for x in c):
        raise ValueError("chain costs must be positive, one per chain")

    def blocks_needed(limit: float) -> int:
        n, acc = 1, 0.0
        for x in c:
            if acc + x > limit:
                n, acc = n + 1, x
            else:
                acc += x
        return n

    candidates = sorted({sum(c[i:j]) for i in range(m) for j in range(i + 1, m + 1) if sum(c[i:j]) >= max(c)})
    lo, hi = 0, len(candidates) - 1
    while lo < hi:  # smallest limit that needs at most `size` blocks
        mid = (lo + hi) // 2
        if blocks_needed(candidates[mid]) <= size:
            hi = mid
        else:
            lo = mid + 1
    limit = candidates[lo]
    out, start = [], 0
    for r in range(size):
        stop, acc = start, 0.0
        last = m - (size - r - 1)  # leave one chain for every block still to come
        while stop < last and (stop == start or acc + c[stop] <= limit or r == size - 1):
            acc += c[stop]
            stop += 1
        out.append(range(start, stop))
        start = stop
    return out


def team_size(m: int, ranks: int) -> int:
    """How many of ``ranks`` processes a ladder of ``m`` chains uses: the fewest that reach the shortest
    possible ladder step, ``ceil(m / ceil(m / ranks))`` (every member then holds at most
    ``ceil(m / ranks)`` chains; e.g. 4 chains on 3 ranks use 2 ranks with 2 chains each, and leave one
    rank for other work)."""
    if m < 1 or ranks < 1:
        raise ValueError("a ladder needs at least one chain and one rank")
    per = -(-m // ranks)
    return -(-m // per)


def form_team(world: Any, ranks: Sequence[int], tag: int = 0) -> CommTeam:
    """The team of ``ranks`` (ranks of ``world``, member order = this order); every rank in ``ranks``
    must call this with the same arguments, and no other rank takes part."""
    group = world.Get_group()
    sub_group = group.Incl(list(ranks))
    try:
        comm = world.Create_group(sub_group, int(tag) % 32768)
    finally:
        sub_group.Free()
        group.Free()
    return CommTeam(comm)
