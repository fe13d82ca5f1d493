"""Compile a lattice and a list of user terms into the engine's :class:`~models.compiled.CompiledModel`.

Every term entry becomes one *group*, of one vertex kind (``group_kind``, see
:data:`~models.compiled.VERTEX_KINDS`):

* ``HeisenbergTerm(bonds, J)``: ``J S_i.S_j = J/4 - J P_ij``, so each bond of the class gives a k = 1 term
  with ``C_t = J`` and the group constant is ``J/4 * n_bonds``;
* ``ProjectorTerm(bonds, J)``: each bond of the class gives a k = 1 term with ``C_t = J``; constant 0;
* ``ProjectorProductTerm(shape, Q)``: each placement gives a k-bond term with ``C_t = Q``; constant 0.

* ``XXZTerm(bonds, J, delta)``: each bond a k = 1 term of the ``"directed"`` kind with ``C_t = J`` and its
  row (J, delta, h_i, h_j, C_b) in ``term_xxz``; the group constant is sum_b C_b (:mod:`models.directed`);
* ``FieldTerm(h, staggered)``: no operators; its field is folded into the directed bonds touching each site
  (``group_field`` records the shares).  In a model with a field, ``heisenberg`` terms become directed
  bonds with delta = 1 so that every site can carry its share.

With ``colours = 2`` (S = 1/2 spins, the default) the groups are of the ``"projector"`` kind, except those of
the ``"directed"`` kind above.  With ``colours = N > 2`` (SU(N): N colours per site, fundamental
representation on sublattice A, conjugate on B) every group is of the ``"colour"`` kind; ``P_ij`` is then the
SU(N) singlet projector, and a Heisenberg, XXZ or field term (defined through S = 1/2 spin operators) is
refused (a Heisenberg term with a pointer to ``ProjectorTerm``).

Sign-problem guard (the decomposition ``H = E_const - sum_t C_t prod P`` is sign-free when every
``C_t > 0`` and every bond joins opposite sublattices): J must be > 0 and Q >= 0; a zero coupling drops
the term's operators but keeps its group (constant 0).  An ``xxz`` J may be negative (ferromagnetic in
the xy plane) on any bonds; then :func:`models.directed.check_gauge` checks that all hops can be made
positive.  Any violation raises :class:`ModelError` naming
the term (index and group name) and, for a bond, its sites.

Bonds are deduplicated into ``bond_sites`` by (site0, site1, displacement), in order of first use, so a
bond shared by several terms (an ``nn`` Heisenberg bond inside a ``plaquette-pair``) appears once.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Sequence

import numpy as np

from . import directed
from .compiled import KIND_COLOUR, KIND_DIRECTED, KIND_PROJECTOR, CompiledModel
from .errors import ModelError
from .lattice import Lattice
from .shapes import parse_shape, place_shape
from .terms import FieldTerm, HeisenbergTerm, ProjectorProductTerm, ProjectorTerm, Term, XXZTerm

__all__ = ["compile_model", "group_names", "MAX_COLOURS"]

_MAX_NAME = 64  # group names are stored as 64-byte strings (CompiledModel.to_arrays)
_TERMS = (HeisenbergTerm, ProjectorTerm, ProjectorProductTerm, XXZTerm, FieldTerm)
MAX_COLOURS = 100
"""The largest number of colours per site (the engine stores a colour, plus one, in a byte)."""


def compile_model(lattice: Lattice, terms: Sequence[Term], colours: int = 2) -> CompiledModel:
    """Validate ``terms`` on ``lattice`` with ``colours`` colours per site (2: S = 1/2 spins; N > 2: SU(N))
    and flatten them into a CompiledModel (see module docstring)."""
    if not isinstance(lattice, Lattice):
        raise ModelError(f"expected a Lattice, got {type(lattice).__name__}", "lattice")
    if (isinstance(colours, bool) or not isinstance(colours, numbers.Integral)
            or not 2 <= colours <= MAX_COLOURS):
        raise ModelError(f"the number of colours per site must be an integer from 2 to {MAX_COLOURS}, got "
                         f"{colours!r}", "colors")
    colours = int(colours)
    if isinstance(terms, _TERMS):
        terms = [terms]
    terms = list(terms)
    if not terms:
        raise ModelError("the model has no terms", "terms")
    names = group_names(terms)
    sites_parts, disp_parts, couplings, groups, k_per_term = [], [], [], [], []
    constants = np.zeros(len(terms))
    fielded = any(isinstance(term, FieldTerm) for term in terms)
    kinds = [_kind(term, fielded, colours) for term in terms]
    site_field = np.zeros((len(terms), lattice.n_sites))
    deltas, hops = [], []
    for t, term in enumerate(terms):
        label = f"term {t} ({names[t]!r})"
        if colours > 2 and isinstance(term, HeisenbergTerm):
            raise ModelError(f"{label}: a heisenberg term (S_i.S_j of S = 1/2 spins) needs 2 colours, "
                             f"not {colours}; for SU({colours}) write it as a projector term, -J sum P_ij "
                             "(for two colours that is J S_i.S_j - J/4)", f"terms[{t}].type")
        if colours > 2 and isinstance(term, XXZTerm | FieldTerm):
            kind = "an xxz" if isinstance(term, XXZTerm) else "a field"
            raise ModelError(f"{label}: {kind} term (S = 1/2 spin operators) needs 2 colours, not {colours}",
                             f"terms[{t}].type")
        if isinstance(term, FieldTerm):
            site_field[t] = _field(lattice, term, t)
            continue
        try:
            sites, disp, coupling = _expand(lattice, term)
        except ModelError as err:
            raise ModelError(f"{label}: {err.message}", err.where).within(f"terms[{t}]") from None
        sub = lattice.sublattice
        same = np.flatnonzero(np.any(sub[sites[..., 0]] == sub[sites[..., 1]], axis=1))
        if same.size and coupling >= 0.0:
            i, j = sites[same[0]][np.argmax(sub[sites[same[0], :, 0]] == sub[sites[same[0], :, 1]])]
            raise ModelError(f"{label}: bond ({i}, {j}) joins two sites of the same sublattice; such a term "
                             "has a sign problem", f"terms[{t}].{_bond_field(term)}")
        if coupling == 0.0:
            continue
        if sites.shape[0] == 0:
            raise ModelError(f"{label}: no bonds of this term fit on the {_describe(lattice)} lattice",
                             f"terms[{t}].{_bond_field(term)}")
        if isinstance(term, HeisenbergTerm) and kinds[t] == KIND_PROJECTOR:
            constants[t] = 0.25 * coupling * sites.shape[0]
        deltas.append(np.full(sites.shape[0], getattr(term, "delta", 1.0)))
        hops.append((sites, coupling > 0.0, label, f"terms[{t}].coupling"))
        sites_parts.append(sites.reshape(-1, 2))
        disp_parts.append(disp.reshape(sites.shape[0] * sites.shape[1], lattice.n_dirs))
        couplings.append(np.full(sites.shape[0], coupling))
        groups.append(np.full(sites.shape[0], t, np.int32))
        k_per_term.append(np.full(sites.shape[0], sites.shape[1], np.int32))
    if not couplings:
        raise ModelError("every coupling is zero, so the model has no operators", "terms")

    all_sites, all_disp = np.concatenate(sites_parts), np.concatenate(disp_parts)
    first, bond_of = _first_use_ids(all_sites, all_disp, lattice.n_sites)
    k = np.concatenate(k_per_term)
    term_group = np.concatenate(groups)
    group_kind = np.array(kinds, dtype=np.int8)
    term_xxz, group_field = _directed_tables(lattice, terms, names, constants, site_field, group_kind,
                                             term_group, np.concatenate(couplings), np.concatenate(deltas),
                                             all_sites, k, hops)
    dir_lengths = np.ascontiguousarray(lattice.dir_lengths, dtype=np.float64)
    return CompiledModel(
        n_sites=lattice.n_sites,
        phase=np.where(lattice.sublattice == 0, 1, -1).astype(np.int8),
        bond_sites=np.ascontiguousarray(all_sites[first], dtype=np.int32),
        bond_disp=np.ascontiguousarray(all_disp[first], dtype=np.float64),
        dir_names=tuple(lattice.dir_names),
        dir_lengths=dir_lengths,
        site_coords=np.ascontiguousarray(lattice.coords, dtype=np.float64),
        term_start=np.concatenate([[0], np.cumsum(k)]).astype(np.int32),
        term_bonds=bond_of.astype(np.int32),
        term_coupling=np.concatenate(couplings),
        term_group=term_group,
        group_names=tuple(names),
        group_constant=constants,
        group_kind=group_kind,
        n_colours=colours,
        term_xxz=term_xxz,
        group_field=group_field,
        vbs_bonds=np.ascontiguousarray(lattice.vbs_bonds, dtype=np.int32),
        vbs_dir=np.ascontiguousarray(lattice.vbs_dir, dtype=np.int8),
        vbs_phase=np.ascontiguousarray(lattice.vbs_phase, dtype=np.int8),
        n_vbs_dirs=int(lattice.n_vbs_dirs),
        linear_size=int(dir_lengths[0]) if dir_lengths.size else 0,
        open_boundaries=lattice.open_boundaries,
        lattice_kind=lattice.kind,
        extra={"size": tuple(lattice.size), "boundary": lattice.boundary},
    )


def group_names(terms: Sequence[Term]) -> list[str]:
    """One unique group name per term: ``name``, else the bond class, else ``"q<k>"``.

    A name that is already taken gets a suffix: ``"x"``, ``"x#2"``, ``"x#3"``...
    """
    raw = []
    for t, term in enumerate(terms):
        if not isinstance(term, _TERMS):
            raise ModelError(f"expected a HeisenbergTerm, ProjectorTerm, ProjectorProductTerm, XXZTerm or "
                             f"FieldTerm, got {type(term).__name__}", f"terms[{t}]")
        if term.name is not None:
            raw.append(term.name)
        elif isinstance(term, FieldTerm):
            raw.append("field_stag" if term.staggered is True else "field")
        elif isinstance(term, HeisenbergTerm | ProjectorTerm | XXZTerm):
            raw.append(term.bonds if isinstance(term.bonds, str) else "bonds")
        else:
            try:
                raw.append(f"q{len(parse_shape(term.shape)[1])}")
            except ModelError:  # reported, with the term's location, when the term is expanded
                raw.append("q")
    out: list[str] = []
    for t, name in enumerate(raw):
        if not (isinstance(name, str) and name and name.isascii() and name.isprintable() and "/" not in name):
            raise ModelError(f"a term name must be a non-empty printable ASCII string without '/', "
                             f"got {name!r}", f"terms[{t}].name")
        unique, n = name, 1
        while unique in out or (n > 1 and unique in raw):
            n += 1
            unique = f"{name}#{n}"
        if len(unique) > _MAX_NAME:
            raise ModelError(f"a term name may have at most {_MAX_NAME} characters, got {len(unique)}",
                             f"terms[{t}].name")
        out.append(unique)
    return out


def _expand(lattice: Lattice, term: Term) -> tuple[np.ndarray, np.ndarray, float]:
    """(sites int[P, k, 2], disp float[P, k, D], coupling) of one validated term."""
    if isinstance(term, HeisenbergTerm | ProjectorTerm | XXZTerm):
        if not isinstance(term.bonds, str):
            raise ModelError(f"bonds must be the name of a bond class, got {term.bonds!r}", "bonds")
        if isinstance(term, XXZTerm):
            coupling = _real(term.coupling, "coupling")
            _real(term.delta, "delta")
        else:
            coupling = _coupling(term.coupling, strict=isinstance(term, HeisenbergTerm), symbol="J")
        try:
            sites, disp = lattice.bonds(term.bonds)
        except ModelError as err:
            raise ModelError(err.message, "bonds") from None
        return sites[:, None, :], disp[:, None, :], coupling
    coupling = _coupling(term.coupling, strict=False)
    if not isinstance(term.symmetrize, bool | np.bool_):
        raise ModelError(f"symmetrize must be true or false, got {term.symmetrize!r}", "symmetrize")
    sites, disp = place_shape(lattice, term.shape, bool(term.symmetrize))
    return sites, disp, coupling


def _real(value, where: str) -> float:
    """A finite real number of either sign."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value):
        raise ModelError(f"{where} must be a finite real number, got {value!r}", where)
    return float(value)


