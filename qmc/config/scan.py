"""The [scan] section: scanned values, ranges, derived expressions and lists of expressions (e.g.
``beta = ["L", "2*L"]``: every point twice, at beta = L and at beta = 2L), and the checks that tie scan
names to the rest of the configuration (every name used exists and is used; the exchanged coupling is
valid).
"""

from __future__ import annotations

import math
from typing import Any

from qmc.config.expressions import Number, format_number
from qmc.config.reader import TableReader
from qmc.config.schema import (
    MAX_TASKS,
    NAME_RE,
    RESERVED_NAMES,
    LatticeSpec,
    ModelSection,
    Sampling,
    ScanEntry,
    TermSpec,
)
from qmc.errors import describe_value, did_you_mean

__all__ = ["parse_scan", "check_names", "check_exchange", "round_value"]


def round_value(v: Number) -> Number:
    """Scan values are kept to 12 significant digits, so that ids and stored values agree exactly."""
    if isinstance(v, int):
        return v
    v = float(format(v, ".12g"))
    return 0.0 if v == 0 else v


def parse_scan(r: TableReader, ground_state: bool = False) -> tuple[ScanEntry, ...]:
    """The ``[scan]`` entries in file order; checks names, values and references between entries.  With a
    ``[ground_state]`` section (``ground_state``) beta is set by beta doubling and must not be scanned."""
    t = r.table("scan", required=False)
    if ground_state and "beta" in t:
        raise r.fail("scan.beta", "with [ground_state] every task finds its own beta by doubling it from "
                                  "start_beta up to max_beta: remove beta from [scan], or remove "
                                  "[ground_state] to run at the scanned temperatures")
    if "beta" not in t and not ground_state:
        raise r.fail("scan.beta", "missing required key 'beta' in [scan]: the inverse temperature "
                                  '(a number, a list, a range table, or an expression such as "2*L")')
    entries = []
    for name, value in t.items():
        key = f"scan.{name}"
        if not NAME_RE.match(name):
            raise r.fail(key, f"scan name {name!r} must start with a letter and contain only "
                              "letters, digits and '_'")
        if name in RESERVED_NAMES:
            raise r.fail(key, f"'{name}' is a reserved name ({RESERVED_NAMES[name]})")
        if isinstance(value, str):
            entries.append(ScanEntry(name=name, expression=r.expression(key, value)))
            continue
        if isinstance(value, list) and any(isinstance(v, str) for v in value):
            entries.append(_choices(r, key, name, value))
            continue
        if isinstance(value, bool) or not isinstance(value, int | float | list | dict):
            raise r.fail(key, "must be a number, a list of numbers, a range {start, stop, num} or an "
                              f'expression such as "2*L", got {describe_value(value)}')
        if isinstance(value, dict):
            values = _range(r, key, value)
        elif isinstance(value, list):
            if not value:
                raise r.fail(key, "the list of values is empty")
            values = [r.number(f"{key}[{i}]", v) for i, v in enumerate(value)]
        else:
            values = [r.number(key, value)]
        values = [round_value(v) for v in values]
        seen: dict[Number, int] = {}
        for i, v in enumerate(values):
            if v in seen:
                raise r.fail(key, f"the value {format_number(v)} appears twice "
                                  f"(entries {seen[v]} and {i})")
            seen[v] = i
        entries.append(ScanEntry(name=name, values=tuple(values)))
    base = {e.name for e in entries if not e.derived and not e.choices}
    for e in entries:
        for i, expr in enumerate((e.expression,) if e.derived else e.choices):
            key = f"scan.{e.name}" if e.derived else f"scan.{e.name}[{i}]"
            for ref in expr.names:
                if ref not in t:
                    raise r.fail(key, expr.unknown_name_message(ref) + did_you_mean(ref, base))
                if ref not in base:
                    raise r.fail(key, f"{expr.text!r} uses '{ref}', which is itself an expression; use "
                                      "scanned values only")
    count = math.prod(e.count for e in entries)
    if count > MAX_TASKS:
        raise r.fail("scan", f"the scan has {count} parameter points; more than {MAX_TASKS} is "
                             "surely a mistake")
    return tuple(entries)


def _choices(r: TableReader, key: str, name: str, value: list[Any]) -> ScanEntry:
    """A list with expressions of other entries: one task per item at every point of the others."""
    exprs = tuple(r.expression(f"{key}[{i}]", v) for i, v in enumerate(value))
    seen: dict[str, int] = {}
    for i, e in enumerate(exprs):
        if e.canonical in seen:
            raise r.fail(key, f"the value {e.text!r} appears twice (entries {seen[e.canonical]} and {i})")
        seen[e.canonical] = i
    return ScanEntry(name=name, choices=exprs)


