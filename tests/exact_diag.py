"""Re-export shim of the exact-diagonalization reference, which moved to :mod:`qmc.validation.exact`
(independent of the engine: numpy/scipy only) so that ``qmc validate`` can use it at run time.

Tests keep using ``import exact_diag`` (``tests/`` is on ``sys.path`` through ``conftest.py``).
"""

from qmc.validation.exact import (  # noqa: F401
    Block,
    ExactSpectrum,
    PermutationGroup,
    ResponseMixin,
    Sector,
    SymmetryGroup,
    SymmetryTable,
    as_betas,
    basis_states,
    bilayer_bonds,
    bilayer_translations,
    build_hamiltonian,
    chain_bonds,
    chain_translations,
    kubo_kernel,
    permute_operator,
    permute_states,
    popcount,
    q2_plaquette_pairs,
    q3_columns,
    square_bonds,
    square_translations,
    staggered_signs_bilayer,
    staggered_signs_chain,
    staggered_signs_square,
    stiffness_by_twist,
    symmetry_table,
    sz_diagonal,
    validate_group,
)

__all__ = [
    "ExactSpectrum",
    "stiffness_by_twist",
    "kubo_kernel",
    # re-exports
    "build_hamiltonian",
    "basis_states",
    "popcount",
    "permute_states",
    "sz_diagonal",
    "SymmetryGroup",
    "chain_bonds",
    "square_bonds",
    "bilayer_bonds",
    "staggered_signs_chain",
    "staggered_signs_square",
    "staggered_signs_bilayer",
    "q2_plaquette_pairs",
    "q3_columns",
    "chain_translations",
    "square_translations",
    "bilayer_translations",
]
