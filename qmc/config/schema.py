"""The configuration schema: sections, keys, their meaning, and the parsed form of each section.

Sections and keys (``*`` marks required ones)::

    [run]       name = "text" (default: file stem), output = "runs/x" (run directory, relative to the
                config file; default "runs/<file stem>"), seed* = master seed (integer >= 0),
                description = "text"
    [model]     colors = N (colours per site, an integer from 2 to 100 or a scan name; default 2: S = 1/2
                spins; N > 2: SU(N), fundamental representation on sublattice A, conjugate on B)
    [lattice]   kind* = chain | square | bilayer | honeycomb | cubic, size* = [numbers or scan names]
                (one entry per direction, or a single value for all), boundary = periodic | open, or one
                of them per direction (e.g. ["open", "periodic"])
                or: kind* = "explicit", sites* = N, bonds = [[i, j], ...], classes = {name = [[i, j], ...]}
                (at least one of bonds/classes; with both, the classes split the bond list exactly)
    [[terms]]   type* = "heisenberg": bonds* = bond class, coupling* = J   (adds +J S_i.S_j per bond;
                colors = 2 only)
                type* = "projector": bonds* = bond class, coupling* = J   (adds -J P_ij per bond)
                type* = "projector-product": shape* = "plaquette-pair" | "column-of-three" |
                [[[dx, dy], [dx, dy]], ...] (one offset entry per lattice direction), coupling* = Q,
                symmetrize = bool (adds -Q prod P_ij over the bonds of the shape)
                type* = "xxz": bonds* = bond class, coupling* = J, delta* = anisotropy
                (adds J (S^x S^x + S^y S^y + delta S^z S^z) per bond; J < 0 allowed where sign-free;
                colors = 2 only)
                type* = "field": coupling* = h, staggered = bool (adds -h sum_i S^z_i, or with staggered
                -h sum_i phi_i S^z_i; colors = 2 only); every type takes name = "text".
                P_ij is the singlet projector (1/4 - S_i.S_j for two colours).
    [scan]      NAME = number | [numbers] | {start, stop, num} (num values, both ends included) |
                "expression of other scan names" (e.g. beta = "2*L");  beta* is required
    [sampling]  warmup_steps*, measure_steps* (the upper limit when a target is set), bins* (>= 2, divides
                measure_steps), copies = 1, checkpoint_seconds = 300,
                target = {observable = absolute error | "x%" (relative error), ...} (needs bins >= 64)
    [exchange]  along* = scan name of a coupling (replica exchange between its values), every = 10
                (Monte Carlo steps between swap attempts), max_ranks = at most this many MPI ranks per
                ladder (default: as many as shorten its step)
    [ground_state]  start_beta*, max_beta* (>= 4 start_beta), observables = ["energy"] (bin observables
                compared between beta and 2 beta); with it, [scan] has no beta and there is no [exchange]
    [domain_wall] walls* = ["pi/2", "pi"] (one or both), pattern = "columnar", pin = 2.0 (> 0): every scan
                point becomes the reference task (wall "none") plus one task per wall, and "none-x" when
                "pi/2" is asked for (the edges, :mod:`qmc.models.walls`); square lattice with boundary =
                ["open", "periodic"], S = 1/2 models of heisenberg, projector and projector-product terms
                (colors = 2, no xxz or field terms) only

Keys of earlier releases (:data:`RENAMED_KEYS`) are refused with a message naming their replacement.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import qmc.models as models
from qmc.config.expressions import Expression, Number, format_number
from qmc.errors import UserError
from qmc.models import BOUNDARIES, LATTICE_KINDS

__all__ = [
    "LATTICE_KINDS", "BOUNDARIES", "TERM_TYPES", "SHAPES", "EXPLICIT", "SECTIONS", "MAX_TASKS",
    "MIN_TARGET_BINS",
    "COPY_PARAM", "RESERVED_NAMES", "RENAMED_KEYS", "NAME_RE", "TERM_NAME_RE",
    "RUN_KEYS", "LATTICE_KEYS", "EXPLICIT_KEYS", "SAMPLING_KEYS", "EXCHANGE_KEYS", "GROUND_STATE_KEYS",
    "TERM_KEYS", "HOME", "MODEL_KEYS", "SIGNED_TERMS", "DOMAIN_WALL_KEYS", "WALL_PARAM", "ModelSection",
    "RunSection", "LatticeSpec", "TermSpec", "ScanEntry", "Sampling", "GroundState", "DomainWallSpec",
    "check_coupling", "ESTIMATORS", "DEFAULT_ESTIMATORS",
]

# LATTICE_KINDS (kind -> number of size entries) and BOUNDARIES come from the models package
TERM_TYPES = ("heisenberg", "projector", "projector-product", "xxz", "field")
SIGNED_TERMS = ("xxz", "field")
"""Term types whose coupling may be negative (the model compiler checks the sign structure)."""
SHAPES = tuple(models.SHAPES)  # named shapes of projector-product terms
EXPLICIT = "explicit"
SECTIONS = ("run", "model", "lattice", "terms", "scan", "sampling", "exchange", "ground_state", "domain_wall")
MAX_TASKS = 100_000
MIN_TARGET_BINS = 64
"""A precision target is judged from this many bins on (:mod:`qmc.chain.target`): with 64 bins the plateau
rule of the binning analysis has two levels of at least 32 blocks, the fewest on which it can find one."""
COPY_PARAM = "copy"
"""Parameter name of the copy index (0 .. copies-1) in a task's ``params``."""
WALL_PARAM = "wall"
"""Parameter name of a domain-wall task's wall (``"none"``, ``"pi/2"``, ``"pi"``, ``"none-x"``)."""
RESERVED_NAMES = {
    COPY_PARAM: "independent copies are numbered by 'copy', set by sampling.copies",
    WALL_PARAM: "the tasks of [domain_wall] are told apart by 'wall'",
    "replica": "task files of earlier releases number their independent copies by 'replica'",
}
"""Scan names a configuration may not use, with the reason."""

