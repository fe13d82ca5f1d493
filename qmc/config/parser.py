"""Run configuration: read and check a TOML file, expand its parameter scan into tasks, build the models.

Schema (sections and keys; ``*`` marks required ones)::

    [run]       name = "text" (default: file stem), output = "runs/x" (run directory, relative to the
                config file; default "runs/<file stem>"), seed* = master seed (integer >= 0),
                description = "text"
    [lattice]   kind* = chain | square | bilayer | honeycomb | cubic, size* = [numbers or scan names]
                (one entry per direction, or a single value for all), boundary = periodic | open
                or: kind* = "explicit", sites* = N, bonds = [[i, j], ...], classes = {name = [[i, j], ...]}
                (at least one of bonds/classes; with both, the classes split the bond list exactly)
    [[terms]]   type* = "heisenberg": bonds* = bond class, coupling* = J   (adds +J S_i.S_j per bond)
                type* = "projector-product": shape* = "plaquette-pair" | "column-of-three" |
                [[[dx, dy], [dx, dy]], ...], coupling* = Q, symmetrize = bool
                (adds -Q prod (1/4 - S_i.S_j) over the bonds of the shape); both take name = "text"
    [scan]      NAME = number | [numbers] | {start, stop, num} (num values, both ends included) |
                "expression of other scan names" (e.g. beta = "2*L");  beta* is required
    [sampling]  warmup_steps*, measure_steps*, bins* (>= 2, divides measure_steps), replicas = 1,
                checkpoint_seconds = 300, exchange = scan name of a coupling for replica exchange,
                exchange_every = 10 (Monte Carlo steps between swap attempts; only with exchange),
                exchange_ranks = at most this many MPI ranks per ladder (default: as many as help)

Numbers in ``size`` and ``coupling`` may be scan names or products such as ``"2*L"`` (see
:mod:`qmc.config.expressions`).  Every combination of the scanned values (cartesian product in file order,
first entry slowest) times ``replicas`` is one :class:`Task`.  Every problem raises
:class:`~qmc.errors.UserError` with ``where = "<file>: <key>"``, e.g. ``"configs/x.toml: terms[1].coupling"``
(``[[terms]]`` blocks are numbered from 0 in order of appearance).
"""

from __future__ import annotations

import hashlib
import itertools
import json
import math
import os
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import qmc.models as models
from qmc.config.expressions import Expression, Number, format_number, parse_expression
from qmc.errors import UserError, describe_value, did_you_mean
from qmc.models import BOUNDARIES, LATTICE_KINDS, CompiledModel, ModelError

__all__ = [
    "LATTICE_KINDS", "BOUNDARIES", "TERM_TYPES", "SHAPES",
    "RunSection", "LatticeSpec", "TermSpec", "ScanEntry", "Sampling", "Task", "RunConfig",
    "load_config", "build_model", "validate", "config_fingerprint",
]

# LATTICE_KINDS (kind -> number of size entries) and BOUNDARIES come from the models package
TERM_TYPES = ("heisenberg", "projector-product")
SHAPES = tuple(models.SHAPES)  # named shapes of projector-product terms
_EXPLICIT = "explicit"
_NEED_EVEN = ("chain", "square", "bilayer", "cubic")  # bipartite with periodic boundaries only for even L
_SECTIONS = ("run", "lattice", "terms", "scan", "sampling")
_MAX_TASKS = 100_000
_NAME_RE = re.compile(r"[A-Za-z][A-Za-z0-9_]*\Z")
_TERM_NAME_RE = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.\-]*\Z")
_RESERVED = ("replica",)

_RUN_KEYS = {"name": "free text naming the run", "output": "the run directory, relative to this file",
             "seed": "the master random seed, an integer >= 0", "description": "free text"}
_LATTICE_KEYS = {"kind": "one of " + ", ".join([*LATTICE_KINDS, _EXPLICIT]),
                 "size": 'the number of unit cells per direction, e.g. size = ["L", "L"]',
                 "boundary": "periodic or open"}
_EXPLICIT_KEYS = {"kind": "explicit", "sites": "the number of sites N", "bonds": "[[i, j], ...] site pairs",
                  "classes": "{name = [[i, j], ...], ...} named bond classes"}
_SAMPLING_KEYS = {"warmup_steps": "Monte Carlo steps discarded before measuring, an integer >= 0",
                  "measure_steps": "Monte Carlo steps measured, an integer >= 1",
                  "bins": "number of bins the measurement is split into, >= 2, dividing measure_steps",
                  "replicas": "independent copies of every parameter point, an integer >= 1",
                  "checkpoint_seconds": "seconds between checkpoints, > 0",
                  "exchange": "scan name of a coupling to exchange replicas along",
                  "exchange_every": "Monte Carlo steps between swap attempts of replica exchange, >= 1",
                  "exchange_ranks": "at most this many MPI ranks run one exchange ladder side by side, >= 1"}
