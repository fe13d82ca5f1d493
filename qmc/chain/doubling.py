"""Beta doubling: a chain at beta becomes a chain at 2 beta (when to stop doubling:
:mod:`qmc.chain.convergence`).

An SSE configuration at beta is a state |a_0> and an operator string op_1 .. op_M (with n non-empty slots)
that propagates |a_0> through |a_1>, ..., |a_M> = |a_0>. Joining the string with its mirror image, op_1 ..
op_M op_M .. op_1, propagates |a_0> up to |a_M> = |a_0> and back down through |a_{M-1}>, ..., |a_0>: every
operator of the second half acts between the same two states as its image in the first half, with the same
matrix element, because H is real and symmetric. The result is a valid configuration at 2 beta with cutoff
2M and 2n operators, a good starting point for the lower temperature (the usual SSE beta-doubling step, from
memory: Sandvik 2002). It is then warmed up like any chain; only its bins at 2 beta are measured. This needs
an operator code that means the same matrix element read in either direction of imaginary time: true for the
singlet-projector vertex kind, whose code names the term and which of its bonds hop
(:mod:`qmc.engine.vertices`). Other kinds are refused until checked (:data:`MIRROR_SAFE_KINDS`).
"""

from __future__ import annotations

import numpy as np

from qmc.chain.simulation import Simulation
from qmc.models.compiled import KIND_PROJECTOR, VERTEX_KINDS

__all__ = ["MIRROR_SAFE_KINDS", "mirrored_state", "double_beta"]

MIRROR_SAFE_KINDS = frozenset({KIND_PROJECTOR})
"""Vertex kinds whose operator codes read the same in both directions of imaginary time."""


def mirrored_state(state: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """The chain state (:meth:`Simulation.state`, flips folded in) with its operator string joined to its
    mirror image; the RNG words go on, step counters, bin sums and the VBS histogram start from zero."""
    ops = np.asarray(state["ops"], dtype=np.int32)
    counters = np.array(state["counters"], dtype=np.int64)
    counters[0] *= 2
    return {**state, "ops": np.concatenate([ops, ops[::-1]]), "counters": counters,
            "acc": np.zeros_like(np.asarray(state["acc"], dtype=np.float64)),
            "hist": np.zeros_like(np.asarray(state["hist"], dtype=np.int64)),
            "steps": np.zeros_like(np.asarray(state["steps"], dtype=np.int64))}


def double_beta(sim: Simulation) -> Simulation:
    """A new chain at 2 beta from ``sim``'s configuration (module docstring), with ``sim``'s warm-up,
    measurement steps and bins; ValueError for a model with a vertex kind not known to be mirror-safe."""
    kinds = set(np.unique(sim.model.group_kind).tolist())
    if not kinds <= MIRROR_SAFE_KINDS:
        names = ", ".join(VERTEX_KINDS[k] for k in sorted(kinds - MIRROR_SAFE_KINDS))
        raise ValueError(f"beta doubling is not available for the vertex kind(s) {names}")
    return Simulation.restore(sim.model, 2.0 * sim.beta, warmup_steps=sim.warmup_steps,
                              measure_steps=sim.measure_steps, bins=sim.n_bins,
                              state=mirrored_state(sim.state()), estimators=sim.estimators)
