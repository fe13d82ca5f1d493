"""Progress of the validation suite on standard error: jobs done, share of the work, elapsed time, ETA.

Work is measured in the jobs' estimated costs (:mod:`qmc.validation.jobs`); with ``f`` the estimated share
of the work done after ``t`` seconds of wall time,

    ETA = t (1 - f) / f,

which corrects the estimates' overall scale (machine speed, number of workers) by the measured rate.  No
ETA is shown before ``MIN_SHARE`` of the work is done (start-up of the workers would dominate it).
On a terminal the line is redrawn in place (at most every ``min_interval`` seconds); otherwise a plain
line is printed when a job finishes or every ``plain_interval`` seconds.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Iterable
from typing import TextIO

from qmc.run.progress import LineDisplay, format_duration

__all__ = ["MIN_SHARE", "SuiteProgress"]

MIN_SHARE = 0.02


class SuiteProgress(LineDisplay):
    """Progress display over a set of jobs given as ``(key, cost)`` pairs."""

    def __init__(self, jobs: Iterable[tuple[str, float]], stream: TextIO | None = None, *,
                 min_interval: float = 0.5, plain_interval: float = 20.0,
                 clock: Callable[[], float] = time.monotonic, tty: bool | None = None) -> None:
        super().__init__(stream, tty)
        self.cost = {key: max(float(c), 1e-9) for key, c in jobs}
        self.total = sum(self.cost.values())
        self.fraction = dict.fromkeys(self.cost, 0.0)
        self.finished: set[str] = set()
        self.clock = clock
        self.t0 = clock()
        self.min_interval = min_interval
        self.plain_interval = plain_interval
        self._last = -1e18

    @property
    def share_done(self) -> float:
        """Estimated share of the work done, in [0, 1]."""
        if self.total <= 0:
            return 1.0
        return sum(self.cost[k] * f for k, f in self.fraction.items()) / self.total

    def eta(self) -> float | None:
        """Seconds left (None before ``MIN_SHARE`` of the work is done)."""
        f, t = self.share_done, self.clock() - self.t0
        if f < MIN_SHARE or t <= 0.0:
            return None
        return t * (1.0 - f) / f

    def line(self) -> str:
        elapsed = self.clock() - self.t0
        return (f"validate: {len(self.finished)}/{len(self.cost)} jobs done, {100 * self.share_done:3.0f}% "
                f"of the work, elapsed {format_duration(elapsed)}, ETA {format_duration(self.eta())}")

    def update(self, key: str, fraction: float) -> None:
        """Job ``key`` has done ``fraction`` of its work."""
        if key in self.fraction:
            self.fraction[key] = min(max(float(fraction), self.fraction[key]), 1.0)
        self._draw()

    def finish(self, key: str) -> None:
        """Job ``key`` is over (done or failed)."""
        if key in self.fraction:
            self.fraction[key] = 1.0
            self.finished.add(key)
        self._draw(force=not self.tty)

    def _draw(self, force: bool = False) -> None:
        now = self.clock()
        if not force and now - self._last < (self.min_interval if self.tty else self.plain_interval):
            return
        self._last = now
        text = self.line()
        if self.tty:
            self._overwrite(text)
        else:
            self.stream.write(text + "\n")
        self.stream.flush()
