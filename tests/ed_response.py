"""Re-export shim: the code moved to :mod:`qmc.validation.exact.response` (numpy/scipy only)."""

from qmc.validation.exact.blocks import Sector, as_betas, clean_operator, kubo_kernel  # noqa: F401
from qmc.validation.exact.hamiltonian import basis_states, popcount  # noqa: F401
from qmc.validation.exact.response import ResponseMixin
from qmc.validation.exact.symmetry import operator_component, permute_operator  # noqa: F401

__all__ = ["ResponseMixin"]
