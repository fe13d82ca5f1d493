"""Precision targets: when the bins of a chain are good enough to stop measuring.

A target is a list of *goals* ``(observable, value, relative)``: the binning error sigma of the bin series of
``observable`` (plateau rule, :func:`qmc.chain.binning.error_estimate`) must satisfy

    sigma <= value                 (absolute goal, ``relative`` False)
    sigma <= value * |mean|        (relative goal, ``relative`` True; ``value`` is a fraction, 0.005 = 0.5 %)

and the plateau rule must have found its plateau (otherwise sigma is only a lower bound).  The target is
met at ``n`` bins when ``n >= MIN_TARGET_BINS`` and every goal holds for the first ``n`` bins.  The decision
depends on the bins alone -- never on timing -- so a chain stopped by its target holds exactly the first bins
of the same chain run without a target, however the run was chunked, interrupted or spread over ranks.

:class:`TargetWatch` follows one chain's bins (:meth:`TargetWatch.add`) and says whether its target is met
(:attr:`TargetWatch.met`), re-evaluating only when new bins came in.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np

from qmc.chain.binning import error_estimate
from qmc.config.schema import MIN_TARGET_BINS

__all__ = ["MIN_TARGET_BINS", "Goal", "GoalCheck", "bound_text", "goal_text", "check_goals", "TargetWatch"]

Goal = tuple[str, float, bool]
"""``(observable, value, relative)``; a relative ``value`` is a fraction of |mean| (0.005 for "0.5%")."""


@dataclass(frozen=True)
class GoalCheck:
    """One goal judged on a bin series: the series' ``mean`` and binning ``error``, the ``allowed`` error
    (``value`` or ``value * |mean|``), ``plateau`` (the plateau rule found its plateau) and ``met``."""

    name: str
    mean: float
    error: float
    allowed: float
    plateau: bool
    met: bool


def bound_text(goal: Goal) -> str:
    """The error a goal allows, as written: ``"0.0001"`` or ``"0.5%"``."""
    _, value, relative = goal
    return f"{value * 100:g}%" if relative else f"{value:g}"


def goal_text(goal: Goal) -> str:
    """``"energy <= 0.0001"`` or ``"m_stag2 <= 0.5%"``."""
    return f"{goal[0]} <= {bound_text(goal)}"


def check_goals(goals: Sequence[Goal], table: np.ndarray, bin_names: Sequence[str]) -> list[GoalCheck]:
    """Every goal judged on the bins ``table`` (float64[n, len(bin_names)]); KeyError for an observable
    that is not a column."""
    cols = {name: j for j, name in enumerate(bin_names)}
    out = []
    for name, value, relative in goals:
        est = error_estimate(table[:, cols[name]])
        allowed = value * abs(est.mean) if relative else value
        met = bool(est.plateau_ok and np.isfinite(est.error) and est.error <= allowed)
        out.append(GoalCheck(name, est.mean, est.error, float(allowed), bool(est.plateau_ok), met))
    return out


class TargetWatch:
    """The precision target of one chain, judged on its bins as they come in.

    ``goals`` may be empty (no target: :attr:`met` is always False).  Bins are fed with :meth:`add` (rows in
    ``bin_names`` order), or all at once with :meth:`reset` (a chain resumed from its task file).
    """

    def __init__(self, goals: Sequence[Goal], bin_names: Sequence[str],
                 rows: Iterable[np.ndarray] = ()) -> None:
        self.goals = tuple(goals)
        self.bin_names = tuple(bin_names)
        missing = [g[0] for g in self.goals if g[0] not in self.bin_names]
        if missing:
            raise KeyError(f"no bins of {', '.join(missing)} in this chain")
        self._cols = [self.bin_names.index(g[0]) for g in self.goals]
        self._buf = np.zeros((256, len(self.goals)), dtype=np.float64)  # goal columns; doubled when full
        self._n = 0
        self._judged = -1  # number of bins at the last evaluation
        self._met = False
        self.reset(rows)

    @property
    def active(self) -> bool:
        """Whether there is a target at all."""
        return bool(self.goals)

    @property
    def n_bins(self) -> int:
        return self._n

    def reset(self, rows: Iterable[np.ndarray]) -> None:
        """Forget the bins seen so far and take ``rows`` instead."""
        self._n, self._judged, self._met = 0, -1, False
        for row in rows:
            self.add(row)

    def add(self, row: np.ndarray) -> None:
        """One more completed bin."""
        if not self.goals:
            return
        if self._n == self._buf.shape[0]:
            self._buf = np.concatenate([self._buf, np.zeros_like(self._buf)])
        self._buf[self._n] = np.asarray(row, dtype=np.float64)[self._cols]
        self._n += 1

    def take(self, row: np.ndarray) -> bool:
        """:meth:`add` ``row``, then whether the target is met now (the stop test of a single chain)."""
        self.add(row)
        return self.met

    @property
    def met(self) -> bool:
        """Whether the target is met by the bins seen so far (at least :data:`MIN_TARGET_BINS` of them)."""
        n = self.n_bins
        if not self.goals or n < MIN_TARGET_BINS:
            return False
        if n != self._judged:
            self._judged = n
            self._met = all(c.met for c in self.checks())
        return self._met

    def checks(self) -> list[GoalCheck]:
        """Every goal judged on the bins seen so far."""
        if not self.goals:
            return []
        return check_goals(self.goals, self._buf[:self._n], [g[0] for g in self.goals])
