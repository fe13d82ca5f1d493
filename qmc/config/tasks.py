"""Scan expansion: every point of the scan times every independent copy is one :class:`Task`.

Task ids join the scanned (not derived) values in file order with the copy number, e.g. ``L8_g2.5_c0``; an
entry that lists expressions enters with its value at the point (``beta = ["L", "2*L"]`` gives
``L8_beta8_c0`` and ``L8_beta16_c0``; ``c0`` alone for a ground-state search without scanned values).
The random stream of a task is ``stream_seed(seed, seed_key)`` with ``seed_key`` built from the sorted
parameter values and the copy index only, so it depends neither on the order of the scan, nor on the
task id's text, nor on where the task runs.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from typing import Any

import qmc.models as models
from qmc.config.expressions import Number, format_number
from qmc.config.schema import (
    COPY_PARAM,
    EXPLICIT,
    SIGNED_TERMS,
    GroundState,
    LatticeSpec,
    ModelSection,
    RunSection,
    Sampling,
    ScanEntry,
    TermSpec,
    check_coupling,
)
from qmc.errors import UserError

__all__ = ["Task", "expand_tasks", "canonical_number"]

_NEED_EVEN = ("chain", "square", "bilayer", "cubic")  # bipartite with periodic boundaries only for even L


@dataclass(frozen=True)
class Task:
    """One simulation: a point of the scan and a copy number, with everything resolved to numbers.

    ``terms`` are dicts whose keys other than ``type`` are the keyword arguments of the models term
    classes (``bonds``/``shape``, numeric ``coupling``, optional ``symmetrize``, ``name``).  ``explicit`` is
    ``{"sites", "bonds", "classes"}`` for an explicit lattice, else None.  ``params`` holds the scan values
    and ``copy``; ``colors`` is the number of colours per site (2: S = 1/2 spins).  The random stream of the
    task is ``stream_seed(seed, seed_key)``.  ``exchange_group``
    names the replica-exchange ladder the task belongs to (tasks that differ only in the exchanged
    parameter ``exchange`` share it), or is None without exchange; the ladder's swap decisions draw from
    ``stream_seed(seed, exchange_seed_key)``.  With ``ground_state`` (``[ground_state]``) ``beta`` is the
    first stage's, ``start_beta``, and the task doubles it (:mod:`qmc.chain.doubling`).
    """

    task_id: str
    params: dict[str, Number]
    lattice_kind: str
    size: tuple[int, ...]
    boundary: str
    terms: list[dict[str, Any]]
    beta: float
    copy: int
    sampling: Sampling
    seed_key: str
    exchange: str | None
    seed: int = 0
    exchange_group: str | None = None
    exchange_seed_key: str | None = None
    explicit: dict[str, Any] | None = None
    source: str = ""
    colors: int = 2
    ground_state: GroundState | None = None


def canonical_number(v: Number) -> str:
    """Exact, type-blind text of a number (8 and 8.0 give the same), used in seed keys and fingerprints."""
    return repr(float(v))


def expand_tasks(source: str, run: RunSection, lattice: LatticeSpec, terms: tuple[TermSpec, ...],
                 scan: tuple[ScanEntry, ...], sampling: Sampling, model: ModelSection | None = None,
                 ground_state: GroundState | None = None) -> list[Task]:
    """All tasks: cartesian product of the scan entries in file order (first slowest), copies inner.

    Derived entries are evaluated per point; beta, sizes and couplings are checked per task, with the
    point named in the message (``source`` is the file name for messages).
    """
    base = [e for e in scan if not e.derived]
    derived = [e for e in scan if e.derived]
    plain = [e for e in base if not e.choices]
    exchange = sampling.exchange
    explicit = None
    if lattice.kind == EXPLICIT:
        explicit = {"sites": lattice.sites, "bonds": lattice.bonds, "classes": lattice.classes}
    tasks: list[Task] = []
    for combo in itertools.product(*(e.choices or e.values for e in base)):
        picked = dict(zip((e.name for e in base), combo, strict=True))
        values: dict[str, Number] = {e.name: picked[e.name] for e in plain}
        context = " (for " + ", ".join(f"{k}={format_number(v)}" for k, v in values.items()) + ")"
        for e in base:
            if e.choices:
                values[e.name] = _choice(source, e, picked[e.name], values, context)
        for e in derived:
            values[e.name] = e.expression.evaluate(values, f"{source}: scan.{e.name}")
        params = {e.name: values[e.name] for e in scan}
        beta = values["beta"] if ground_state is None else ground_state.start_beta
        if not beta > 0:
            others = ", ".join(f"{k}={format_number(v)}" for k, v in values.items() if k != "beta")
            raise UserError(f"beta = {format_number(beta)}" + (f" (for {others})" if others else "")
                            + " must be positive", f"{source}: scan.beta")
        size = _resolve_size(source, lattice, values, context)
        colors = _resolve_colors(source, model or ModelSection(), terms, values, context)
        resolved = [_resolve_term(source, i, t, values, context) for i, t in enumerate(terms)]
        label = "_".join(f"{e.name}{format_number(values[e.name])}" for e in base)
        key = ";".join(f"{k}={canonical_number(params[k])}" for k in sorted(params))
        rest = [f"{e.name}{format_number(values[e.name])}" for e in base if e.name != exchange]
        for c in range(sampling.copies):
            group = "_".join([*rest, f"c{c}"]) if exchange is not None else None
            # The seed keys below are frozen: their text fixes every random stream, so it keeps the
            # word "replica" (the copy index's name in earlier releases) and the old group label.
            ladder_key = "exchange:" + "_".join([*rest, f"r{c}"]) if exchange is not None else None
            tasks.append(Task(
                task_id="_".join([*([label] if label else []), f"c{c}"]), params={**params, COPY_PARAM: c},
                lattice_kind=lattice.kind,
                size=size, boundary=lattice.boundary, terms=[dict(d) for d in resolved], beta=float(beta),
                copy=c, sampling=sampling, seed_key=f"{key};replica={c}", exchange=exchange, seed=run.seed,
                exchange_group=group, exchange_seed_key=ladder_key, explicit=explicit, source=source,
                colors=colors, ground_state=ground_state))
    return tasks


def _choice(source: str, e: ScanEntry, expr: Any, values: dict[str, Number], context: str) -> Number:
    """The value of one choice of a list of expressions; two choices of equal value at one point would
    make two equal tasks, and are refused."""
    where = f"{source}: scan.{e.name}"
    value = expr.evaluate(values, where)
    others = [c for c in e.choices if c is not expr and c.evaluate(values, where) == value]
    if others:
        raise UserError(f"{expr.text!r} and {others[0].text!r} are both {format_number(value)}{context}: one "
                        "task would be run twice", where)
    return value


def _resolve_colors(source: str, model: ModelSection, terms: tuple[TermSpec, ...], values: dict[str, Number],
                    context: str) -> int:
    """The task's number of colours: a whole number from 2 to MAX_COLOURS; with more than 2 no heisenberg,
    xxz or field term (they are defined through S = 1/2 spin operators)."""
    if model.colors is None:
        return 2
    where = f"{source}: model.colors"
    v = model.colors.evaluate(values, where)
    if float(v) != int(v) or not 2 <= v <= models.MAX_COLOURS:
        raise UserError(f"colors = {format_number(v)}{context if model.colors.names else ''} must be a whole "
                        f"number from 2 to {models.MAX_COLOURS}", where)
    v = int(v)
    for i, t in enumerate(terms):
        if v > 2 and t.type == "heisenberg":
            raise UserError(f"a heisenberg term (S_i.S_j of S = 1/2 spins) needs colors = 2, not {v}"
                            f"{context if model.colors.names else ''}; for SU({v}) use type = \"projector\" "
                            "(-J sum P_ij, which for two colours is J S_i.S_j - J/4)",
                            f"{source}: terms[{i}].type")
        if v > 2 and t.type in ("xxz", "field"):
            article = "an" if t.type == "xxz" else "a"
            raise UserError(f"{article} {t.type} term (S = 1/2 spin operators) needs colors = 2, not {v}"
                            f"{context if model.colors.names else ''}", f"{source}: terms[{i}].type")
    return v


def _resolve_term(source: str, i: int, t: TermSpec, values: dict[str, Number],
                  context: str) -> dict[str, Any]:
    where = f"{source}: terms[{i}].coupling"
    coupling = t.coupling.evaluate(values, where)
    if t.type not in SIGNED_TERMS:
        check_coupling(coupling, where, context)
    d: dict[str, Any] = {"type": t.type}
    if t.type in ("heisenberg", "projector", "xxz"):
        d["bonds"] = t.bonds
    elif t.type == "projector-product":
        d["shape"] = t.shape
    d["coupling"] = float(coupling)
    if t.delta is not None:
        d["delta"] = float(t.delta.evaluate(values, f"{source}: terms[{i}].delta"))
    if t.staggered is not None:
        d["staggered"] = t.staggered
    if t.symmetrize is not None:
        d["symmetrize"] = t.symmetrize
    if t.name is not None:
        d["name"] = t.name
    return d


def _resolve_size(source: str, lat: LatticeSpec, values: dict[str, Number], context: str) -> tuple[int, ...]:
    if lat.kind == EXPLICIT:
        return (lat.sites,)
    size = []
    for i, expr in enumerate(lat.size):
        key = lat.size_key(i)
        v = expr.evaluate(values, f"{source}: {key}")
        if isinstance(v, float):
            if not v.is_integer():
                raise UserError(f"{expr.text!r} = {format_number(v)}{context} is not an integer",
                                f"{source}: {key}")
            v = int(v)
        if v < 2:
            raise UserError(f"{expr.text!r} = {v}{context} is too small: every length must be at least 2",
                            f"{source}: {key}")
        if v % 2 and lat.boundary == "periodic" and lat.kind in _NEED_EVEN:
            raise UserError(f"{expr.text!r} = {v}{context} is odd: a periodic {lat.kind} lattice needs even "
                            "lengths to be bipartite (use an even size or boundary = \"open\")",
                            f"{source}: {key}")
        size.append(v)
    return tuple(size)
