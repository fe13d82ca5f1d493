"""User-level Hamiltonian terms (energy units).

``HeisenbergTerm(bonds, J)``               ``+J sum_{<ij> in class} S_i.S_j`` (S = 1/2 spins only)
``ProjectorTerm(bonds, J)``                ``-J sum_{<ij> in class} P_ij``
``ProjectorProductTerm(shape, Q)``         ``-Q sum_{placements} prod_{a=1..k} P_{i_a j_a}``, k = 1, 2, 3

``XXZTerm(bonds, J, delta)``               ``+J sum_{<ij> in class} (S^x S^x + S^y S^y + delta S^z S^z)``
                                           (S = 1/2 spins only)
``FieldTerm(h)``                           ``-h sum_i S^z_i``; ``staggered=True``: ``-h sum_i phi_i S^z_i``
                                           (phi_i = +1 on sublattice A, -1 on B; S = 1/2 spins only)

``P_ij`` is the singlet projector of the bond: for S = 1/2 spins (two colours) ``P_ij = 1/4 - S_i.S_j``,
so ``-J P_ij = J S_i.S_j - J/4``; for N colours per site (SU(N), fundamental representation on
sublattice A, conjugate on B) ``P_ij = |s><s|`` with ``|s> = N^(-1/2) sum_a |a a>`` in the basis where site
j of B carries the conjugate colour (see :mod:`models.compile`, argument ``colours``).

``bonds`` names a bond class of the lattice (see :mod:`models.lattice`); ``shape`` is a name from
:data:`models.shapes.SHAPES` or a list of bonds given as cell offsets (see :mod:`models.shapes`); with
``symmetrize`` the shape is also placed in its rotated orientations.  ``name`` labels the term's energy
group (default: the bond class name, or ``"q<k>"`` for a k-bond projector product).  Terms are plain data;
:func:`models.compile.compile_model` validates them against a lattice.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

__all__ = ["FieldTerm", "HeisenbergTerm", "ProjectorTerm", "ProjectorProductTerm", "Term", "XXZTerm"]


@dataclass(frozen=True)
class HeisenbergTerm:
    """``+J S_i.S_j`` on every bond of the lattice class ``bonds`` (J = ``coupling`` > 0, or 0 = off)."""

    bonds: str
    coupling: float
    name: str | None = None


@dataclass(frozen=True)
class ProjectorTerm:
    """``-J P_ij`` on every bond of the lattice class ``bonds`` (J = ``coupling`` >= 0, 0 = off), any N."""

    bonds: str
    coupling: float
    name: str | None = None


@dataclass(frozen=True)
class ProjectorProductTerm:
    """``-Q prod P`` on every placement of ``shape`` (Q = ``coupling`` >= 0)."""

    shape: str | Sequence
    coupling: float
    symmetrize: bool = True
    name: str | None = None

    def __post_init__(self) -> None:
        if not isinstance(self.shape, str):  # freeze nested lists/arrays so the term stays hashable
            object.__setattr__(self, "shape", _freeze(self.shape))


@dataclass(frozen=True)
class XXZTerm:
    """``+J (S^x S^x + S^y S^y + delta S^z S^z)`` on every bond of ``bonds``: J > 0 (any delta) on bonds
    joining opposite sublattices, J < 0 (ferromagnetic in the xy plane) on any bonds that leave the model
    sign-free; 0 switches the term off.  Simulated by directed loops (:mod:`models.directed`)."""

    bonds: str
    coupling: float
    delta: float = 1.0
    name: str | None = None


@dataclass(frozen=True)
class FieldTerm:
    """``-h sum_i S^z_i`` (``staggered``: ``-h sum_i phi_i S^z_i``) on every site; h of either sign."""

    coupling: float
    staggered: bool = False
    name: str | None = None


def _freeze(value):
    if hasattr(value, "tolist"):
        value = value.tolist()
    if isinstance(value, list | tuple):
        return tuple(_freeze(v) for v in value)
    return value


Term = HeisenbergTerm | ProjectorTerm | ProjectorProductTerm | XXZTerm | FieldTerm