RENAMED_KEYS = {
    ("sampling", "replicas"): "[sampling] copies",
    ("sampling", "exchange"): "[exchange] along",
    ("sampling", "exchange_every"): "[exchange] every",
    ("sampling", "exchange_ranks"): "[exchange] max_ranks",
}
"""(section, old key) -> its replacement: keys of earlier releases, refused with this name."""

MODEL_KEYS = {"colors": "colours per site: 2 (S = 1/2 spins, the default) or N > 2 for SU(N), an integer "
                        "or a scan name"}
RUN_KEYS = {"name": "free text naming the run", "output": "the run directory, relative to this file",
            "seed": "the master random seed, an integer >= 0", "description": "free text"}
LATTICE_KEYS = {"kind": "one of " + ", ".join([*LATTICE_KINDS, EXPLICIT]),
                "size": 'the number of unit cells per direction, e.g. size = ["L", "L"]',
                "boundary": 'periodic or open, or one per direction, e.g. ["open", "periodic"]'}
EXPLICIT_KEYS = {"kind": "explicit", "sites": "the number of sites N", "bonds": "[[i, j], ...] site pairs",
                 "classes": "{name = [[i, j], ...], ...} named bond classes"}
SAMPLING_KEYS = {"warmup_steps": "Monte Carlo steps discarded before measuring, an integer >= 0",
                 "measure_steps": "Monte Carlo steps measured (at most, with a target), an integer >= 1",
                 "bins": "number of bins the measurement is split into, >= 2, dividing measure_steps",
                 "copies": "independent copies of every parameter point (own streams), an integer >= 1",
                 "checkpoint_seconds": "seconds between checkpoints, > 0",
                 "target": 'error bars to reach, e.g. {energy = 1e-4, m_stag2 = "0.5%"} (absolute, or '
                           'relative with %)',
                 "estimators": '"improved" (default: loop estimators where the loops are updated '
                               'independently) or "plain"'}
