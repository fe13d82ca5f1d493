"""Re-export shim: the code moved to :mod:`qmc.validation.exact.symmetry` (numpy/scipy only)."""

from qmc.validation.exact.hamiltonian import basis_states, permute_states  # noqa: F401
from qmc.validation.exact.symmetry import (  # noqa: F401
    PermutationGroup,
    SymmetryTable,
    operator_component,
    permute_operator,
    symmetry_table,
    validate_group,
)

__all__ = [
    "PermutationGroup",
    "validate_group",
    "SymmetryTable",
    "symmetry_table",
    "permute_operator",
    "operator_component",
]
