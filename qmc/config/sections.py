"""Parsing of the sections [run], [model], [lattice], [[terms]], [sampling] and [exchange] (schema:
:mod:`qmc.config.schema`); [scan] is :mod:`qmc.config.scan`.

Each ``parse_*`` function takes the :class:`~qmc.config.reader.TableReader` of the file and returns the
section's dataclass, having checked everything that does not need the scan values.
"""

from __future__ import annotations

import math
from typing import Any

import qmc.models as models
from qmc.config.reader import TableReader
from qmc.config.schema import (
    BOUNDARIES,
    DEFAULT_ESTIMATORS,
    ESTIMATORS,
    EXCHANGE_KEYS,
    EXPLICIT,
    EXPLICIT_KEYS,
    GROUND_STATE_KEYS,
    LATTICE_KEYS,
    LATTICE_KINDS,
    MIN_TARGET_BINS,
    MODEL_KEYS,
    RUN_KEYS,
    SAMPLING_KEYS,
    SHAPES,
    SIGNED_TERMS,
    TERM_KEYS,
    TERM_NAME_RE,
    TERM_TYPES,
    GroundState,
    LatticeSpec,
    ModelSection,
    RunSection,
    Sampling,
    TermSpec,
    check_coupling,
)
from qmc.errors import describe_value

__all__ = ["parse_run", "parse_model", "parse_lattice", "parse_terms", "parse_sampling", "parse_target",
           "parse_ground_state"]


def parse_run(r: TableReader) -> RunSection:
    t = r.table("run")
    r.check_keys("run", t, RUN_KEYS, ("seed",), "[run]")
    name = r.string("run.name", t["name"]) if "name" in t else r.path.stem
    output = r.string("run.output", t["output"]) if "output" in t else f"runs/{r.path.stem}"
    if not output.strip():
        raise r.fail("run.output", "must not be empty")
    seed = r.integer("run.seed", t["seed"], minimum=0)
    description = r.string("run.description", t["description"]) if "description" in t else ""
    return RunSection(name=name, output=output, seed=seed, description=description)


def parse_model(r: TableReader) -> ModelSection:
    """``[model]`` (optional): ``colors``, a whole number >= 2 or an expression of scan names (checked per
    task by :mod:`qmc.config.tasks`)."""
    if "model" not in r.data:
        return ModelSection()
    t = r.table("model")
    r.check_keys("model", t, MODEL_KEYS, (), "[model]")
    if "colors" not in t:
        return ModelSection()
    colors = r.expression("model.colors", t["colors"])
    if colors.is_constant:
        value = colors.evaluate({})
        if value != int(value) or not 2 <= value <= models.MAX_COLOURS:
            raise r.fail("model.colors", f"must be a whole number from 2 to {models.MAX_COLOURS} (colours "
                                         f"per site), got {describe_value(t['colors'])}")
    return ModelSection(colors=colors)


def parse_lattice(r: TableReader) -> LatticeSpec:
    t = r.table("lattice")
    if "kind" not in t:
        raise r.fail("lattice.kind",
                     f"missing required key 'kind' in [lattice] ({LATTICE_KEYS['kind']})")
    kind = r.choice("lattice.kind", t["kind"], (*LATTICE_KINDS, EXPLICIT), "lattice kind")
    if kind == EXPLICIT:
        return _explicit(r, t)
    r.check_keys("lattice", t, LATTICE_KEYS, ("size",), "[lattice]")
    dim = LATTICE_KINDS[kind]
    raw = t["size"]
    if isinstance(raw, list):
        if len(raw) != dim:
            raise r.fail("lattice.size", f"a {kind} lattice needs {dim} size entr"
                                         f"{'y' if dim == 1 else 'ies'}, got {len(raw)}")
        size = tuple(r.expression(f"lattice.size[{i}]", v) for i, v in enumerate(raw))
    else:
        size = (r.expression("lattice.size", raw),) * dim
    boundary = _boundary(r, t.get("boundary", "periodic"), kind, dim)
    return LatticeSpec(kind=kind, size=size, boundary=boundary, size_scalar=not isinstance(raw, list))


def _boundary(r: TableReader, value: Any, kind: str, dim: int) -> str | tuple[str, ...]:
    """One boundary word for all directions, or a list of one per direction (equal words fold into one)."""
    if not isinstance(value, list):
        return r.choice("lattice.boundary", value, BOUNDARIES, "boundary")
    if len(value) != dim:
        entries = "entry" if dim == 1 else "entries"
        raise r.fail("lattice.boundary", f"a {kind} lattice needs {dim} boundary {entries} (one per "
                                         f"direction), got {len(value)}")
    words = tuple(r.choice(f"lattice.boundary[{a}]", v, BOUNDARIES, "boundary") for a, v in enumerate(value))
    return words[0] if len(set(words)) == 1 else words


