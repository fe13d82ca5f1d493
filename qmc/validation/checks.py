"""One compared quantity of the validation suite and its pass rule.

A check compares a simulation result ``value`` (statistical error ``error``, one standard deviation, from
binning / jackknife / bootstrap) with a :class:`~qmc.validation.references.Reference`.  Its systematic
allowance ``sys`` combines in quadrature the stated allowance of the method (finite-size extrapolation,
crossing bracket, residual temperature) and the reference's own uncertainty:

    sys = sqrt(systematic^2 + reference.error^2),   sigma = sqrt(error^2 + sys^2),
    deviation = |value - reference.value| / sigma,   PASS  <=>  deviation <= SIGMAS = 4.

One-sided checks compare with a bound instead, deviation = (value - reference.value) / sigma (signed):
``side = +1`` asks for a significant excess (PASS <=> deviation >= SIGMAS; e.g. correlations that grow
faster than short-ranged ones), ``side = -1`` for no significant excess (PASS <=> deviation <= SIGMAS;
e.g. correlations that do not grow).  A check whose value or error is not finite, or whose sigma is zero,
fails.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .references import Reference

__all__ = ["SIGMAS", "Check", "failed_check"]

SIGMAS = 4.0
"""A check passes when the deviation is at most this many combined error bars."""


@dataclass(frozen=True)
class Check:
    """Result of one comparison; ``note`` explains the method (printed under the table)."""

    case: str
    value: float
    error: float
    reference: Reference
    systematic: float = 0.0
    note: str = ""
    side: int = 0

    @property
    def sys(self) -> float:
        """Systematic allowance including the reference uncertainty (quadrature sum)."""
        return math.hypot(self.systematic, self.reference.error)

    @property
    def sigma(self) -> float:
        """Combined error bar sqrt(error^2 + sys^2)."""
        return math.hypot(self.error, self.sys)

    @property
    def deviation(self) -> float:
        """|value - reference| (one-sided: value - reference) in units of the combined error bar (NaN when
        undefined)."""
        diff = self.value - self.reference.value
        if not self.side:
            diff = abs(diff)
        if not (math.isfinite(diff) and math.isfinite(self.sigma)):
            return float("nan")
        if self.sigma == 0.0:
            return 0.0 if diff == 0.0 else math.copysign(float("inf"), diff)
        return diff / self.sigma

    @property
    def passed(self) -> bool:
        """True when the deviation is finite and at most :data:`SIGMAS` (``side = +1``: at least)."""
        if not (math.isfinite(self.value) and math.isfinite(self.error) and self.sigma > 0.0):
            return False
        return self.deviation >= SIGMAS if self.side > 0 else self.deviation <= SIGMAS


def failed_check(case: str, reference: Reference, reason: str) -> Check:
    """A failing placeholder row for a case that could not be evaluated (``reason`` goes to the note)."""
    nan = float("nan")
    return Check(case, nan, nan, reference, 0.0, reason)
