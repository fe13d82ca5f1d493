"""Re-export shim: the code moved to :mod:`qmc.validation.exact.lattices` (numpy only)."""

from qmc.validation.exact.lattices import (  # noqa: F401
    Bond,
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

__all__ = [
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
