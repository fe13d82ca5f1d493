"""The flat array description of a Hamiltonian that the SSE engine consumes.

Every model, whatever its terms, is written as

    H = E_const - sum_t C_t prod_{a=1..k_t} P_{i_a j_a},   C_t > 0,

with k_t in {1, 2, 3} site-disjoint bonds per term and P_ij the singlet projector of bond ij: for S = 1/2
spins (``n_colours`` = 2) ``P_ij = 1/4 - S_i.S_j``; for N colours per site (fundamental representation of
SU(N) on sublattice A, conjugate on B) ``P_ij = |s><s|``, ``|s> = N^(-1/2) sum_a |a a>`` in the basis where
a site of B is labelled by the conjugate colour (for N = 2 the same operator).  A Heisenberg coupling
``+J S_i.S_j`` is the k = 1 case with ``C_t = J`` and a constant ``J/4`` added to ``E_const``
(``J S_i.S_j = J/4 - J P_ij``).  The engine therefore never needs to know where a term came from; the
constants are kept per *group* (one group per user term entry) so that reported energies are ``<H>/N`` for
H exactly as written.

Conventions (all arrays are C-contiguous numpy arrays):

``n_sites``          N, number of sites.
``n_colours``        colours per site (2: S = 1/2 spins; N > 2: SU(N), groups of the ``"colour"`` kind).
``phase``            int8[N], staggered sign phi_i = +1 on sublattice A, -1 on sublattice B.
``bond_sites``       int32[nb, 2], the two sites of every bond used by any term (opposite sublattices).
``bond_disp``        float64[nb, D], displacement site1 - site0 of each bond along each of the D winding
                     directions, in units of that direction's lattice vector (minimum image; zero for a
                     bond that has no component, e.g. a bilayer rung).  A twist phi along direction a
                     multiplies the hop i->j by exp(i phi bond_disp[b, a]).
``dir_names``        tuple of D direction names ("x", "y", "z", or "a1", "a2").
``dir_lengths``      float64[D], number of unit cells along each direction (periodic length).
``site_coords``      float64[N, D], position of each site's unit cell along each direction (in units of the
                     lattice vector), used for structure-factor phases exp(i 2 pi k r_a / L_a).
``term_start``       int32[T+1], CSR offsets into ``term_bonds``; term t uses bonds
                     ``term_bonds[term_start[t]:term_start[t+1]]`` (k_t = 1..3 entries).
``term_bonds``       int32[sum k_t], bond indices into ``bond_sites``.
``term_coupling``    float64[T], C_t > 0.
``term_group``       int32[T], index of the user term entry the term came from.
``group_names``      tuple of G names, e.g. "inter", "intra", "q2" (used as ``bond_energy/<name>``).
``group_constant``   float64[G], the constant each group adds to H (energy units, whole lattice).
``group_kind``       int8[G], the vertex kind of each group's operators, an index into ``VERTEX_KINDS``
                     (0, ``"projector"``: the S = 1/2 singlet projectors above; 1, ``"colour"``: the
                     SU(N) projectors, N = ``n_colours`` colours per site).  The engine picks its update
                     from the kinds present (see :mod:`qmc.engine`); models stored before kinds existed
                     are read as all ``"projector"`` (and stored without ``n_colours`` as 2 colours);
                     2, ``"directed"``: XXZ bonds with folded fields, and the field terms (groups without
                     operators), see :mod:`models.directed`.
``term_xxz``         float64[T, 5], per directed term (J, delta, h_i, h_j, C_b) (columns
                     :data:`models.directed.XXZ_COLUMNS`); zeros for other terms.  A directed term's
                     ``term_coupling`` is its J.
``group_field``      float64[G, N], f_{g,i}: group g's energy contains -sum_i f_{g,i} S^z_i that its operator
                     count does not show apart (folded field shares: +share; a field term: -h_i); zeros for
                     models without fields.  term_energy/g = (const_g - <n_g>/beta + sum_i f_{g,i} <S^z_i>)/N.
``vbs_bonds``        int32[nv, 2], nearest-neighbour bonds used for the columnar dimer order parameter.
``vbs_dir``          int8[nv], 0 for an x-bond, 1 for a y-bond.
``vbs_phase``        int8[nv], (-1)^x for x-bonds and (-1)^y for y-bonds (x, y of site0).
``n_vbs_dirs``       0 (no valence-bond order parameter on this lattice), 1 (chain) or 2.
``linear_size``      L used in stiffness*L and corr_length/L (first direction's length).
``open_boundaries``  True if any direction is open (winding numbers then vanish identically).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .directed import diagonal_weights

__all__ = ["CompiledModel", "VERTEX_KINDS", "KIND_PROJECTOR", "KIND_COLOUR", "KIND_DIRECTED"]

VERTEX_KINDS = ("projector", "colour", "directed")
"""Names of the vertex kinds; a group's kind code is the position of its name here."""
KIND_PROJECTOR = VERTEX_KINDS.index("projector")
KIND_COLOUR = VERTEX_KINDS.index("colour")
KIND_DIRECTED = VERTEX_KINDS.index("directed")


