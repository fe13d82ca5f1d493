"""Combining independent Markov chains (copies, or parts run separately) of the same parameters.

Bins of equal length (equal ``steps_per_bin``) are exchangeable: the chains are combined by
concatenating their bins, so every Monte Carlo step carries the same weight in the mean
(``mean = sum_c sum_i x_ci / sum_c n_c``).  Chains whose bin lengths all divide the largest one are
first rebinned to that length (consecutive bins averaged, trailing remainder dropped).  Otherwise
per-chain estimates are combined by inverse-variance weighting:

    mean = sum_c w_c m_c / sum_c w_c,   error = (sum_c w_c)^(-1/2),   w_c = 1 / sigma_c^2.

(common practice, no source)
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from .binning import rebin

__all__ = ["bins_compatible", "concatenate_chains", "merge_bin_dicts", "weighted_mean"]


def bins_compatible(bin_lengths: Sequence[int]) -> bool:
    """True when every bin length divides the largest one (so all chains can share that length)."""
    lengths = [int(b) for b in bin_lengths]
    if not lengths or min(lengths) < 1:
        return False
    top = max(lengths)
    return all(top % b == 0 for b in lengths)


def concatenate_chains(chains: Sequence[np.ndarray], bin_lengths: Sequence[int] | None = None) -> np.ndarray:
    """Concatenate per-chain bin series (axis 0), rebinning to the largest bin length when needed.

    Raises ``ValueError`` when the bin lengths are not compatible (see :func:`bins_compatible`).
    """
    if not chains:
        raise ValueError("concatenate_chains: no chains given")
    arrays = [np.asarray(c, dtype=float) for c in chains]
    if bin_lengths is None:
        return np.concatenate(arrays, axis=0)
    if len(bin_lengths) != len(arrays):
        raise ValueError("concatenate_chains: one bin length per chain is required")
    if not bins_compatible(bin_lengths):
        raise ValueError(f"concatenate_chains: bin lengths {list(bin_lengths)} do not divide the largest one")
    top = max(int(b) for b in bin_lengths)
    return np.concatenate([rebin(a, top // int(b)) for a, b in zip(arrays, bin_lengths, strict=True)], axis=0)


def merge_bin_dicts(
    chains: Sequence[Mapping[str, np.ndarray]], bin_lengths: Sequence[int]
) -> tuple[dict[str, np.ndarray], int]:
    """Merge per-chain ``{observable: bins}`` dicts; observables missing from any chain are dropped.

    Returns the merged dict and the common bin length (the largest input bin length).
    """
    names = set(chains[0]) if chains else set()
    for c in chains[1:]:
        names &= set(c)
    merged = {name: concatenate_chains([c[name] for c in chains], bin_lengths) for name in sorted(names)}
    return merged, max(int(b) for b in bin_lengths)


def weighted_mean(values: Sequence[float], errors: Sequence[float]) -> tuple[float, float]:
    """Inverse-variance weighted mean and its error; non-finite or non-positive errors are skipped."""
    v = np.asarray(values, dtype=float)
    e = np.asarray(errors, dtype=float)
    good = np.isfinite(v) & np.isfinite(e) & (e > 0)
    if not good.any():
        finite = np.isfinite(v)
        return (float(v[finite].mean()) if finite.any() else float("nan")), float("nan")
    w = 1.0 / e[good] ** 2
    return float(np.sum(w * v[good]) / w.sum()), float(1.0 / np.sqrt(w.sum()))