def _field(lattice: Lattice, term: FieldTerm, t: int) -> np.ndarray:
    """h (or h phi_i) on every site for a validated field term."""
    h = _real(term.coupling, f"terms[{t}].coupling")
    if not isinstance(term.staggered, bool | np.bool_):
        raise ModelError(f"staggered must be true or false, got {term.staggered!r}", f"terms[{t}].staggered")
    phi = np.where(lattice.sublattice == 0, 1.0, -1.0)
    return h * phi if term.staggered else np.full(lattice.n_sites, h)


def _directed_tables(lattice: Lattice, terms: Sequence[Term], names: list[str], constants: np.ndarray,
                     site_field: np.ndarray, group_kind: np.ndarray, term_group: np.ndarray,
                     coupling: np.ndarray, delta: np.ndarray, sites: np.ndarray, k: np.ndarray,
                     hops: list) -> tuple[np.ndarray | None, np.ndarray | None]:
    """term_xxz and group_field of a model with directed terms (None, None without); adds each directed
    group's sum of C_b to ``constants`` and checks the field's bonds and the hops' gauge."""
    if not np.any(group_kind == KIND_DIRECTED):
        return None, None
    n = lattice.n_sites
    if any(c < 0.0 for c in coupling[group_kind[term_group] == KIND_DIRECTED]):
        directed.check_gauge(n, hops)
    rows = np.flatnonzero(group_kind[term_group] == KIND_DIRECTED)
    start = np.concatenate([[0], np.cumsum(k)])[rows]
    bond_sites = sites[start]
    total = site_field.sum(axis=0)
    lonely = directed.unfolded_sites(n, bond_sites, total)
    if lonely.size:
        t = int(np.flatnonzero(site_field[:, lonely[0]])[0])
        raise ModelError(f"term {t} ({names[t]!r}): site {int(lonely[0])} has a field but no xxz or "
                         "heisenberg bond to carry it; the directed loops fold the field into those bonds",
                         f"terms[{t}].coupling")
    h_i, h_j = directed.fold_fields(n, bond_sites, total)
    J, D = coupling[rows], delta[rows]
    C = directed.bond_constant(J, D, h_i, h_j)
    term_xxz = np.zeros((coupling.size, 5))
    term_xxz[rows] = np.column_stack([J, D, h_i, h_j, C])
    group_field = -site_field
    for g in np.unique(term_group[rows]):
        mine = np.flatnonzero(term_group[rows] == g)  # positions in rows
        constants[g] += float(np.sum(C[mine]))
        np.add.at(group_field[g], bond_sites[mine, 0], h_i[mine])
        np.add.at(group_field[g], bond_sites[mine, 1], h_j[mine])
    return term_xxz, group_field


