"""The fingerprint of a configuration: a hash of everything that changes a task's id, model or stream.

A run directory remembers the fingerprint of the configuration it was made with; a different one means
that the configuration changed in substance, and the run refuses to mix the two (unless forced).
"""

from __future__ import annotations

import hashlib
import json

from qmc.config.schema import GroundState, LatticeSpec, RunSection, Sampling, ScanEntry, TermSpec
from qmc.config.tasks import canonical_number

__all__ = ["fingerprint"]


def fingerprint(run: RunSection, lattice: LatticeSpec, terms: tuple[TermSpec, ...],
                scan: tuple[ScanEntry, ...], sampling: Sampling,
                ground_state: GroundState | None = None) -> str:
    """SHA-256 (hex) of the semantic content of a configuration.

    Comments, layout, key order outside [scan], ``run.name``, ``run.description``, ``run.output``,
    ``sampling.checkpoint_seconds`` and ``exchange.max_ranks`` do not enter; numbers enter by value (1 and
    1.0 are the same).  ``exchange.every`` enters only with replica exchange, ``sampling.target`` and
    ``[ground_state]`` only when given (so that the fingerprints of configurations without them stay what
    they were).
    """
    s = sampling
    content = {
        "seed": run.seed,
        "lattice": {"kind": lattice.kind, "size": [e.canonical for e in lattice.size],
                    "boundary": lattice.boundary, "sites": lattice.sites, "bonds": lattice.bonds,
                    "classes": lattice.classes},
        "terms": [{"type": t.type, "coupling": t.coupling.canonical, "bonds": t.bonds, "shape": t.shape,
                   "symmetrize": bool(t.symmetrize), "name": t.name} for t in terms],
        "scan": [[e.name, e.expression.canonical if e.derived else [canonical_number(v) for v in e.values]]
                 for e in scan],
        "sampling": {"warmup_steps": s.warmup_steps, "measure_steps": s.measure_steps, "bins": s.bins,
                     "copies": s.copies, "exchange": s.exchange},
    }
    if s.exchange is not None:
        content["sampling"]["exchange_every"] = s.exchange_every
    if s.target:
        content["sampling"]["target"] = [[name, repr(float(v)), rel] for name, v, rel in s.target]
    if ground_state is not None:
        content["ground_state"] = [canonical_number(ground_state.start_beta),
                                   canonical_number(ground_state.max_beta), list(ground_state.observables)]
    text = json.dumps(content, sort_keys=True, separators=(",", ":"), default=list)
    return hashlib.sha256(text.encode()).hexdigest()
