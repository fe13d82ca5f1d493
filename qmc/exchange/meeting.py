"""What the members of a ladder's team say to each other: the ladder protocol, in one place.

The members of a team (:mod:`qmc.exchange.team`) each advance their block of the ladder's chains and talk
only here:

* :func:`agree` -- before the chains run: every member runs the same step (reading its task files,
  building its chains) and learns the others' results; an exception on any member is raised on all.
* :func:`meet` -- at every synchronisation point (the end of the warm-up and every exchange point).  Each
  member sends one int64 row (``allgather`` of a fixed-size buffer, no pickling)::

      [0] a chain of this member failed   [1] its vote asks to stop   [2] its vote carries an error
      [3] its vote asks for a checkpoint  [4] the largest cutoff among its chains
      [5] the precision target of all its chains is met (by their bins at this step)
      [6 + i * G + g] operator count of term group g in the chain at position i (0 where not local)

  Texts (the failure message, the stop reason, the vote's error) follow in a second, pickled
  ``allgather`` only when some member raised flag 0, 1 or 2, which is rare.  A failure on any member
  raises :class:`LadderError` on every member at the same step.
* :func:`trade_configuration` -- an accepted swap between positions held by two members: each sends its
  configuration and receives the partner's (``sendrecv``).

A member's :class:`Vote` is cast by the runner before its last chunk of steps ahead of a meeting; the
meeting returns every member's vote, so all members stop and write checkpoints at the same step.
"""

from __future__ import annotations

import traceback
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from qmc.errors import UserError
from qmc.exchange.team import LadderTeam

__all__ = ["LadderError", "Vote", "Meeting", "ROW_HEAD", "agree", "meet", "trade_configuration"]

ROW_HEAD = 6
"""Entries of a meeting row before the operator counts: four flags, the largest local cutoff, the target
flag."""


class LadderError(RuntimeError):
    """A chain of the ladder failed on some team member; raised on every member at the same step."""


@dataclass(frozen=True)
class Vote:
    """What a member asks for at the next meeting: ``stop`` (a reason, "" for none), ``error`` (a message
    the member could not keep to itself, e.g. a failed checkpoint write), ``write`` (a checkpoint) and
    ``target`` (the precision target of all its chains is met: filled in by the ladder at the meeting itself,
    from the bins at that step, so that the decision never depends on when the vote was cast)."""

    stop: str = ""
    error: str | None = None
    write: bool = False
    target: bool = False


@dataclass
class Meeting:
    """The outcome of :func:`meet`: every member's vote (member order), the largest cutoff of the whole
    ladder, and the operator counts of every position, int64[M, G]."""

    votes: list[Vote]
    top_cutoff: int
    counts: np.ndarray


def agree(team: LadderTeam, fn: Callable[[], Any]) -> list[Any]:
    """Run ``fn()`` here, share its result with the other members and return all results (member order);
    an exception on any member is raised on every member (a UserError as such, else a LadderError)."""
    try:
        mine: tuple[Any, Any] = (None, fn())
    except UserError as exc:
        mine = (("user", exc.message, exc.where), None)
    except Exception as exc:
        mine = (("other", f"{type(exc).__name__}: {exc}", traceback.format_exc()), None)
    got = team.allgather(mine)
    for err, _ in got:
        if err is not None:
            kind, text, extra = err
            if kind == "user":
                raise UserError(text, extra)
            raise LadderError(text)
    return [r for _, r in got]


def meet(team: LadderTeam, error: str | None, vote: Vote | None, cutoff: int, counts: np.ndarray) -> Meeting:
    """One meeting of the team (collective): share failures, votes, cutoffs and operator counts.

    ``error`` is this member's chain failure (None if its chains are fine), ``vote`` its latest vote (None:
    no wishes), ``cutoff`` the largest cutoff of its chains, ``counts`` int64[M, G] with the operator
    counts of its own positions and zeros elsewhere (ignored when ``error`` is set).
    """
    vote = vote if vote is not None else Vote()
    m, n_groups = counts.shape
    row = np.zeros(ROW_HEAD + m * n_groups, dtype=np.int64)
    row[0] = error is not None
    row[1] = bool(vote.stop)
    row[2] = bool(vote.error)
    row[3] = bool(vote.write)
    row[4] = cutoff
    row[5] = bool(vote.target)
    if error is None:
        row[ROW_HEAD:] = counts.reshape(-1)
    got = team.allgather_array(row)
    if got[:, 0:3].any():  # some member has something to say in words
        texts = team.allgather((error, vote))
        errors = [e for e, _ in texts if e is not None]
        if errors:
            raise LadderError(errors[0])
        votes = [v if v is not None else Vote() for _, v in texts]
    else:
        votes = [Vote(write=bool(r[3]), target=bool(r[5])) for r in got]
    return Meeting(votes, int(got[:, 4].max()), got[:, ROW_HEAD:].sum(axis=0).reshape(m, n_groups))


def trade_configuration(team: LadderTeam, conf: dict[str, Any], partner: int) -> dict[str, Any]:
    """Send this member's configuration to ``partner`` and return the partner's (both call it)."""
    return team.sendrecv(conf, partner)