@dataclass(frozen=True)
class CompiledModel:
    """Flat, engine-ready Hamiltonian description; see the module docstring for the conventions."""

    n_sites: int
    phase: np.ndarray
    bond_sites: np.ndarray
    bond_disp: np.ndarray
    dir_names: tuple[str, ...]
    dir_lengths: np.ndarray
    site_coords: np.ndarray
    term_start: np.ndarray
    term_bonds: np.ndarray
    term_coupling: np.ndarray
    term_group: np.ndarray
    group_names: tuple[str, ...]
    group_constant: np.ndarray
    vbs_bonds: np.ndarray
    vbs_dir: np.ndarray
    vbs_phase: np.ndarray
    n_vbs_dirs: int
    linear_size: int
    open_boundaries: bool = False
    lattice_kind: str = "explicit"
    group_kind: np.ndarray | None = None
    n_colours: int = 2
    term_xxz: np.ndarray | None = None
    group_field: np.ndarray | None = None
    extra: dict = field(default_factory=dict)

    def __post_init__(self) -> None:
        kind = self.group_kind
        if kind is None:
            kind = np.full(len(self.group_names), KIND_PROJECTOR, dtype=np.int8)
        kind = np.ascontiguousarray(kind, dtype=np.int8)
        if kind.shape != (len(self.group_names),) or np.any((kind < 0) | (kind >= len(VERTEX_KINDS))):
            raise ValueError(f"group_kind must hold one code of {VERTEX_KINDS} per term group")
        object.__setattr__(self, "group_kind", kind)
        if int(self.n_colours) < 2 or (self.n_colours != 2 and np.any(kind != KIND_COLOUR)):
            raise ValueError("n_colours must be at least 2, and 2 when a group is of the projector or "
                             "directed kind")
        object.__setattr__(self, "n_colours", int(self.n_colours))
        for name, shape in (("term_xxz", (self.n_terms, 5)), ("group_field", (len(self.group_names),
                                                                                self.n_sites))):
            value = getattr(self, name)
            value = np.zeros(shape) if value is None else np.ascontiguousarray(value, dtype=np.float64)
            if value.shape != shape:
                raise ValueError(f"{name} must have shape {shape}, got {value.shape}")
            object.__setattr__(self, name, value)

    @property
    def n_terms(self) -> int:
        return int(self.term_coupling.shape[0])

    @property
    def n_dirs(self) -> int:
        return int(self.bond_disp.shape[1])

    @property
    def max_bonds_per_term(self) -> int:
        return int(np.max(np.diff(self.term_start))) if self.n_terms else 0

    @property
    def term_weights(self) -> np.ndarray:
        """w_t, the largest SSE weight of one operator of each term (energy units): the diagonal update draws
        terms with probability w_t / sum(w).  Projector kind: w_t = C_t / 2^{k_t} (k_t bonds of term t; an
        operator is any of its 2^k diagonal/off-diagonal patterns, each with matrix element C_t / 2^k).
        Colour kind: w_t = C_t / N^{k_t} (every bond vertex, diagonal or not, has <c c|P|a a> = 1/N).
        Directed kind: w_t = max_q W_t(q), the largest diagonal weight (:mod:`models.directed`)."""
        k = np.diff(np.asarray(self.term_start)).astype(np.int64)  # one formula per vertex kind
        w = np.asarray(self.term_coupling, dtype=np.float64) / float(self.n_colours) ** k
        directed = self.group_kind[np.asarray(self.term_group)] == KIND_DIRECTED
        if np.any(directed):
            w[directed] = np.max(diagonal_weights(*self.term_xxz[directed].T), axis=-1)
        return w

    @property
    def energy_constant(self) -> float:
        """E_const of H = E_const - sum_t C_t prod P (whole lattice, energy units)."""
        return float(np.sum(self.group_constant))

    def to_arrays(self) -> dict[str, np.ndarray]:
        """All fields as numpy arrays (strings as fixed-width bytes), for storage in HDF5."""
        out: dict[str, np.ndarray] = {}
        for name in self.__dataclass_fields__:
            value = getattr(self, name)
            if name == "extra":
                continue
            if isinstance(value, tuple):
                out[name] = np.array([s.encode() for s in value], dtype="S64")
            elif isinstance(value, np.ndarray):
                out[name] = value
            else:
                out[name] = np.asarray(value)
        return out

    @classmethod
    def from_arrays(cls, arrays: dict[str, np.ndarray]) -> CompiledModel:
        """Inverse of :meth:`to_arrays`."""
        kwargs = {}
        for name in cls.__dataclass_fields__:
            if name == "extra" or name not in arrays:
                continue
            value = np.asarray(arrays[name])
            if name in ("dir_names", "group_names"):
                kwargs[name] = tuple(v.decode() if isinstance(v, bytes) else str(v) for v in value)
            elif name in ("n_sites", "n_vbs_dirs", "linear_size", "n_colours"):
                kwargs[name] = int(value)
            elif name == "open_boundaries":
                kwargs[name] = bool(value)
            elif name == "lattice_kind":
                v = value.item()
                kwargs[name] = v.decode() if isinstance(v, bytes) else str(v)
            else:
                kwargs[name] = value
        return cls(**kwargs)
