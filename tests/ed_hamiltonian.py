"""Re-export shim: the code moved to :mod:`qmc.validation.exact.hamiltonian` (numpy/scipy only)."""

from qmc.validation.exact.hamiltonian import (  # noqa: F401
    basis_states,
    build_hamiltonian,
    permute_states,
    popcount,
    sz_diagonal,
)

__all__ = ["basis_states", "popcount", "permute_states", "sz_diagonal", "build_hamiltonian"]
