"""The messages of the MPI task farm, in one place: their kinds, their fields, how they travel.

Rank 0 (the coordinator, :mod:`qmc.mpi.coordinator`) and the other ranks (workers, :mod:`qmc.mpi.worker`)
exchange these messages and nothing else (a ladder's team adds its own collective calls on its own
communicator, :mod:`qmc.exchange.meeting`):

=============  ======================  ===========================================================
kind           direction, tag          meaning
=============  ======================  ===========================================================
(set-up)       0 -> all, ``bcast``     :class:`Setup`: run directory, configuration, deadline; or
                                       that the run will not start
REQUEST        worker -> 0, TO_RANK0   :class:`Request`: give me a unit (``prefetch``: while I run one)
DONE           worker -> 0, TO_RANK0   :class:`Done`: outcomes of a unit, and the worker's log lines
UNSTARTED      worker -> 0, TO_RANK0   :class:`Unstarted`: a prefetched unit handed back unstarted
                                       (taken back, or the run stops)
PROGRESS       worker -> 0, TO_RANK0   :class:`Progress`: a unit's steps and bins (per task); the first
                                       one of a unit says it has started
UNIT           0 -> worker, WORK       :class:`Assign`: run this unit
TEAM           0 -> worker, WORK       :class:`JoinTeam`: run your block of this ladder with these ranks
NO_UNIT        0 -> worker, WORK       :class:`NoUnit`: no unit for a prefetch request
FINISH         0 -> worker, WORK       :class:`Finish`: no more work, exit
STOP           0 -> worker, CONTROL    :class:`Stop`: checkpoint the running unit and stop
TAKE_BACK      0 -> worker, CONTROL    :class:`TakeBack`: hand back this prefetched unit if not started
=============  ======================  ===========================================================

A worker reads CONTROL messages between two chunks of its running unit and before it starts a prefetched
one; WORK messages only when it has no unit to run.

On the wire a message is a tuple ``(kind, *fields)`` with plain values (outcomes as dicts, tasks as
pickled :class:`~qmc.config.parser.Task` objects), made by :func:`encode` and read by :func:`decode`; an
unknown kind is a :class:`ProtocolError`.  :class:`Channel` is the only user of the communicator's
point-to-point calls: every send is an ``isend`` (rank 0 never blocks on a busy worker), every wait is an
``Iprobe`` poll.
"""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Iterator
from dataclasses import dataclass
from enum import IntEnum
from typing import Any

from qmc.config.parser import Task
from qmc.run.outcome import TaskOutcome

__all__ = [
    "Kind", "Tag", "Setup", "Request", "Done", "Unstarted", "Progress", "Assign", "JoinTeam", "NoUnit",
    "Finish", "Stop", "TakeBack",
    "Message", "ProtocolError", "encode", "decode", "tag_of", "Channel", "POLL_MIN", "POLL_MAX", "poll_sleep",
]

POLL_MIN, POLL_MAX = 0.0005, 0.02
"""Seconds between two polls while waiting (growing geometrically from the first to the second): idle
ranks do not spin, and signals are handled promptly."""


def poll_sleep(wait: float) -> float:
    """Sleep ``wait`` seconds; returns the next wait."""
    time.sleep(wait)
    return min(wait * 1.5, POLL_MAX)


class Kind(IntEnum):
    REQUEST = 1
    DONE = 2
    UNSTARTED = 3
    UNIT = 4
    TEAM = 5
    NO_UNIT = 6
    FINISH = 7
    STOP = 8
    PROGRESS = 9
    TAKE_BACK = 10


class Tag(IntEnum):
    """MPI tags: one per direction and purpose, so that a poll looks only at what it waits for."""

    WORK = 11
    CONTROL = 12
    TO_RANK0 = 13


class ProtocolError(RuntimeError):
    """A message this version does not understand."""


@dataclass(frozen=True)
class Setup:
    """Broadcast by rank 0 before any work; ``ok`` False when the run will not start (rank 0 says why);
    a worker reports a running unit's progress at most every ``progress_seconds``."""

    ok: bool
    run_dir: str = ""
    config_text: str = ""
    fingerprint: str = ""
    deadline: float | None = None
    progress_seconds: float = 2.0


@dataclass(frozen=True)
class Request:
    prefetch: bool


@dataclass(frozen=True)
class Done:
    unit: int
    outcomes: list[TaskOutcome]
    log_lines: list[tuple[int, str]]


@dataclass(frozen=True)
class Unstarted:
    unit: int


@dataclass(frozen=True)
class Progress:
    unit: int
    steps_done: int
    bins_done: int