ESTIMATORS = ("improved", "plain")
"""Values of ``[sampling] estimators``: how the order-parameter observables are measured."""
DEFAULT_ESTIMATORS = "improved"
EXCHANGE_KEYS = {"along": "scan name of the coupling whose values exchange configurations",
                 "every": "Monte Carlo steps between swap attempts, an integer >= 1",
                 "max_ranks": "at most this many MPI ranks run one exchange ladder side by side, >= 1"}
DOMAIN_WALL_KEYS = {"walls": 'the walls to run beside the reference, e.g. ["pi/2", "pi"]',
                    "pattern": 'the valence-bond pattern pinned at the edges: "columnar"',
                    "pin": "factor (> 0) on the couplings of the edge terms that carry the pattern"}
GROUND_STATE_KEYS = {"start_beta": "the first inverse temperature, > 0",
                     "max_beta": "the largest inverse temperature, >= 4 start_beta",
                     "observables": 'bin observables that must agree between beta and 2 beta, e.g. '
                                    '["energy", "m_stag2"]'}
TERM_KEYS = {"heisenberg": {"type": "heisenberg", "bonds": "a bond class of the lattice, e.g. \"nn\"",
                            "coupling": "J >= 0, a number or scan name", "name": "label of the term"},
             "projector": {"type": "projector", "bonds": "a bond class of the lattice, e.g. \"nn\"",
                           "coupling": "J >= 0, a number or scan name", "name": "label of the term"},
             "projector-product": {"type": "projector-product",
                                   "shape": '"plaquette-pair", "column-of-three" or '
                                            '[[[dx, dy], [dx, dy]], ...] (one entry per direction)',
                                   "coupling": "Q >= 0, a number or scan name",
                                   "symmetrize": "true (default) to add the shape rotated by 90 degrees",
                                   "name": "label of the term"},
             "xxz": {"type": "xxz", "bonds": "a bond class of the lattice, e.g. \"nn\"",
                     "coupling": "J, a number or scan name (J > 0 antiferromagnetic, J < 0 ferromagnetic xy)",
                     "delta": "anisotropy delta of the S^z S^z part, a number or scan name",
                     "name": "label of the term"},
             "field": {"type": "field", "coupling": "h, a number or scan name (-h sum_i S^z_i)",
                       "staggered": "true for the staggered field -h sum_i phi_i S^z_i (default false)",
                       "name": "label of the term"}}
HOME = {**{k: "[run]" for k in RUN_KEYS}, **{k: "[model]" for k in MODEL_KEYS},
        **{k: "[lattice]" for k in (*LATTICE_KEYS, *EXPLICIT_KEYS)},
        **{k: "[sampling]" for k in SAMPLING_KEYS}, **{k: "[exchange]" for k in EXCHANGE_KEYS},
        **{k: "[ground_state]" for k in GROUND_STATE_KEYS},
        **{k: "[domain_wall]" for k in DOMAIN_WALL_KEYS},
        "beta": "[scan]", "L": "[scan]",
        **{k: "a [[terms]] block" for k in ("type", "coupling", "shape", "symmetrize", "delta", "staggered")}}
"""Key -> the section it belongs in, for messages about a key in the wrong place."""

NAME_RE = re.compile(r"[A-Za-z][A-Za-z0-9_]*\Z")  # scan names
TERM_NAME_RE = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.\-]*\Z")  # term labels


@dataclass(frozen=True)
class RunSection:
    """``[run]``: free-text name, output directory as written, master seed, description."""

    name: str
    output: str
    seed: int
    description: str = ""


@dataclass(frozen=True)
class ModelSection:
    """``[model]``: ``colors``, the number of colours per site (an expression of the scan names; None: the
    section or key is absent, i.e. 2 colours)."""

    colors: Expression | None = None


@dataclass(frozen=True)
class LatticeSpec:
    """``[lattice]``: a built-in kind with size expressions, or an explicit bond list (kind "explicit").

    ``size`` has one expression per direction; ``size_scalar`` records that one value was given for all.
    ``boundary`` is one word for all directions or, when they differ, one per direction.
    """

    kind: str
    size: tuple[Expression, ...] = ()
    boundary: str | tuple[str, ...] = "periodic"
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
    delta: Expression | None = None
    staggered: bool | None = None


