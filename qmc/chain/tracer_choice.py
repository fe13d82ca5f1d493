"""Which path a chain's loop update takes: one tracer, or several interleaved, chosen by timing both.

The projector kind builds its loops either with one tracer (one loop after the other) or with up to 32
tracers taking turns, so that several cache misses are in flight (:mod:`qmc.engine.interleaved`).  The two
give the same Markov chain bit for bit (tests/engine/test_interleaved_loops.py), so the choice is about
speed alone, and the faster one depends on the vertex list against the caches, on the loops and on the
machine.  Measured on the 2-core development machine (CPU time per step with all measurements, 32x32 at
beta = 32 and neighbours, see CHANGELOG): the long loops of the square-lattice antiferromagnet gain from
interleaving from about 16 000 bond vertices on (3-10% less time per step at L = 24 and 32), the
many short loops of the J-Q2 model near its transition lose 10-15% below about 100 000 and gain above
200 000.  A fixed size threshold is therefore wrong for some model on every machine.  The rule:

- at most :data:`TRIAL_FROM` bond vertices: one tracer (interleaving never paid there);
- more than :data:`TRIAL_UP_TO`: interleaved (it paid on every model measured, 1.1x to 3x);
- in between, the chain times both on its own steps once it is due (half-way through the warm-up, when the
  string has its length, or at once for a chain continued past its warm-up): :data:`TRIAL_ROUNDS` blocks of
  :data:`TRIAL_STEPS` steps each way, alternating, and keeps the path whose fastest block took the least
  CPU time per step.

The setting is ``vertices.interleave_above[0]`` (:mod:`qmc.engine.records`): the loop update interleaves
when the list has more bond vertices than that.  It is not part of the chain's state (checkpoints do not
carry it; a continued chain times again), and the trial blocks are ordinary steps of the chain.
"""

from __future__ import annotations

import time
from collections.abc import Callable

import numpy as np

from qmc.engine.interleaved import INTERLEAVE_FROM_VERTICES

__all__ = ["TracerChoice", "SINGLE", "INTERLEAVED", "TRIAL_FROM", "TRIAL_UP_TO", "TRIAL_STEPS",
           "TRIAL_ROUNDS"]

SINGLE = 1 << 62
"""``interleave_above`` for one tracer at every size."""
INTERLEAVED = 0
"""``interleave_above`` for interleaved tracers at every size (where ``links`` has room for them)."""
TRIAL_FROM = 8192
"""Bond vertices up to which one tracer is kept without a trial."""
TRIAL_UP_TO = 1 << 18
"""Bond vertices from which interleaved tracers are taken without a trial."""
TRIAL_STEPS = 4
"""Steps per timed block."""
TRIAL_ROUNDS = 3
"""Timed blocks per path."""


class TracerChoice:
    """The loop-update path of one chain: the size rule of :mod:`qmc.engine.interleaved` until the chain
    is due, then the rule of the module docstring.  ``setting`` is the current ``interleave_above``."""

    def __init__(self, enabled: bool) -> None:
        self.setting = INTERLEAVE_FROM_VERTICES
        self.settled = not enabled
        self.per_step: dict[int, list[float]] = {SINGLE: [], INTERLEAVED: []}

    def settle_by_size(self, n_vertices: int) -> bool:
        """Outside the trial window: take the path the size gives and return True; else False."""
        if n_vertices <= TRIAL_FROM:
            self._settle(SINGLE)
        elif n_vertices > TRIAL_UP_TO:
            self._settle(INTERLEAVED)
        return self.settled

    def run(self, call: Callable[[int], int], n_steps: int, setting: np.ndarray, due_in: int = 0,
            count: Callable[[], int] | None = None) -> int:
        """Run ``n_steps`` steps by ``call(k) -> steps done`` (which may stop early; then so does this),
        timing blocks of each path until the choice is made; ``setting`` is the chain's ``interleave_above``
        array.  The choice is due after ``due_in`` more steps; ``count()`` gives the bond vertices then (the
        size rule; without it every size is timed).  Returns the steps done."""
        if self.settled:
            return call(n_steps)
        done = 0
        if due_in > 0:
            want = min(n_steps, due_in)
            done = call(want)
            if done < want or done == n_steps:
                return done
        if count is not None and self.settle_by_size(count()):
            setting[0] = self.setting
            return done + call(n_steps - done)
        while done < n_steps and not self.settled:
            path = self._next_path()
            setting[0] = path
            want = min(TRIAL_STEPS, n_steps - done)
            t0 = time.thread_time()  # this thread's CPU time: a heartbeat thread does not count
            got = call(want)
            seconds = time.thread_time() - t0
            if got > 0:
                self.per_step[path].append(seconds / got)
            done += got
            if self._complete():
                best = {p: min(t) for p, t in self.per_step.items()}
                self._settle(min(best, key=lambda p: (best[p], p != SINGLE)))  # a tie keeps one tracer
            setting[0] = self.setting  # the choice, or the size rule until it is made
            if got < want:  # the kernel stopped early (the cutoff must grow first)
                return done
        if done < n_steps:
            done += call(n_steps - done)
        return done

    def fix(self, setting: int) -> None:
        """Use ``setting`` from now on, without timing."""
        self._settle(int(setting))

    def _next_path(self) -> int:
        """The path with fewer timed blocks (one tracer first)."""
        return SINGLE if len(self.per_step[SINGLE]) <= len(self.per_step[INTERLEAVED]) else INTERLEAVED

    def _complete(self) -> bool:
        return all(len(t) >= TRIAL_ROUNDS for t in self.per_step.values())

    def _settle(self, setting: int) -> None:
        self.setting = setting
        self.settled = True