def _explicit(r: TableReader, t: dict) -> LatticeSpec:
    r.check_keys("lattice", t, EXPLICIT_KEYS, ("sites",), "[lattice] (kind = \"explicit\")")
    sites = r.integer("lattice.sites", t["sites"], minimum=2)
    if "bonds" not in t and "classes" not in t:
        raise r.fail("lattice.bonds", "an explicit lattice needs bonds = [[i, j], ...] "
                                      "or classes = {name = [[i, j], ...]}")
    bonds = _bond_list(r, "lattice.bonds", t["bonds"], sites) if "bonds" in t else None
    classes = None
    if "classes" in t:
        if not isinstance(t["classes"], dict) or not t["classes"]:
            raise r.fail("lattice.classes", "must be a non-empty table {name = [[i, j], ...], ...}")
        classes = {}
        for name, value in t["classes"].items():
            if name == "all":
                raise r.fail("lattice.classes.all", "the class name 'all' is reserved for all bonds")
            classes[name] = _bond_list(r, f"lattice.classes.{name}", value, sites)
        if bonds is not None:
            _check_partition(r, bonds, classes)
    return LatticeSpec(kind=EXPLICIT, size=(), boundary="open", sites=sites, bonds=bonds,
                       classes=classes)


def _bond_list(r: TableReader, key: str, value: Any, sites: int) -> tuple[tuple[int, int], ...]:
    if not isinstance(value, list) or not value:
        raise r.fail(key,
                     f"must be a non-empty list of [i, j] site pairs, got {describe_value(value)}")
    out = []
    for b, pair in enumerate(value):
        if (not isinstance(pair, list) or len(pair) != 2
                or any(isinstance(s, bool) or not isinstance(s, int) for s in pair)):
            raise r.fail(f"{key}[{b}]", f"must be a pair of integer site indices [i, j], got {pair!r}")
        i, j = pair
        if not (0 <= i < sites and 0 <= j < sites):
            raise r.fail(f"{key}[{b}]", f"site index out of range 0..{sites - 1}: {pair}")
        if i == j:
            raise r.fail(f"{key}[{b}]", f"a bond must join two different sites, got {pair}")
        out.append((i, j))
    return tuple(out)


def _check_partition(r: TableReader, bonds, classes) -> None:
    owner: dict[frozenset, str] = {}
    for name, members in classes.items():
        for b, pair in enumerate(members):
            k = frozenset(pair)
            if k in owner:
                raise r.fail(f"lattice.classes.{name}[{b}]", f"bond {list(pair)} is already in class "
                                                             f"'{owner[k]}'; with bonds given, the "
                                                             "classes must split them exactly")
            owner[k] = name
    listed = {frozenset(p) for p in bonds}
    for name, members in classes.items():
        for b, pair in enumerate(members):
            if frozenset(pair) not in listed:
                raise r.fail(f"lattice.classes.{name}[{b}]",
                             f"bond {list(pair)} is not in lattice.bonds")
    for b, pair in enumerate(bonds):
        if frozenset(pair) not in owner:
            raise r.fail(f"lattice.bonds[{b}]",
                         f"bond {list(pair)} is in no class; with classes given, every bond must be "
                         "in exactly one class (or leave out bonds and list the classes only)")