def _range(r: TableReader, key: str, value: dict[str, Any]) -> list[Number]:
    """``{start, stop, num}``: num evenly spaced values, both ends included (integers stay integers)."""
    allowed = {"start": "first value", "stop": "last value, included", "num": "number of values, >= 1"}
    r.check_keys(key, value, allowed, ("start", "stop", "num"), key)
    start = r.number(f"{key}.start", value["start"])
    stop = r.number(f"{key}.stop", value["stop"])
    num = r.integer(f"{key}.num", value["num"], minimum=1)
    if num > MAX_TASKS:
        raise r.fail(f"{key}.num", f"{num} values is more than the {MAX_TASKS} allowed")
    if num == 1:
        return [start]
    values = [start + (stop - start) * k / (num - 1) for k in range(num)]
    if isinstance(start, int) and isinstance(stop, int) and all(float(v).is_integer() for v in values):
        return [int(v) for v in values]
    return [float(v) for v in values]


def check_names(r: TableReader, lattice: LatticeSpec, terms: tuple[TermSpec, ...],
                scan: tuple[ScanEntry, ...], sampling: Sampling, model: ModelSection | None = None) -> None:
    """Every scan name used in model.colors, lattice.size, a coupling or beta exists, and every scan entry is
    used."""
    model = model or ModelSection()
    entries = {e.name: e for e in scan}
    uses = [("model.colors", model.colors)] if model.colors is not None else []
    uses += [(lattice.size_key(i), e) for i, e in enumerate(lattice.size)]
    uses += [(f"terms[{i}].coupling", t.coupling) for i, t in enumerate(terms)]
    uses += [(f"terms[{i}].delta", t.delta) for i, t in enumerate(terms) if t.delta is not None]
    for key, expr in uses:
        for ref in expr.names:
            if ref not in entries:
                raise r.fail(key, expr.unknown_name_message(ref) + did_you_mean(ref, entries)
                             + "; define it in [scan]")
    used = {"beta"}
    for _, expr in uses:
        used.update(expr.names)
    for name in list(used):
        if name in entries:
            used.update(entries[name].needs)
    for e in scan:
        if e.name not in used:
            raise r.fail(f"scan.{e.name}", f"scan.{e.name} is never used: refer to it in "
                                           "model.colors, lattice.size, a [[terms]] coupling or delta, "
                                           "or beta, or remove it")
    check_exchange(r, sampling.exchange, lattice, terms, entries, model)


def check_exchange(r: TableReader, name: str | None, lattice: LatticeSpec, terms: tuple[TermSpec, ...],
                   entries: dict[str, ScanEntry], model: ModelSection | None = None) -> None:
    """``[exchange] along`` names a scanned coupling with at least two values that changes neither the
    lattice, nor the number of colours, nor beta (swaps are only defined between chains of the same lattice,
    states and temperature)."""
    if name is None:
        return
    key = "exchange.along"
    directed = [i for i, t in enumerate(terms) if t.type in ("xxz", "field")]
    if directed:
        raise r.fail(key, f"replica exchange is not available with {terms[directed[0]].type} terms "
                          f"(terms[{directed[0]}]): their directed-loop weights are not powers of one "
                          "coupling, which the swap rule assumes; remove [exchange]")
    if name not in entries:
        raise r.fail(key, f"'{name}' is not a scan name{did_you_mean(name, entries)}")
    entry = entries[name]
    if entry.derived or entry.choices:
        raise r.fail(key, f"'{name}' is an expression; replica exchange needs a scanned coupling")
    if not any(name in t.coupling.names for t in terms):
        raise r.fail(key, f"'{name}' is not a scanned coupling: replica exchange needs a scan name used "
                          "as a [[terms]] coupling")
    affected = {name} | {e.name for e in entries.values() if name in e.needs}
    for i, expr in enumerate(lattice.size):
        if affected & set(expr.names):
            raise r.fail(key, f"'{name}' changes {lattice.size_key(i)}; configurations can only be "
                              "exchanged between tasks on the same lattice")
    if model is not None and model.colors is not None and affected & set(model.colors.names):
        raise r.fail(key, f"'{name}' changes model.colors; configurations can only be exchanged between "
                          "tasks with the same number of colours")
    if "beta" in affected:
        raise r.fail(key, f"'{name}' changes beta; replica exchange is only along a coupling at fixed beta")
    if len(entry.values) < 2:
        raise r.fail(key, f"scan.{name} has only {len(entry.values)} value; replica exchange needs at "
                          "least 2")