def _coupling(value, strict: bool, symbol: str = "Q") -> float:
    """A finite real coupling, > 0 (Heisenberg J) or >= 0 (projector J or Q); zero is allowed for all."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value):
        raise ModelError(f"the coupling must be a finite real number, got {value!r}", "coupling")
    value = float(value)
    if value < 0.0:
        what = ("a negative (ferromagnetic) Heisenberg J" if strict
                else f"a negative projector coupling {symbol}")
        use = "J > 0" if strict else f"{symbol} >= 0"
        raise ModelError(f"{what} = {value} has a sign problem in this formulation; use {use} (or 0 to "
                         "switch the term off)", "coupling")
    return value


def _first_use_ids(sites: np.ndarray, disp: np.ndarray, n_sites: int) -> tuple[np.ndarray, np.ndarray]:
    """Distinct bonds (site0, site1, disp): their first-use row indices in order, and each row's bond id."""
    m = sites.shape[0]
    pair = sites[:, 0].astype(np.int64) * n_sites + sites[:, 1]
    order = np.argsort(pair, kind="stable")  # within equal keys the first use comes first
    new = np.ones(m, dtype=bool)
    sorted_pair = pair[order]
    new[1:] = sorted_pair[1:] != sorted_pair[:-1]
    sorted_disp = disp[order]
    if disp.shape[1] and np.any(np.any(sorted_disp[1:] != sorted_disp[:-1], axis=1) & ~new[1:]):
        # rare: one site pair with several displacements (a long bond on a small torus); sort by all
        keys = np.column_stack([pair, disp])
        order = np.lexsort(keys.T[::-1])
        new[1:] = np.any(keys[order[1:]] != keys[order[:-1]], axis=1)
    first = order[new]  # one per distinct bond, in sorted-key order
    rank = np.empty(first.size, dtype=np.int64)
    rank[np.argsort(first, kind="stable")] = np.arange(first.size)
    ids = np.empty(m, dtype=np.int64)
    ids[order] = rank[np.cumsum(new) - 1]
    return np.sort(first), ids


def _kind(term: Term, fielded: bool, colours: int) -> int:
    """The vertex kind of a term's operators: SU(N) colours for N > 2 colours; directed loops for xxz and
    field terms, and for heisenberg terms of a model with a field (which is folded into their bonds);
    singlet projectors otherwise."""
    if colours > 2:
        return KIND_COLOUR
    if isinstance(term, XXZTerm | FieldTerm) or (fielded and isinstance(term, HeisenbergTerm)):
        return KIND_DIRECTED
    return KIND_PROJECTOR


def _bond_field(term: Term) -> str:
    return "shape" if isinstance(term, ProjectorProductTerm) else "bonds"


def _describe(lattice: Lattice) -> str:
    return f"{'x'.join(map(str, lattice.size))} {lattice.boundary} {lattice.kind}"
