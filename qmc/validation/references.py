"""Reference values of the validation suite, each with its source.

A :class:`Reference` is a value, its own one-standard-deviation uncertainty (0 for an exact result) and a
citation printed in the table.  Published numbers below are the values as quoted in the literature,
recalled from memory (not re-read from the papers); exact numbers are either closed forms or are computed
at run time by the independent reference in :mod:`qmc.validation.exact` (numpy/scipy only).

Energies are per site in units of the nearest-neighbour exchange J (H = J sum S_i.S_j, k_B = 1).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = [
    "BETHE_SOURCE",
    "BILAYER_CRITICAL_COUPLING",
    "CHAIN_FINITE_SIZE_SOURCE",
    "CHAIN_GROUND_STATE_ENERGY",
    "ED_SOURCE",
    "Reference",
    "SQUARE_GROUND_STATE_ENERGY",
    "SQUARE_STAGGERED_MAGNETIZATION",
    "SUN_NEEL_VBS_SOURCE",
    "computed",
    "short_ranged",
]


@dataclass(frozen=True)
class Reference:
    """A reference ``value`` with its own uncertainty ``error`` (0 if exact) and its ``source``."""

    value: float
    error: float
    source: str

    def __post_init__(self) -> None:
        if not self.source.strip():
            raise ValueError("a reference needs a source")
        if not self.error >= 0.0:
            raise ValueError(f"reference uncertainty must be >= 0, got {self.error}")


ED_SOURCE = "exact diagonalization (qmc.validation.exact)"
"""Source label of values computed on the fly by the independent exact diagonalization."""

BETHE_SOURCE = "Bethe ansatz: Bethe, Z. Phys. 71, 205 (1931)"
"""Source label of finite-chain ground-state energies from :mod:`qmc.validation.exact.bethe`."""

CHAIN_FINITE_SIZE_SOURCE = (
    "Affleck, Gepner, Schulz and Ziman, J. Phys. A 22, 511 (1989); "
    "Blote, Cardy and Nightingale, PRL 56, 742 (1986)"
)
"""Leading finite-size correction -a/L^2 of the periodic chain's ground-state energy per site (conformal
field theory, central charge c = 1: a = pi v c / 6 with v = pi J / 2), with multiplicative logarithmic
corrections 1 + O(1/ln^3 L) from the marginal operator (from memory)."""

# e_0 = 1/4 - ln 2 = -0.4431471805599453 J per site, exact (Hulthen, Ark. Mat. Astron. Fys. 26A, 1 (1938)).
CHAIN_GROUND_STATE_ENERGY = Reference(0.25 - math.log(2.0), 0.0,
                                      "Hulthen, Ark. Mat. Astron. Fys. 26A, 1 (1938)")

# Square-lattice Heisenberg antiferromagnet, ground-state energy per site -0.669437(5) J
# (Sandvik, Phys. Rev. B 56, 11678 (1997)); value and error bar from memory.
SQUARE_GROUND_STATE_ENERGY = Reference(-0.669437, 0.000005, "Sandvik, Phys. Rev. B 56, 11678 (1997)")

# Square-lattice Heisenberg antiferromagnet, staggered magnetization m_s = 0.30743(1)
# (Sandvik and Evertz, Phys. Rev. B 82, 024407 (2010)); value and error bar from memory.
SQUARE_STAGGERED_MAGNETIZATION = Reference(0.30743, 0.00001,
                                           "Sandvik and Evertz, Phys. Rev. B 82, 024407 (2010)")

# Square-lattice bilayer Heisenberg model, quantum critical ratio J_inter/J_intra = 2.5220(1)
# (Wang, Beach and Sandvik, Phys. Rev. B 73, 014431 (2006)); value and error bar from memory.
BILAYER_CRITICAL_COUPLING = Reference(2.5220, 0.0001,
                                      "Wang, Beach and Sandvik, Phys. Rev. B 73, 014431 (2006)")


SUN_NEEL_VBS_SOURCE = ("Harada, Kawashima and Troyer, PRL 90, 117203 (2003); Beach, Alet, Mambrini and "
                       "Capponi, PRB 80, 184401 (2009)")
"""SU(N) Heisenberg model on the square lattice (fundamental representation on A, conjugate on B): Neel order
for N <= 4, columnar valence-bond order for N >= 5.  Harada et al. (citation from memory) found the two
phases; Beach et al. (title and the transition at N_c = 4.57(5), treating N as continuous, checked in their
arXiv version 0812.3657; journal reference from memory) located the transition between them."""


def short_ranged(source: str) -> Reference:
    """The growth factor of L^2 x (order parameter)^2 between L and 2L for correlations that are short-ranged:
    1 (the structure factor saturates); an ordered phase has 4, a critical point 2^(1 - eta)."""
    return Reference(1.0, 0.0, source)


def computed(value: float, source: str = ED_SOURCE) -> Reference:
    """An exact reference value computed at run time (uncertainty 0), e.g. by exact diagonalization."""
    return Reference(float(value), 0.0, source)