@dataclass(frozen=True)
class TakeBack:
    unit: int


@dataclass(frozen=True)
class Assign:
    unit: int
    tasks: list[Task]


@dataclass(frozen=True)
class JoinTeam:
    unit: int
    tasks: list[Task]
    ranks: list[int]


@dataclass(frozen=True)
class NoUnit:
    pass


@dataclass(frozen=True)
class Finish:
    pass


@dataclass(frozen=True)
class Stop:
    reason: str


Message = Request | Done | Unstarted | Progress | Assign | JoinTeam | NoUnit | Finish | Stop | TakeBack

_KIND: dict[type, Kind] = {Request: Kind.REQUEST, Done: Kind.DONE, Unstarted: Kind.UNSTARTED,
                           Progress: Kind.PROGRESS, Assign: Kind.UNIT, JoinTeam: Kind.TEAM,
                           NoUnit: Kind.NO_UNIT, Finish: Kind.FINISH, Stop: Kind.STOP,
                           TakeBack: Kind.TAKE_BACK}
_CLASS = {k: c for c, k in _KIND.items()}
_TAG = {Kind.REQUEST: Tag.TO_RANK0, Kind.DONE: Tag.TO_RANK0, Kind.UNSTARTED: Tag.TO_RANK0,
        Kind.PROGRESS: Tag.TO_RANK0, Kind.UNIT: Tag.WORK, Kind.TEAM: Tag.WORK, Kind.NO_UNIT: Tag.WORK,
        Kind.FINISH: Tag.WORK, Kind.STOP: Tag.CONTROL, Kind.TAKE_BACK: Tag.CONTROL}


def encode(msg: Message) -> tuple:
    """``(kind, *fields)`` of a message, outcomes as plain dicts."""
    kind = _KIND[type(msg)]
    if isinstance(msg, Done):
        return (int(kind), msg.unit, [dict(vars(o)) for o in msg.outcomes], list(msg.log_lines))
    return (int(kind), *(getattr(msg, f.name) for f in dataclasses.fields(msg)))


def decode(wire: Any) -> Message:
    """The message of a wire tuple; ProtocolError for anything else."""
    try:
        kind = Kind(wire[0])
        if kind is Kind.DONE:
            return Done(int(wire[1]), [TaskOutcome(**d) for d in wire[2]], [tuple(x) for x in wire[3]])
        return _CLASS[kind](*wire[1:])
    except (TypeError, ValueError, IndexError, KeyError) as exc:
        raise ProtocolError(f"not a farm message: {wire!r:.120} ({exc})") from None


def tag_of(msg: Message) -> Tag:
    """The tag a message travels with."""
    return _TAG[_KIND[type(msg)]]


class Channel:
    """The farm's messages over an mpi4py communicator (pickled tuples)."""

    def __init__(self, comm: Any) -> None:
        self.comm = comm
        self._pending: list[Any] = []

    def send(self, msg: Message, dest: int) -> None:
        """Send without waiting (``isend``); the request is kept until :meth:`flush`."""
        self._pending.append(self.comm.isend(encode(msg), dest=dest, tag=int(tag_of(msg))))
        if len(self._pending) > 64:
            self._pending = [r for r in self._pending if not r.test()[0]]

    def waiting(self, source: int, tag: Tag) -> bool:
        """Whether a message with ``tag`` from ``source`` can be received now (``Iprobe``)."""
        return bool(self.comm.Iprobe(source=source, tag=int(tag)))

    def receive(self, source: int, tag: Tag) -> Message:
        """The next message with ``tag`` from ``source`` (blocks until it is there)."""
        return decode(self.comm.recv(source=source, tag=int(tag)))

    def incoming(self) -> Iterator[tuple[int, Message]]:
        """Rank 0: every message to it that has arrived, with its source rank, oldest first per source."""
        from mpi4py import MPI

        status = MPI.Status()
        while self.comm.Iprobe(source=MPI.ANY_SOURCE, tag=int(Tag.TO_RANK0), status=status):
            src = status.Get_source()
            yield src, decode(self.comm.recv(source=src, tag=int(Tag.TO_RANK0)))

    def flush(self) -> None:
        """Wait until every message sent has left."""
        for r in self._pending:
            r.wait()
        self._pending = []

    # ------------------------------------------------------------------------------------------ set-up
    def announce(self, setup: Setup) -> None:
        """Rank 0: broadcast the set-up (collective)."""
        self.comm.bcast(dataclasses.asdict(setup), root=0)

    def await_setup(self) -> Setup:
        """Other ranks: the set-up broadcast by rank 0 (collective)."""
        return Setup(**self.comm.bcast(None, root=0))
