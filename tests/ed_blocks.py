"""Re-export shim: the code moved to :mod:`qmc.validation.exact.blocks` (numpy/scipy only)."""

from qmc.validation.exact.blocks import Block, Sector, as_betas, clean_operator, kubo_kernel  # noqa: F401
from qmc.validation.exact.symmetry import SymmetryTable  # noqa: F401

__all__ = ["Block", "Sector", "kubo_kernel", "clean_operator", "as_betas"]