def parse_terms(r: TableReader) -> tuple[TermSpec, ...]:
    raw = r.data.get("terms")
    example = 'e.g. [[terms]] type = "heisenberg", bonds = "nn", coupling = 1.0'
    if raw is None:
        raise r.fail("terms",
                     f"no [[terms]] given: the Hamiltonian needs at least one term ({example})")
    if not isinstance(raw, list) or not all(isinstance(t, dict) for t in raw):
        raise r.fail("terms", f"terms must be written as [[terms]] blocks ({example})")
    terms: list[TermSpec] = []
    names: dict[str, int] = {}
    for i, t in enumerate(raw):
        key = f"terms[{i}]"
        if "type" not in t:
            raise r.fail(f"{key}.type", f"missing required key 'type' ({' or '.join(TERM_TYPES)})")
        ttype = r.choice(f"{key}.type", t["type"], TERM_TYPES, "term type")
        allowed = TERM_KEYS[ttype]
        for k in t:
            if k not in allowed and any(k in other for other in TERM_KEYS.values()):
                raise r.fail(f"{key}.{k}", f"key '{k}' does not apply to a {ttype} term")
        required = {"heisenberg": ("bonds", "coupling"), "projector": ("bonds", "coupling"),
                    "projector-product": ("shape", "coupling"), "xxz": ("bonds", "coupling", "delta"),
                    "field": ("coupling",)}[ttype]
        r.check_keys(key, t, allowed, required, key)
        coupling = r.expression(f"{key}.coupling", t["coupling"])
        if coupling.is_constant and ttype not in SIGNED_TERMS:
            check_coupling(coupling.evaluate({}), r.where(f"{key}.coupling"), "")
        name = None
        if "name" in t:
            name = r.string(f"{key}.name", t["name"])
            if not TERM_NAME_RE.match(name):
                raise r.fail(f"{key}.name", f"{name!r} must start with a letter or digit and contain "
                                            "only letters, digits, '_', '.' or '-'")
            if name in names:
                raise r.fail(f"{key}.name", f"{name!r} is already the name of terms[{names[name]}]")
            names[name] = i
        if ttype in ("heisenberg", "projector", "xxz"):
            bonds = r.string(f"{key}.bonds", t["bonds"])
            delta = r.expression(f"{key}.delta", t["delta"]) if ttype == "xxz" else None
            terms.append(TermSpec(type=ttype, coupling=coupling, bonds=bonds, name=name, delta=delta))
        elif ttype == "field":
            stag = t.get("staggered", False)
            if not isinstance(stag, bool):
                raise r.fail(f"{key}.staggered", f"must be true or false, got {describe_value(stag)}")
            terms.append(TermSpec(type=ttype, coupling=coupling, name=name, staggered=stag))
        else:
            shape = _shape(r, f"{key}.shape", t["shape"])
            sym = None
            if "symmetrize" in t:
                sym = t["symmetrize"]
                if not isinstance(sym, bool):
                    raise r.fail(f"{key}.symmetrize",
                                 f"must be true or false, got {describe_value(sym)}")
            terms.append(TermSpec(type=ttype, coupling=coupling, shape=shape, symmetrize=sym, name=name))
    if not terms:
        raise r.fail("terms", f"no [[terms]] given ({example})")
    return tuple(terms)


def _shape(r: TableReader, key: str, value: Any) -> str | tuple:
    if isinstance(value, str):
        return r.choice(key, value, SHAPES, "shape")
    form = ("a shape name or a list of 1 to 3 bonds [[[dx, dy], [dx, dy]], ...] (unit-cell offsets of "
            "the two sites of each bond, one integer per lattice direction: [[[0], [1]]] on a chain)")
    if not isinstance(value, list) or not 1 <= len(value) <= 3:
        raise r.fail(key, f"must be {form}, got {describe_value(value)}"
                          + (f" with {len(value)} entries" if isinstance(value, list) else ""))
    bonds = []
    for b, bond in enumerate(value):
        ok = isinstance(bond, list) and len(bond) == 2 and all(
            isinstance(p, list) and 1 <= len(p) <= 4 and len(p) == len(bond[0])
            and all(isinstance(c, int) and not isinstance(c, bool) for c in p) for p in bond)
        if not ok:
            raise r.fail(f"{key}[{b}]", "a bond of a shape is two offsets of integers, one per lattice "
                                        f"direction: [[dx, dy], [dx, dy]] on a square lattice, got {bond!r}")
        bonds.append(tuple(tuple(p) for p in bond))
    if len({len(p) for bond in bonds for p in bond}) > 1:
        raise r.fail(key, "every offset of a shape needs the same number of entries (one per lattice "
                          f"direction), got {value!r}")
    return tuple(bonds)


