"""The binning analysis of the analysis layer.

The plateau rule itself lives in :mod:`qmc.chain.binning`, one layer down, because the run layer needs it
too: a task with a precision target stops when the binning errors of its bins meet the target
(:mod:`qmc.chain.target`).  This module re-exports it unchanged for the analysis modules and for users.
"""

from __future__ import annotations

from qmc.chain.binning import (
    BLOCK_FACTOR,
    MIN_BINS,
    MIN_HALF,
    MIN_SERIES,
    BinningLevels,
    ErrorEstimate,
    binning_levels,
    error_estimate,
    halves_consistent,
    plateau_error,
    rebin,
)

__all__ = [
    "MIN_BINS",
    "MIN_SERIES",
    "MIN_HALF",
    "BLOCK_FACTOR",
    "BinningLevels",
    "ErrorEstimate",
    "binning_levels",
    "error_estimate",
    "halves_consistent",
    "plateau_error",
    "rebin",
]
