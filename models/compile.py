"""Compile a lattice and a list of user terms into the engine's :class:`~models.compiled.CompiledModel`.

Every term entry becomes one *group*, of one vertex kind (``group_kind``, see
:data:`~models.compiled.VERTEX_KINDS`):

* ``HeisenbergTerm(bonds, J)``: ``J S_i.S_j = J/4 - J P_ij``, so each bond of the class gives a k = 1 term
  with ``C_t = J`` and the group constant is ``J/4 * n_bonds``;
* ``ProjectorTerm(bonds, J)``: each bond of the class gives a k = 1 term with ``C_t = J``; constant 0;
* ``ProjectorProductTerm(shape, Q)``: each placement gives a k-bond term with ``C_t = Q``; constant 0.

With ``colours = 2`` (S = 1/2 spins, the default) every group is of the ``"projector"`` kind.  With
``colours = N > 2`` (SU(N): N colours per site, fundamental representation on sublattice A, conjugate on B)
every group is of the ``"colour"`` kind; ``P_ij`` is then the SU(N) singlet projector, and a Heisenberg term
(defined through S = 1/2 spin operators) is refused with a pointer to ``ProjectorTerm``.

Sign-problem guard (the decomposition ``H = E_const - sum_t C_t prod P`` is sign-free when every
``C_t > 0`` and every bond joins opposite sublattices): J must be > 0 and Q >= 0; a zero coupling drops
the term's operators but keeps its group (constant 0).  Any violation raises :class:`ModelError` naming
the term (index and group name) and, for a bond, its sites.

Bonds are deduplicated into ``bond_sites`` by (site0, site1, displacement), in order of first use, so a
bond shared by several terms (an ``nn`` Heisenberg bond inside a ``plaquette-pair``) appears once.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Sequence

import numpy as np

from .compiled import KIND_COLOUR, KIND_PROJECTOR, CompiledModel
from .errors import ModelError
from .lattice import Lattice
from .shapes import parse_shape, place_shape
from .terms import HeisenbergTerm, ProjectorProductTerm, ProjectorTerm, Term

__all__ = ["compile_model", "group_names", "MAX_COLOURS"]

_MAX_NAME = 64  # group names are stored as 64-byte strings (CompiledModel.to_arrays)
_TERMS = (HeisenbergTerm, ProjectorTerm, ProjectorProductTerm)
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
    for t, term in enumerate(terms):
        label = f"term {t} ({names[t]!r})"
        if colours > 2 and isinstance(term, HeisenbergTerm):
            raise ModelError(f"{label}: a heisenberg term (S_i.S_j of S = 1/2 spins) needs 2 colours, "
                             f"not {colours}; for SU({colours}) write it as a projector term, -J sum P_ij "
                             "(for two colours that is J S_i.S_j - J/4)", f"terms[{t}].type")
        try:
            sites, disp, coupling = _expand(lattice, term)
        except ModelError as err:
            raise ModelError(f"{label}: {err.message}", err.where).within(f"terms[{t}]") from None
        sub = lattice.sublattice
        same = np.flatnonzero(np.any(sub[sites[..., 0]] == sub[sites[..., 1]], axis=1))
        if same.size:
            i, j = sites[same[0]][np.argmax(sub[sites[same[0], :, 0]] == sub[sites[same[0], :, 1]])]
            raise ModelError(f"{label}: bond ({i}, {j}) joins two sites of the same sublattice; such a term "
                             "has a sign problem", f"terms[{t}].{_bond_field(term)}")
        if coupling == 0.0:
            continue
        if sites.shape[0] == 0:
            raise ModelError(f"{label}: no bonds of this term fit on the {_describe(lattice)} lattice",
                             f"terms[{t}].{_bond_field(term)}")
        if isinstance(term, HeisenbergTerm):
            constants[t] = 0.25 * coupling * sites.shape[0]
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
        term_group=np.concatenate(groups),
        group_names=tuple(names),
        group_constant=constants,
        group_kind=np.full(len(terms), KIND_PROJECTOR if colours == 2 else KIND_COLOUR, dtype=np.int8),
        n_colours=colours,
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
            raise ModelError(f"expected a HeisenbergTerm, ProjectorTerm or ProjectorProductTerm, got "
                             f"{type(term).__name__}", f"terms[{t}]")
        if term.name is not None:
            raw.append(term.name)
        elif isinstance(term, HeisenbergTerm | ProjectorTerm):
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
    if isinstance(term, HeisenbergTerm | ProjectorTerm):
        if not isinstance(term.bonds, str):
            raise ModelError(f"bonds must be the name of a bond class, got {term.bonds!r}", "bonds")
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


def _bond_field(term: Term) -> str:
    return "shape" if isinstance(term, ProjectorProductTerm) else "bonds"


def _describe(lattice: Lattice) -> str:
    return f"{'x'.join(map(str, lattice.size))} {lattice.boundary} {lattice.kind}"