_TERM_KEYS = {"heisenberg": {"type": "heisenberg", "bonds": "a bond class of the lattice, e.g. \"nn\"",
                             "coupling": "J >= 0, a number or scan name", "name": "label of the term"},
              "projector-product": {"type": "projector-product",
                                    "shape": '"plaquette-pair", "column-of-three" or '
                                             '[[[dx, dy], [dx, dy]], ...]',
                                    "coupling": "Q >= 0, a number or scan name",
                                    "symmetrize": "true (default) to add the shape rotated by 90 degrees",
                                    "name": "label of the term"}}
_HOME = {**{k: "[run]" for k in _RUN_KEYS}, **{k: "[lattice]" for k in (*_LATTICE_KEYS, *_EXPLICIT_KEYS)},
         **{k: "[sampling]" for k in _SAMPLING_KEYS}, "beta": "[scan]", "L": "[scan]",
         **{k: "a [[terms]] block" for k in ("type", "coupling", "shape", "symmetrize")}}


# ----------------------------------------------------------------------------------------------------------
# parsed sections


@dataclass(frozen=True)
class RunSection:
    """``[run]``: free-text name, output directory as written, master seed, description."""

    name: str
    output: str
    seed: int
    description: str = ""


@dataclass(frozen=True)
class LatticeSpec:
    """``[lattice]``: a built-in kind with size expressions, or an explicit bond list (kind "explicit").

    ``size`` has one expression per direction; ``size_scalar`` records that one value was given for all.
    """

    kind: str
    size: tuple[Expression, ...] = ()
    boundary: str = "periodic"
    size_scalar: bool = False
    sites: int | None = None
    bonds: tuple[tuple[int, int], ...] | None = None
    classes: dict[str, tuple[tuple[int, int], ...]] | None = None

    def size_key(self, i: int) -> str:
        """Configuration key of size entry ``i`` for messages."""
        return "lattice.size" if self.size_scalar else f"lattice.size[{i}]"


@dataclass(frozen=True)
class TermSpec:
    """One ``[[terms]]`` block; ``coupling`` is still an expression of the scan names."""

    type: str
    coupling: Expression
    bonds: str | None = None
    shape: str | tuple | None = None
    symmetrize: bool | None = None
    name: str | None = None


@dataclass(frozen=True)
class ScanEntry:
    """One ``[scan]`` entry: its ``values`` (one or more), or a derived ``expression`` of other entries."""

    name: str
    values: tuple[Number, ...] = ()
    expression: Expression | None = None

    @property
    def derived(self) -> bool:
        return self.expression is not None


@dataclass(frozen=True)
class Sampling:
    """``[sampling]``: Monte Carlo steps, binning, replicas, checkpoint interval, exchange parameter and
    the number of Monte Carlo steps between replica-exchange swap attempts (``exchange_every``) and the
    largest number of MPI ranks one ladder may use (``exchange_ranks``, None: as many as shorten its step;
    it changes where chains run, never the results, so it is not part of any fingerprint)."""

    warmup_steps: int
    measure_steps: int
    bins: int
    replicas: int = 1
    checkpoint_seconds: float = 300.0
    exchange: str | None = None
    exchange_every: int = 10
    exchange_ranks: int | None = None

    @property
    def steps_per_bin(self) -> int:
        return self.measure_steps // self.bins


@dataclass(frozen=True)
class Task:
    """One simulation: a point of the scan and a replica number, with everything resolved to numbers.

    ``terms`` are dicts whose keys other than ``type`` are the keyword arguments of the models term
    classes (``bonds``/``shape``, numeric ``coupling``, optional ``symmetrize``, ``name``).  ``explicit`` is
    ``{"sites", "bonds", "classes"}`` for an explicit lattice, else None.  The random stream of the task is
    ``stream_seed(seed, seed_key)``: it depends on the master seed and the parameter values only.
    ``exchange_group`` names the replica-exchange ladder the task belongs to (tasks that differ only in
    the exchanged parameter share it), or is None without exchange.
    """

    task_id: str
    params: dict[str, Number]
    lattice_kind: str
    size: tuple[int, ...]
    boundary: str
    terms: list[dict[str, Any]]
    beta: float
    replica: int
    sampling: Sampling
    seed_key: str
    exchange: str | None
    seed: int = 0
    exchange_group: str | None = None
    explicit: dict[str, Any] | None = None
    source: str = ""


@dataclass(eq=False)
class RunConfig:
    """A loaded configuration: parsed sections, the raw ``text`` and ``data``, the file ``path`` and the
    resolved absolute ``output_dir``."""

    path: Path
    text: str
    data: dict[str, Any]
    run: RunSection
    lattice: LatticeSpec
    terms: tuple[TermSpec, ...]
    scan: tuple[ScanEntry, ...]
    sampling: Sampling
    output_dir: Path
    _tasks: tuple[Task, ...] | None = field(default=None, repr=False)

    @property
    def name(self) -> str:
        return self.run.name

    @property
    def seed(self) -> int:
        return self.run.seed

    def where(self, key: str = "") -> str:
        """``"<file>: <key>"`` for messages."""
        return f"{self.path}: {key}" if key else str(self.path)

    def tasks(self) -> list[Task]:
        """All tasks: cartesian product of the scan entries in file order (first slowest), replicas inner."""
        if self._tasks is None:
            self._tasks = tuple(_expand(self))
        return list(self._tasks)

    def fingerprint(self) -> str:
        return config_fingerprint(self)