def parse_sampling(r: TableReader) -> Sampling:
    """``[sampling]`` together with the optional ``[exchange]`` section."""
    t = r.table("sampling")
    required = ("warmup_steps", "measure_steps", "bins")
    r.check_keys("sampling", t, SAMPLING_KEYS, required, "[sampling]")
    warmup = r.integer("sampling.warmup_steps", t["warmup_steps"], minimum=0)
    measure = r.integer("sampling.measure_steps", t["measure_steps"], minimum=1)
    bins = r.integer("sampling.bins", t["bins"], minimum=2)
    if measure % bins:
        divisors = [d for d in range(2, measure + 1) if measure % d == 0]
        near = min(divisors, key=lambda d: (abs(d - bins), d)) if divisors else None
        hint = f" (e.g. bins = {near} gives {measure // near} steps per bin)" if near else ""
        raise r.fail("sampling.bins", f"bins = {bins} does not divide measure_steps = {measure}; "
                                   f"every bin must hold the same number of steps{hint}")
    copies = r.integer("sampling.copies", t.get("copies", 1), minimum=1)
    checkpoint = r.number("sampling.checkpoint_seconds", t.get("checkpoint_seconds", 300.0))
    if checkpoint <= 0:
        raise r.fail("sampling.checkpoint_seconds", f"must be positive, got {checkpoint}")
    target = parse_target(r, t["target"], bins) if "target" in t else ()
    estimators = r.choice("sampling.estimators", t.get("estimators", DEFAULT_ESTIMATORS), ESTIMATORS,
                          "kind of estimators")
    x = r.table("exchange", required=False)
    along, every, ranks = None, 10, None
    if "exchange" in r.data:
        r.check_keys("exchange", x, EXCHANGE_KEYS, ("along",), "[exchange]")
        along = r.string("exchange.along", x["along"])
        every = r.integer("exchange.every", x.get("every", 10), minimum=1)
        if "max_ranks" in x:
            ranks = r.integer("exchange.max_ranks", x["max_ranks"], minimum=1)
    return Sampling(warmup_steps=warmup, measure_steps=measure, bins=bins, copies=copies,
                    checkpoint_seconds=float(checkpoint), exchange=along, exchange_every=every,
                    exchange_ranks=ranks, target=target, estimators=estimators)


def parse_target(r: TableReader, value: Any, bins: int) -> tuple[tuple[str, float, bool], ...]:
    """``[sampling] target = {observable = error, ...}``: an absolute error (a number > 0) or a relative one
    (a text such as "0.5%") per observable; the names are checked against the model when the run starts."""
    key = "sampling.target"
    example = '{energy = 1e-4, m_stag2 = "0.5%"}'
    if not isinstance(value, dict) or not value:
        raise r.fail(key, f"must be a table of error bars per observable, e.g. target = {example}, got "
                          f"{describe_value(value)}")
    if bins < MIN_TARGET_BINS:
        raise r.fail(key, f"a precision target is judged from {MIN_TARGET_BINS} bins on, but bins = {bins}: "
                          f"raise bins to at least {MIN_TARGET_BINS} (measure_steps is then the upper limit)")
    goals = []
    for name, v in value.items():
        where = f"{key}.{name}"
        relative = isinstance(v, str)
        if relative:
            text = v.strip()
            try:
                number = float(text[:-1]) if text.endswith("%") else math.nan
            except ValueError:
                number = math.nan
            if not math.isfinite(number) or number <= 0:
                raise r.fail(where, f"{v!r} is not a relative error: write a positive percentage such as "
                                    '"0.5%", or a number for an absolute error')
            goals.append((name, number / 100.0, True))
            continue
        number = r.number(where, v)
        if number <= 0:
            raise r.fail(where, f"must be a positive error bar (absolute, or relative as \"0.5%\"), got {v}")
        goals.append((name, float(number), False))
    return tuple(goals)


def parse_ground_state(r: TableReader) -> GroundState | None:
    """``[ground_state]`` (None without the section); the observables are checked against the model when
    the run starts."""
    if "ground_state" not in r.data:
        return None
    t = r.table("ground_state")
    r.check_keys("ground_state", t, GROUND_STATE_KEYS, ("start_beta", "max_beta"), "[ground_state]")
    start = r.number("ground_state.start_beta", t["start_beta"])
    if start <= 0:
        raise r.fail("ground_state.start_beta", f"must be positive, got {start}")
    top = r.number("ground_state.max_beta", t["max_beta"])
    if top < 4 * start:
        raise r.fail("ground_state.max_beta", f"max_beta = {top} leaves fewer than two doublings of "
                                              f"start_beta = {start}; convergence needs beta, 2 beta and 4 "
                                              f"beta to agree, so max_beta must be at least {4 * start:g}")
    names: tuple[str, ...] = ("energy",)
    if "observables" in t:
        raw = t["observables"]
        if (not isinstance(raw, list) or not raw or not all(isinstance(x, str) for x in raw)
                or len(set(raw)) != len(raw)):
            raise r.fail("ground_state.observables", 'must be a list of different observable names, e.g. '
                                                     f'["energy", "m_stag2"], got {describe_value(raw)}')
        names = tuple(raw)
    return GroundState(start_beta=float(start), max_beta=float(top), observables=names)
