"""Named models: thin (lattice, terms) definitions on top of :mod:`models.lattice` and :mod:`models.terms`.

=====================  =========================================================================
``heisenberg``         ``H = J sum_<ij> S_i.S_j`` on any built-in lattice (class ``nn``)
``bilayer``            ``H = sum_intra S_i.S_j + g sum_rungs S_i.S_j`` on the L x L square bilayer
``columnar_dimer``     ``H = g sum_strong S_i.S_j + sum_weak S_i.S_j`` on the L x L square lattice,
                       strong bonds = x-bonds starting at even x (columnar pattern); J_strong = g,
                       J_weak = 1, so g = 1 is the uniform square lattice
``jq2``                ``H = J sum_<ij> S_i.S_j - Q sum P_ij P_kl`` over the two parallel bonds of every
                       plaquette in both orientations (2N projector-pair terms)
``jq3``                ``H = J sum_<ij> S_i.S_j - Q sum P P P`` over three parallel bonds stacked in a
                       column, both orientations (2N terms)
``ladder``             ``H = sum_legs S_i.S_j + g sum_rungs S_i.S_j`` on the L x W ladder (W legs)
=====================  =========================================================================

Each function returns ``(lattice, terms)`` for :func:`models.compile.compile_model`; couplings are in
energy units and are validated there.
"""

from __future__ import annotations

from collections.abc import Sequence

from .lattice import Lattice, build_lattice
from .terms import HeisenbergTerm, ProjectorProductTerm, Term

__all__ = ["heisenberg", "bilayer", "columnar_dimer", "jq2", "jq3", "ladder", "NAMED_MODELS"]


def heisenberg(kind: str, size: int | Sequence[int], J: float = 1.0, boundary: str = "periodic"
               ) -> tuple[Lattice, list[Term]]:
    """Nearest-neighbour Heisenberg model ``J sum_<ij> S_i.S_j``; group ``"nn"``."""
    return build_lattice(kind, size, boundary), [HeisenbergTerm("nn", J)]


def bilayer(L: int, g: float, boundary: str = "periodic") -> tuple[Lattice, list[Term]]:
    """Square bilayer, J_intra = 1 (group ``"intra"``), J_inter = g (group ``"inter"``)."""
    return build_lattice("bilayer", (L, L), boundary), [HeisenbergTerm("intra", 1.0),
                                                        HeisenbergTerm("inter", g)]


def columnar_dimer(L: int, g: float, boundary: str = "periodic") -> tuple[Lattice, list[Term]]:
    """Columnar dimerized square lattice, J_strong = g, J_weak = 1 (groups ``columnar-strong``/``-weak``)."""
    return build_lattice("square", (L, L), boundary), [HeisenbergTerm("columnar-strong", g),
                                                       HeisenbergTerm("columnar-weak", 1.0)]


def jq2(L: int, J: float, Q: float, boundary: str = "periodic") -> tuple[Lattice, list[Term]]:
    """J-Q2 model on the L x L square lattice; groups ``"nn"`` and ``"q2"``."""
    return build_lattice("square", (L, L), boundary), [HeisenbergTerm("nn", J),
                                                       ProjectorProductTerm("plaquette-pair", Q)]


def jq3(L: int, J: float, Q: float, boundary: str = "periodic") -> tuple[Lattice, list[Term]]:
    """J-Q3 model on the L x L square lattice; groups ``"nn"`` and ``"q3"``."""
    return build_lattice("square", (L, L), boundary), [HeisenbergTerm("nn", J),
                                                       ProjectorProductTerm("column-of-three", Q)]


def ladder(L: int, W: int, g: float, boundary: str = "periodic") -> tuple[Lattice, list[Term]]:
    """W-leg ladder, J_leg = 1 (group ``"leg"``), J_rung = g (group ``"rung"``); open across the legs."""
    return build_lattice("ladder", (L, W), boundary), [HeisenbergTerm("leg", 1.0), HeisenbergTerm("rung", g)]


NAMED_MODELS = {"heisenberg": heisenberg, "bilayer": bilayer, "columnar_dimer": columnar_dimer,
                "jq2": jq2, "jq3": jq3, "ladder": ladder}