# ----------------------------------------------------------------------------------------------------------
# loading


def load_config(path: str | os.PathLike) -> RunConfig:
    """Read, check and expand a configuration file; raises UserError naming file, key and problem."""
    path = Path(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise UserError("configuration file not found", str(path)) from None
    except OSError as exc:
        raise UserError(f"cannot read the configuration file: {exc.strerror or exc}", str(path)) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise UserError(f"the file is not UTF-8 text (byte {exc.start})", str(path)) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise _syntax_error(path, text, exc) from None
    config = _Parser(path, text, data).parse()
    config.tasks()  # evaluates every expression for every task: all per-task errors surface here
    return config


def _syntax_error(path: Path, text: str, exc: tomllib.TOMLDecodeError) -> UserError:
    msg = str(exc)
    m = re.search(r"\s*\(at line (\d+), column (\d+)\)\s*$", msg)
    lines = text.split("\n")
    if m:
        line, col = int(m.group(1)), int(m.group(2))
        msg = msg[: m.start()]
    else:
        msg = re.sub(r"\s*\(at end of document\)\s*$", "", msg) + " at the end of the file"
        line, col = len(lines), len(lines[-1]) + 1
    snippet = lines[line - 1].strip() if 0 < line <= len(lines) else ""
    shown = f" (the line reads: {snippet[:80]})" if snippet else ""
    return UserError(f"invalid TOML: {msg}{shown}", f"{path}: line {line}, column {col}")


class _Parser:
    """Turns the TOML dictionary into the section dataclasses, checking everything that needs no task."""

    def __init__(self, path: Path, text: str, data: dict[str, Any]) -> None:
        self.path, self.text, self.data = path, text, data

    # -- helpers ------------------------------------------------------------------------------------------
    def where(self, key: str) -> str:
        return f"{self.path}: {key}"

    def fail(self, key: str, message: str) -> UserError:
        return UserError(message, self.where(key))

    def table(self, key: str, required: bool = True) -> dict[str, Any]:
        value = self.data.get(key)
        if value is None:
            if required:
                raise self.fail(key, f"missing section [{key}]")
            return {}
        if not isinstance(value, dict):
            raise self.fail(key, f"[{key}] must be a section (a table), got {describe_value(value)}")
        return value

    def check_keys(self, key: str, table: dict, allowed: dict[str, str], required: tuple[str, ...],
                   label: str) -> None:
        for k in table:
            if k not in allowed:
                hint = did_you_mean(k, allowed)
                if not hint and k in _HOME and _HOME[k] != label:
                    hint = f" ('{k}' belongs in {_HOME[k]})"
                raise self.fail(f"{key}.{k}", f"unknown key '{k}' in {label}{hint}; "
                                              f"allowed keys: {', '.join(allowed)}")
        for k in required:
            if k not in table:
                raise self.fail(f"{key}.{k}", f"missing required key '{k}' in {label} ({allowed[k]})")

    def integer(self, key: str, value: Any, minimum: int | None = None) -> int:
        if isinstance(value, float) and value.is_integer():
            value = int(value)
        if isinstance(value, bool) or not isinstance(value, int):
            raise self.fail(key, f"must be an integer, got {describe_value(value)}")
        if minimum is not None and value < minimum:
            raise self.fail(key, f"must be at least {minimum}, got {value}")
        return value

    def number(self, key: str, value: Any) -> Number:
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.fail(key, f"must be a number, got {describe_value(value)}")
        if not math.isfinite(value):
            raise self.fail(key, f"must be a finite number, got {value}")
        return value

    def string(self, key: str, value: Any) -> str:
        if not isinstance(value, str):
            raise self.fail(key, f"must be a text in quotes, got {describe_value(value)}")
        return value

    def choice(self, key: str, value: Any, choices: tuple[str, ...], what: str) -> str:
        value = self.string(key, value)
        if value not in choices:
            raise self.fail(key, f"unknown {what} {value!r}{did_you_mean(value, choices)}; "
                                 f"choose one of: {', '.join(choices)}")
        return value

    def expression(self, key: str, value: Any) -> Expression:
        return parse_expression(value, self.where(key))

    # -- sections -----------------------------------------------------------------------------------------
    def parse(self) -> RunConfig:
        for k in self.data:
            if k not in _SECTIONS:
                hint = did_you_mean(k, _SECTIONS)
                if not hint and k in _HOME:
                    hint = f" ('{k}' belongs in {_HOME[k]})"
                raise self.fail(k, f"unknown section or top-level key '{k}'{hint}; the sections are "
                                   "[run], [lattice], [[terms]], [scan] and [sampling]")
        run = self.parse_run()
        lattice = self.parse_lattice()
        terms = self.parse_terms()
        scan = self.parse_scan()
        sampling = self.parse_sampling()
        self.check_names(lattice, terms, scan, sampling)
        output_dir = Path(os.path.abspath(self.path.parent / Path(run.output).expanduser()))
        if output_dir.exists() and not output_dir.is_dir():
            raise self.fail("run.output",
                            f"{output_dir} exists and is not a directory; choose another output")
        return RunConfig(path=self.path, text=self.text, data=self.data, run=run, lattice=lattice,
                         terms=terms, scan=scan, sampling=sampling, output_dir=output_dir)

    def parse_run(self) -> RunSection:
        t = self.table("run")
        self.check_keys("run", t, _RUN_KEYS, ("seed",), "[run]")
        name = self.string("run.name", t["name"]) if "name" in t else self.path.stem
        output = self.string("run.output", t["output"]) if "output" in t else f"runs/{self.path.stem}"
        if not output.strip():
            raise self.fail("run.output", "must not be empty")
        seed = self.integer("run.seed", t["seed"], minimum=0)
        description = self.string("run.description", t["description"]) if "description" in t else ""
        return RunSection(name=name, output=output, seed=seed, description=description)

    def parse_lattice(self) -> LatticeSpec:
        t = self.table("lattice")
        if "kind" not in t:
            raise self.fail("lattice.kind",
                            f"missing required key 'kind' in [lattice] ({_LATTICE_KEYS['kind']})")
        kind = self.choice("lattice.kind", t["kind"], (*LATTICE_KINDS, _EXPLICIT), "lattice kind")
        if kind == _EXPLICIT:
            return self.parse_explicit(t)
        self.check_keys("lattice", t, _LATTICE_KEYS, ("size",), "[lattice]")
        dim = LATTICE_KINDS[kind]
        raw = t["size"]
        if isinstance(raw, list):
            if len(raw) != dim:
                raise self.fail("lattice.size", f"a {kind} lattice needs {dim} size entr"
                                                f"{'y' if dim == 1 else 'ies'}, got {len(raw)}")
            size = tuple(self.expression(f"lattice.size[{i}]", v) for i, v in enumerate(raw))
        else:
            size = (self.expression("lattice.size", raw),) * dim
        boundary = self.choice("lattice.boundary", t.get("boundary", "periodic"), BOUNDARIES, "boundary")
        return LatticeSpec(kind=kind, size=size, boundary=boundary, size_scalar=not isinstance(raw, list))

    def parse_explicit(self, t: dict) -> LatticeSpec:
        self.check_keys("lattice", t, _EXPLICIT_KEYS, ("sites",), "[lattice] (kind = \"explicit\")")
        sites = self.integer("lattice.sites", t["sites"], minimum=2)
        if "bonds" not in t and "classes" not in t:
            raise self.fail("lattice.bonds", "an explicit lattice needs bonds = [[i, j], ...] "
                                             "or classes = {name = [[i, j], ...]}")
        bonds = self.bond_list("lattice.bonds", t["bonds"], sites) if "bonds" in t else None
        classes = None
        if "classes" in t:
            if not isinstance(t["classes"], dict) or not t["classes"]:
                raise self.fail("lattice.classes", "must be a non-empty table {name = [[i, j], ...], ...}")
            classes = {}
            for name, value in t["classes"].items():
                if name == "all":
                    raise self.fail("lattice.classes.all", "the class name 'all' is reserved for all bonds")
                classes[name] = self.bond_list(f"lattice.classes.{name}", value, sites)
            if bonds is not None:
                self.check_partition(bonds, classes)
        return LatticeSpec(kind=_EXPLICIT, size=(), boundary="open", sites=sites, bonds=bonds,
                           classes=classes)

    def bond_list(self, key: str, value: Any, sites: int) -> tuple[tuple[int, int], ...]:
        if not isinstance(value, list) or not value:
            raise self.fail(key,
                            f"must be a non-empty list of [i, j] site pairs, got {describe_value(value)}")
        out = []
        for b, pair in enumerate(value):
            if (not isinstance(pair, list) or len(pair) != 2
                    or any(isinstance(s, bool) or not isinstance(s, int) for s in pair)):
                raise self.fail(f"{key}[{b}]", f"must be a pair of integer site indices [i, j], got {pair!r}")
            i, j = pair
            if not (0 <= i < sites and 0 <= j < sites):
                raise self.fail(f"{key}[{b}]", f"site index out of range 0..{sites - 1}: {pair}")
            if i == j:
                raise self.fail(f"{key}[{b}]", f"a bond must join two different sites, got {pair}")
            out.append((i, j))
        return tuple(out)

    def check_partition(self, bonds, classes) -> None:
        owner: dict[frozenset, str] = {}
        for name, members in classes.items():
            for b, pair in enumerate(members):
                k = frozenset(pair)
                if k in owner:
                    raise self.fail(f"lattice.classes.{name}[{b}]", f"bond {list(pair)} is already in class "
                                                                    f"'{owner[k]}'; with bonds given, the "
                                                                    "classes must split them exactly")
                owner[k] = name
        listed = {frozenset(p) for p in bonds}
        for name, members in classes.items():
            for b, pair in enumerate(members):
                if frozenset(pair) not in listed:
                    raise self.fail(f"lattice.classes.{name}[{b}]",
                                    f"bond {list(pair)} is not in lattice.bonds")
        for b, pair in enumerate(bonds):
            if frozenset(pair) not in owner:
                raise self.fail(f"lattice.bonds[{b}]",
                                f"bond {list(pair)} is in no class; with classes given, every bond must be "
                                "in exactly one class (or leave out bonds and list the classes only)")

    def parse_terms(self) -> tuple[TermSpec, ...]:
        raw = self.data.get("terms")
        example = 'e.g. [[terms]] type = "heisenberg", bonds = "nn", coupling = 1.0'
        if raw is None:
            raise self.fail("terms",
                            f"no [[terms]] given: the Hamiltonian needs at least one term ({example})")
        if not isinstance(raw, list) or not all(isinstance(t, dict) for t in raw):
            raise self.fail("terms", f"terms must be written as [[terms]] blocks ({example})")
        terms: list[TermSpec] = []
        names: dict[str, int] = {}
        for i, t in enumerate(raw):
            key = f"terms[{i}]"
            if "type" not in t:
                raise self.fail(f"{key}.type", f"missing required key 'type' ({' or '.join(TERM_TYPES)})")
            ttype = self.choice(f"{key}.type", t["type"], TERM_TYPES, "term type")
            allowed = _TERM_KEYS[ttype]
            for k in t:
                if k not in allowed and any(k in other for other in _TERM_KEYS.values()):
                    raise self.fail(f"{key}.{k}", f"key '{k}' does not apply to a {ttype} term")
            required = ("bonds", "coupling") if ttype == "heisenberg" else ("shape", "coupling")
            self.check_keys(key, t, allowed, required, key)
            coupling = self.expression(f"{key}.coupling", t["coupling"])
            if coupling.is_constant:
                _check_coupling(coupling.evaluate({}), self.where(f"{key}.coupling"), "")
            name = None
            if "name" in t:
                name = self.string(f"{key}.name", t["name"])
                if not _TERM_NAME_RE.match(name):
                    raise self.fail(f"{key}.name", f"{name!r} must start with a letter or digit and contain "
                                                   "only letters, digits, '_', '.' or '-'")
                if name in names:
                    raise self.fail(f"{key}.name", f"{name!r} is already the name of terms[{names[name]}]")
                names[name] = i
            if ttype == "heisenberg":
                bonds = self.string(f"{key}.bonds", t["bonds"])
                terms.append(TermSpec(type=ttype, coupling=coupling, bonds=bonds, name=name))
            else:
                shape = self.shape(f"{key}.shape", t["shape"])
                sym = None
                if "symmetrize" in t:
                    sym = t["symmetrize"]
                    if not isinstance(sym, bool):
                        raise self.fail(f"{key}.symmetrize",
                                        f"must be true or false, got {describe_value(sym)}")
                terms.append(TermSpec(type=ttype, coupling=coupling, shape=shape, symmetrize=sym, name=name))
        if not terms:
            raise self.fail("terms", f"no [[terms]] given ({example})")
        return tuple(terms)

    def shape(self, key: str, value: Any) -> str | tuple:
        if isinstance(value, str):
            return self.choice(key, value, SHAPES, "shape")
        form = ("a shape name or a list of 1 to 3 bonds [[[dx, dy], [dx, dy]], ...] (unit-cell offsets of "
                "the two sites of each bond)")
        if not isinstance(value, list) or not 1 <= len(value) <= 3:
            raise self.fail(key, f"must be {form}, got {describe_value(value)}"
                                 + (f" with {len(value)} entries" if isinstance(value, list) else ""))
        bonds = []
        for b, bond in enumerate(value):
            ok = isinstance(bond, list) and len(bond) == 2 and all(
                isinstance(p, list) and len(p) == 2
                and all(isinstance(c, int) and not isinstance(c, bool) for c in p) for p in bond)
            if not ok:
                raise self.fail(f"{key}[{b}]", "a bond of a shape is [[dx, dy], [dx, dy]] with integer "
                                               f"offsets, got {bond!r}")
            bonds.append(tuple(tuple(p) for p in bond))
        return tuple(bonds)

    def parse_scan(self) -> tuple[ScanEntry, ...]:
        t = self.table("scan", required=False)
        if "beta" not in t:
            raise self.fail("scan.beta", "missing required key 'beta' in [scan]: the inverse temperature "
                                         '(a number, a list, a range table, or an expression such as "2*L")')
        entries = []
        for name, value in t.items():
            key = f"scan.{name}"
            if not _NAME_RE.match(name):
                raise self.fail(key, f"scan name {name!r} must start with a letter and contain only "
                                     "letters, digits and '_'")
            if name in _RESERVED:
                raise self.fail(key, f"'{name}' is reserved (replicas are set by sampling.replicas)")
            if isinstance(value, str):
                entries.append(ScanEntry(name=name, expression=self.expression(key, value)))
                continue
            if isinstance(value, bool) or not isinstance(value, int | float | list | dict):
                raise self.fail(key, "must be a number, a list of numbers, a range {start, stop, num} or an "
                                     f'expression such as "2*L", got {describe_value(value)}')
            if isinstance(value, dict):
                values = self.scan_range(key, value)
            elif isinstance(value, list):
                if not value:
                    raise self.fail(key, "the list of values is empty")
                values = [self.number(f"{key}[{i}]", v) for i, v in enumerate(value)]
            else:
                values = [self.number(key, value)]
            values = [_round(v) for v in values]
            seen: dict[Number, int] = {}
            for i, v in enumerate(values):
                if v in seen:
                    raise self.fail(key, f"the value {format_number(v)} appears twice "
                                         f"(entries {seen[v]} and {i})")
                seen[v] = i
            entries.append(ScanEntry(name=name, values=tuple(values)))
        base = {e.name for e in entries if not e.derived}
        for e in entries:
            if e.derived:
                for ref in e.expression.names:
                    if ref not in t:
                        raise self.fail(f"scan.{e.name}", e.expression.unknown_name_message(ref)
                                        + did_you_mean(ref, base))
                    if ref not in base:
                        raise self.fail(f"scan.{e.name}", f"{e.expression.text!r} uses '{ref}', which is "
                                                          "itself an expression; use scanned values only")
        count = math.prod(len(e.values) for e in entries if not e.derived)
        if count > _MAX_TASKS:
            raise self.fail("scan", f"the scan has {count} parameter points; more than {_MAX_TASKS} is "
                                    "surely a mistake")
        return tuple(entries)

    def scan_range(self, key: str, value: dict) -> list[Number]:
        allowed = {"start": "first value", "stop": "last value, included", "num": "number of values, >= 1"}
        self.check_keys(key, value, allowed, ("start", "stop", "num"), key)
        start = self.number(f"{key}.start", value["start"])
        stop = self.number(f"{key}.stop", value["stop"])
        num = self.integer(f"{key}.num", value["num"], minimum=1)
        if num > _MAX_TASKS:
            raise self.fail(f"{key}.num", f"{num} values is more than the {_MAX_TASKS} allowed")
        if num == 1:
            return [start]
        values = [start + (stop - start) * k / (num - 1) for k in range(num)]
        if isinstance(start, int) and isinstance(stop, int) and all(float(v).is_integer() for v in values):
            return [int(v) for v in values]
        return [float(v) for v in values]

    def parse_sampling(self) -> Sampling:
        t = self.table("sampling")
        required = ("warmup_steps", "measure_steps", "bins")
        self.check_keys("sampling", t, _SAMPLING_KEYS, required, "[sampling]")
        warmup = self.integer("sampling.warmup_steps", t["warmup_steps"], minimum=0)
        measure = self.integer("sampling.measure_steps", t["measure_steps"], minimum=1)
        bins = self.integer("sampling.bins", t["bins"], minimum=2)
        if measure % bins:
            divisors = [d for d in range(2, measure + 1) if measure % d == 0]
            near = min(divisors, key=lambda d: (abs(d - bins), d)) if divisors else None
            hint = f" (e.g. bins = {near} gives {measure // near} steps per bin)" if near else ""
            raise self.fail("sampling.bins", f"bins = {bins} does not divide measure_steps = {measure}; "
                                             f"every bin must hold the same number of steps{hint}")
        replicas = self.integer("sampling.replicas", t.get("replicas", 1), minimum=1)
        checkpoint = self.number("sampling.checkpoint_seconds", t.get("checkpoint_seconds", 300.0))
        if checkpoint <= 0:
            raise self.fail("sampling.checkpoint_seconds", f"must be positive, got {checkpoint}")
        exchange = self.string("sampling.exchange", t["exchange"]) if "exchange" in t else None
        every = self.integer("sampling.exchange_every", t.get("exchange_every", 10), minimum=1)
        if "exchange_every" in t and exchange is None:
            raise self.fail("sampling.exchange_every", "exchange_every is set but exchange is not: name the "
                                                       'scanned coupling to exchange along (exchange = "g") '
                                                       "or remove exchange_every")
        ranks = None
        if "exchange_ranks" in t:
            ranks = self.integer("sampling.exchange_ranks", t["exchange_ranks"], minimum=1)
            if exchange is None:
                raise self.fail("sampling.exchange_ranks",
                                "exchange_ranks is set but exchange is not: name the scanned coupling to "
                                'exchange along (exchange = "g") or remove exchange_ranks')
        return Sampling(warmup_steps=warmup, measure_steps=measure, bins=bins, replicas=replicas,
                        checkpoint_seconds=float(checkpoint), exchange=exchange, exchange_every=every,
                        exchange_ranks=ranks)

    # -- cross references ---------------------------------------------------------------------------------
    def check_names(self, lattice: LatticeSpec, terms, scan, sampling: Sampling) -> None:
        entries = {e.name: e for e in scan}
        uses = [(lattice.size_key(i), e) for i, e in enumerate(lattice.size)]
        uses += [(f"terms[{i}].coupling", t.coupling) for i, t in enumerate(terms)]
        for key, expr in uses:
            for ref in expr.names:
                if ref not in entries:
                    raise self.fail(key, expr.unknown_name_message(ref) + did_you_mean(ref, entries)
                                    + "; define it in [scan]")
        used = {"beta"}
        for _, expr in uses:
            used.update(expr.names)
        for name in list(used):
            if name in entries and entries[name].derived:
                used.update(entries[name].expression.names)
        for e in scan:
            if e.name not in used:
                raise self.fail(f"scan.{e.name}", f"scan.{e.name} is never used: refer to it in "
                                                  "lattice.size, a [[terms]] coupling or beta, or remove it")
        self.check_exchange(sampling.exchange, lattice, terms, entries)

    def check_exchange(self, name: str | None, lattice: LatticeSpec, terms, entries: dict) -> None:
        if name is None:
            return
        key = "sampling.exchange"
        if name not in entries:
            raise self.fail(key, f"'{name}' is not a scan name{did_you_mean(name, entries)}")
        entry = entries[name]
        if entry.derived:
            raise self.fail(key, f"'{name}' is an expression; exchange needs a scanned coupling")
        if not any(name in t.coupling.names for t in terms):
            raise self.fail(key, f"'{name}' is not a scanned coupling: exchange needs a scan name used as a "
                                 "[[terms]] coupling")
        affected = {name} | {e.name for e in entries.values() if e.derived and name in e.expression.names}
        for i, expr in enumerate(lattice.size):
            if affected & set(expr.names):
                raise self.fail(key, f"'{name}' changes {lattice.size_key(i)}; replicas can only be "
                                     "exchanged between tasks on the same lattice")
        if "beta" in affected:
            raise self.fail(key, f"'{name}' changes beta; exchange is only along a coupling at fixed beta")
        if len(entry.values) < 2:
            raise self.fail(key, f"scan.{name} has only {len(entry.values)} value; exchange needs at least 2")


def _round(v: Number) -> Number:
    """Scan values are kept to 12 significant digits, so that ids and stored values agree exactly."""
    if isinstance(v, int):
        return v
    v = float(format(v, ".12g"))
    return 0.0 if v == 0 else v


def _check_coupling(value: Number, where: str, context: str) -> None:
    if value < 0:
        raise UserError(f"coupling = {format_number(value)}{context} is negative: only J >= 0 and Q >= 0 are "
                        "simulated without a sign problem", where)


# ----------------------------------------------------------------------------------------------------------
# tasks


def _canon(v: Number) -> str:
    """Exact, type-blind text of a number (8 and 8.0 give the same), used in seed keys and fingerprints."""
    return repr(float(v))


def _expand(config: RunConfig) -> list[Task]:
    src = str(config.path)
    base = [e for e in config.scan if not e.derived]
    derived = [e for e in config.scan if e.derived]
    exchange = config.sampling.exchange
    explicit = None
    if config.lattice.kind == _EXPLICIT:
        lat = config.lattice
        explicit = {"sites": lat.sites, "bonds": lat.bonds, "classes": lat.classes}
    tasks: list[Task] = []
    for combo in itertools.product(*(e.values for e in base)):
        values: dict[str, Number] = dict(zip((e.name for e in base), combo, strict=True))
        context = " (for " + ", ".join(f"{k}={format_number(v)}" for k, v in values.items()) + ")"
        for e in derived:
            values[e.name] = e.expression.evaluate(values, f"{src}: scan.{e.name}")
        params = {e.name: values[e.name] for e in config.scan}
        beta = values["beta"]
        if not beta > 0:
            others = ", ".join(f"{k}={format_number(v)}" for k, v in values.items() if k != "beta")
            raise UserError(f"beta = {format_number(beta)}" + (f" (for {others})" if others else "")
                            + " must be positive", f"{src}: scan.beta")
        size = _resolve_size(config, values, context)
        terms = []
        for i, t in enumerate(config.terms):
            where = f"{src}: terms[{i}].coupling"
            coupling = t.coupling.evaluate(values, where)
            _check_coupling(coupling, where, context)
            d: dict[str, Any] = {"type": t.type}
            if t.type == "heisenberg":
                d["bonds"] = t.bonds
            else:
                d["shape"] = t.shape
            d["coupling"] = float(coupling)
            if t.symmetrize is not None:
                d["symmetrize"] = t.symmetrize
            if t.name is not None:
                d["name"] = t.name
            terms.append(d)
        label = "_".join(f"{e.name}{format_number(values[e.name])}" for e in base)
        key = ";".join(f"{k}={_canon(params[k])}" for k in sorted(params))
        for r in range(config.sampling.replicas):
            p = {**params, "replica": r}
            group = None
            if exchange is not None:
                group = "_".join([*(f"{e.name}{format_number(values[e.name])}"
                                    for e in base if e.name != exchange), f"r{r}"])
            tasks.append(Task(
                task_id=f"{label}_r{r}", params=p, lattice_kind=config.lattice.kind, size=size,
                boundary=config.lattice.boundary, terms=[dict(d) for d in terms], beta=float(beta), replica=r,
                sampling=config.sampling, seed_key=f"{key};replica={r}",
                exchange=exchange, seed=config.run.seed, exchange_group=group, explicit=explicit, source=src))
    return tasks


def _resolve_size(config: RunConfig, values: dict[str, Number], context: str) -> tuple[int, ...]:
    lat = config.lattice
    if lat.kind == _EXPLICIT:
        return (lat.sites,)
    src = str(config.path)
    size = []
    for i, expr in enumerate(lat.size):
        key = lat.size_key(i)
        v = expr.evaluate(values, f"{src}: {key}")
        if isinstance(v, float):
            if not v.is_integer():
                raise UserError(f"{expr.text!r} = {format_number(v)}{context} is not an integer",
                                f"{src}: {key}")
            v = int(v)
        if v < 2:
            raise UserError(f"{expr.text!r} = {v}{context} is too small: every length must be at least 2",
                            f"{src}: {key}")
        if v % 2 and lat.boundary == "periodic" and lat.kind in _NEED_EVEN:
            raise UserError(f"{expr.text!r} = {v}{context} is odd: a periodic {lat.kind} lattice needs even "
                            "lengths to be bipartite (use an even size or boundary = \"open\")",
                            f"{src}: {key}")
        size.append(v)
    return tuple(size)


# ----------------------------------------------------------------------------------------------------------
# models


def build_model(task: Task) -> CompiledModel:
    """Compile the Hamiltonian of one task.

    A ``models.ModelError`` becomes a UserError located in the configuration file, e.g.
    ``"configs/x.toml: terms[2].bonds"`` (``[[terms]]`` blocks counted from 0).
    """
    try:
        if task.explicit is not None:
            lat = _explicit_lattice(task.explicit)
        else:
            lat = models.build_lattice(task.lattice_kind, task.size, task.boundary)
    except ModelError as exc:
        raise _located(exc.within("lattice"), task) from None
    terms = []
    for i, d in enumerate(task.terms):
        kwargs = {k: v for k, v in d.items() if k != "type"}
        cls = models.HeisenbergTerm if d["type"] == "heisenberg" else models.ProjectorProductTerm
        try:
            terms.append(cls(**kwargs))
        except ModelError as exc:
            raise _located(exc.within(f"terms[{i}]"), task) from None
    try:
        return models.compile_model(lat, terms)
    except ModelError as exc:
        raise _located(exc, task) from None


def _explicit_lattice(spec: dict) -> models.Lattice:
    n, bonds, classes = spec["sites"], spec["bonds"], spec["classes"]
    if classes is None:
        return models.Lattice.from_bonds(n, [list(b) for b in bonds])
    if bonds is None:
        return models.Lattice.from_bonds(n, {k: [list(b) for b in v] for k, v in classes.items()})
    owner = {frozenset(b): name for name, members in classes.items() for b in members}
    return models.Lattice.from_bonds(n, [list(b) for b in bonds], [owner[frozenset(b)] for b in bonds])


def _located(exc: ModelError, task: Task) -> UserError:
    key = exc.where or ""
    if task.explicit is not None:  # models names a class of the bond mapping as bonds['name']
        key = re.sub(r"^lattice\.bonds\['([^']*)'\]", r"lattice.classes.\1", key)
    where = f"{task.source}: {key}" if key else task.source
    return UserError(f"{exc.message} (task {task.task_id})", where)


def validate(config: RunConfig) -> int:
    """Build every distinct model of the run once, so that model errors surface before any run starts.

    Returns the number of distinct models built.
    """
    seen: set[str] = set()
    for task in config.tasks():
        key = json.dumps([task.lattice_kind, task.size, task.boundary, task.explicit, task.terms],
                         sort_keys=True, default=list)
        if key not in seen:
            seen.add(key)
            build_model(task)
    return len(seen)


# ----------------------------------------------------------------------------------------------------------
# fingerprint


def config_fingerprint(config: RunConfig) -> str:
    """SHA-256 (hex) of the semantic content: everything that changes a task's id, model or random stream.

    Comments, layout, key order outside [scan], ``run.name``, ``run.description``, ``run.output`` and
    ``sampling.checkpoint_seconds`` do not enter; numbers enter by value (1 and 1.0 are the same).
    ``sampling.exchange_every`` enters only with ``sampling.exchange`` set (so fingerprints of runs without
    replica exchange are those of earlier releases).
    """
    lat = config.lattice
    s = config.sampling
    content = {
        "seed": config.run.seed,
        "lattice": {"kind": lat.kind, "size": [e.canonical for e in lat.size], "boundary": lat.boundary,
                    "sites": lat.sites, "bonds": lat.bonds, "classes": lat.classes},
        "terms": [{"type": t.type, "coupling": t.coupling.canonical, "bonds": t.bonds, "shape": t.shape,
                   "symmetrize": bool(t.symmetrize), "name": t.name} for t in config.terms],
        "scan": [[e.name, e.expression.canonical if e.derived else [_canon(v) for v in e.values]]
                 for e in config.scan],
        "sampling": {"warmup_steps": s.warmup_steps, "measure_steps": s.measure_steps, "bins": s.bins,
                     "replicas": s.replicas, "exchange": s.exchange},
    }
    if s.exchange is not None:
        content["sampling"]["exchange_every"] = s.exchange_every
    text = json.dumps(content, sort_keys=True, separators=(",", ":"), default=list)
    return hashlib.sha256(text.encode()).hexdigest()
