"""Exact reference results for the validation suite and the tests: exact diagonalization of small
clusters and the Bethe-ansatz ground-state energy of the Heisenberg chain.

Independent reference: every module of this package imports only numpy and scipy (and its sibling
modules), never the engine, ``models`` or any other part of ``qmc``.  Lattices, Hamiltonians and
observables are written out again here, so that an error in the simulation code cannot be repeated in
its reference.

Layout: ``hamiltonian`` (sparse full-space H), ``lattices`` (cluster geometry and translation groups),
``symmetry`` (group validation, state-level symmetry tables), ``blocks`` (block data types, Kubo kernel),
``response`` (Kubo integrals, operator averages, exact twist stiffness), ``spectrum`` (ExactSpectrum:
block construction and thermodynamics; finite-difference stiffness), ``xxz`` (XXZ bonds in fields),
``clusters`` (thermal observables of the chain, square J-Q2 and bilayer clusters used by ``qmc validate``),
``bethe`` (Bethe ansatz).
"""

from .bethe import chain_ground_state_energy
from .blocks import Block, Sector, as_betas, clean_operator, kubo_kernel
from .clusters import CLUSTER_KINDS, cluster_observables
from .hamiltonian import basis_states, build_hamiltonian, permute_states, popcount, sz_diagonal
from .lattices import (
    SymmetryGroup,
    bilayer_bonds,
    bilayer_translations,
    chain_bonds,
    chain_translations,
    q2_plaquette_pairs,
    q3_columns,
    square_bonds,
    square_translations,
    staggered_signs_bilayer,
    staggered_signs_chain,
    staggered_signs_square,
)
from .response import ResponseMixin
from .spectrum import ExactSpectrum, stiffness_by_twist
from .symmetry import (
    PermutationGroup,
    SymmetryTable,
    operator_component,
    permute_operator,
    symmetry_table,
    validate_group,
)
from .xxz import xxz_hamiltonian, xxz_observables

__all__ = [
    "Block",
    "CLUSTER_KINDS",
    "ExactSpectrum",
    "PermutationGroup",
    "ResponseMixin",
    "Sector",
    "SymmetryGroup",
    "SymmetryTable",
    "as_betas",
    "basis_states",
    "bilayer_bonds",
    "bilayer_translations",
    "build_hamiltonian",
    "chain_bonds",
    "chain_ground_state_energy",
    "xxz_hamiltonian",
    "xxz_observables",
    "chain_translations",
    "clean_operator",
    "cluster_observables",
    "kubo_kernel",
    "operator_component",
    "permute_operator",
    "permute_states",
    "popcount",
    "q2_plaquette_pairs",
    "q3_columns",
    "square_bonds",
    "square_translations",
    "staggered_signs_bilayer",
    "staggered_signs_chain",
    "staggered_signs_square",
    "stiffness_by_twist",
    "symmetry_table",
    "sz_diagonal",
    "validate_group",
]