@dataclass(frozen=True)
class ScanEntry:
    """One ``[scan]`` entry: its ``values`` (one or more), a derived ``expression`` of other entries, or
    ``choices``, a list of expressions of other entries (e.g. ``beta = ["L", "2*L"]``): one task for each
    of them at every point of the other entries."""

    name: str
    values: tuple[Number, ...] = ()
    expression: Expression | None = None
    choices: tuple[Expression, ...] = ()

    @property
    def derived(self) -> bool:
        return self.expression is not None

    @property
    def needs(self) -> tuple[str, ...]:
        """The scan names its expression or choices use."""
        exprs = (self.expression,) if self.expression is not None else self.choices
        return tuple(dict.fromkeys(n for e in exprs for n in e.names))

    @property
    def count(self) -> int:
        """Tasks it multiplies the scan by: its number of values or choices (1 when derived)."""
        return len(self.choices) if self.choices else (1 if self.derived else len(self.values))


@dataclass(frozen=True)
class Sampling:
    """``[sampling]`` and ``[exchange]``: how every chain is run.

    ``copies`` independent copies of every parameter point, Monte Carlo steps and binning, checkpoint
    interval in seconds.  ``target``: the precision target, goals ``(observable, value, relative)`` (see
    :mod:`qmc.chain.target`; a relative value is a fraction of |mean|), empty without one; it decides when
    a chain stops, never what its bins are, so it enters no task fingerprint.  From ``[exchange]``:
    ``exchange`` = the scan name exchanged along (``along``;
    None without replica exchange), ``exchange_every`` = Monte Carlo steps between swap attempts
    (``every``), ``exchange_ranks`` = the largest number of MPI ranks one ladder may use (``max_ranks``;
    None: as many as shorten its step; it changes where chains run, never the results, so it is not part
    of any fingerprint).  ``estimators``: "improved" measures chi_uniform, m_stag2, m_stag4, chi_stag, s_q
    and s_q_shifted with the loop estimators wherever the model's loops are updated independently (every
    model without xxz or field terms), "plain" always with the plain ones; it changes the bins, never the
    chain, and enters the task fingerprint only where it changes the bins.
    """

    warmup_steps: int
    measure_steps: int
    bins: int
    copies: int = 1
    checkpoint_seconds: float = 300.0
    exchange: str | None = None
    exchange_every: int = 10
    exchange_ranks: int | None = None
    target: tuple[tuple[str, float, bool], ...] = ()
    estimators: str = DEFAULT_ESTIMATORS

    @property
    def steps_per_bin(self) -> int:
        return self.measure_steps // self.bins


@dataclass(frozen=True)
class DomainWallSpec:
    """``[domain_wall]``: the ``walls`` asked for (in :data:`qmc.models.WALLS` order), the edge ``pattern``
    and the factor ``pin``; :attr:`tasks` lists the wall of every task of a scan point."""

    walls: tuple[str, ...]
    pattern: str = "columnar"
    pin: float = 2.0

    @property
    def tasks(self) -> tuple[str, ...]:
        """The wall of every task of one scan point: reference ``none`` first, ``none-x`` with ``pi/2``."""
        extra = ("none-x",) if "pi/2" in self.walls else ()
        return ("none", *self.walls, *extra)


@dataclass(frozen=True)
class GroundState:
    """``[ground_state]``: beta doubling from ``start_beta`` up to at most ``max_beta``, until the bin
    ``observables`` at beta and 2 beta agree (:mod:`qmc.chain.doubling`, :mod:`qmc.chain.convergence`)."""

    start_beta: float
    max_beta: float
    observables: tuple[str, ...] = ("energy",)


def check_coupling(value: Number, where: str, context: str) -> None:
    """Refuse a negative coupling: J < 0 or Q < 0 gives negative weights (a sign problem)."""
    if value < 0:
        raise UserError(f"coupling = {format_number(value)}{context} is negative: only J >= 0 and Q >= 0 are "
                        "simulated without a sign problem", where)
