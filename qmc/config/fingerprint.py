"""The fingerprint of a configuration: a hash of everything that changes a task's id, model or stream.

A run directory remembers the fingerprint of the configuration it was made with, and its *physics
fingerprint* (:func:`physics_fingerprint`: seed, lattice and terms, not the scan or the sampling).  A
configuration with other scan points or more steps grows the same run; one with other physics does not
mix with it (unless forced, :mod:`qmc.run.plan`).
"""

from __future__ import annotations

import hashlib
import json

from qmc.config.schema import (
    DomainWallSpec,
    GroundState,
    LatticeSpec,
    ModelSection,
    RunSection,
    Sampling,
    ScanEntry,
    TermSpec,
)
from qmc.config.tasks import canonical_number

__all__ = ["fingerprint", "physics_fingerprint"]


def _physics(run: RunSection, lattice: LatticeSpec, terms: tuple[TermSpec, ...],
             model: ModelSection | None = None, domain_wall: DomainWallSpec | None = None) -> dict:
    content = {
        "seed": run.seed,
        "lattice": {"kind": lattice.kind, "size": [e.canonical for e in lattice.size],
                    "boundary": lattice.boundary, "sites": lattice.sites, "bonds": lattice.bonds,
                    "classes": lattice.classes},
        "terms": [{"type": t.type, "coupling": t.coupling.canonical, "bonds": t.bonds, "shape": t.shape,
                   "symmetrize": bool(t.symmetrize), "name": t.name,
                   **({"delta": t.delta.canonical} if t.delta is not None else {}),
                   **({"staggered": t.staggered} if t.staggered is not None else {})} for t in terms],
    }
    if model is not None and model.colors is not None and model.colors.canonical != "2":
        content["model"] = {"colors": model.colors.canonical}
    if domain_wall is not None:  # the edges of the tasks; which walls are run is not physics
        content["domain_wall"] = {"pattern": domain_wall.pattern, "pin": canonical_number(domain_wall.pin)}
    return content


def _scan_value(e: ScanEntry) -> str | list:
    if e.derived:
        return e.expression.canonical
    if e.choices:  # a list of expressions (entries of the other kinds keep their fingerprints)
        return ["choices", [c.canonical for c in e.choices]]
    return [canonical_number(v) for v in e.values]


def _hash(content: dict) -> str:
    text = json.dumps(content, sort_keys=True, separators=(",", ":"), default=list)
    return hashlib.sha256(text.encode()).hexdigest()


def physics_fingerprint(run: RunSection, lattice: LatticeSpec, terms: tuple[TermSpec, ...],
                        model: ModelSection | None = None, domain_wall: DomainWallSpec | None = None) -> str:
    """SHA-256 (hex) of the master seed, the lattice, the terms, the number of colours (when not 2) and the
    pinned edges of ``[domain_wall]`` (pattern and pin, when given): what two configurations must share for
    their tasks to belong to one run (comments, layout, names, the scan and the list of walls do not
    enter)."""
    return _hash(_physics(run, lattice, terms, model, domain_wall))


def fingerprint(run: RunSection, lattice: LatticeSpec, terms: tuple[TermSpec, ...],
                scan: tuple[ScanEntry, ...], sampling: Sampling, model: ModelSection | None = None,
                ground_state: GroundState | None = None, domain_wall: DomainWallSpec | None = None) -> str:
    """SHA-256 (hex) of the semantic content of a configuration.

    Comments, layout, key order outside [scan], ``run.name``, ``run.description``, ``run.output``,
    ``sampling.checkpoint_seconds`` and ``exchange.max_ranks`` do not enter; numbers enter by value (1 and
    1.0 are the same).  ``sampling.estimators`` does not enter (it changes the bins, not a task's id, model
    or stream; the task fingerprint holds it).  ``exchange.every`` enters only with replica exchange;
    ``model.colors`` only when it is not the default 2; ``sampling.target``, ``[ground_state]`` and
    ``[domain_wall]`` only when given (so that the fingerprints of configurations without them stay what
    they were).
    """
    s = sampling
    content = {
        **_physics(run, lattice, terms, model, domain_wall),
        "scan": [[e.name, _scan_value(e)] for e in scan],
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
    if domain_wall is not None:
        content["domain_wall"] = {**content["domain_wall"], "walls": list(domain_wall.walls)}
    return _hash(content)
