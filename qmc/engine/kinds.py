"""The vertex-kind seam: the hooks through which the generic kernels ask a model's vertex kind.

The sweep (:mod:`qmc.engine.diagonal`) and the step driver (:mod:`qmc.engine.steps`) are written once.
Where the kind matters they call a hook below with the kind's *record* (a NamedTuple, e.g.
:class:`qmc.engine.projector.ProjectorKind`) as first argument.  numba resolves the hook from the record's
class when it compiles the kernel, so each model's kernel contains exactly its kind's code (no run-time
branch; the projector fast path compiles as if the hooks were written out in the sweep), and kernels stay in
numba's on-disk cache: one cached specialisation per record type.

Hooks (a kind module defines a numba function of the same name and arguments for each):

``insertion_allowed(kind, table, t, k, spins, s0, s1, s2, s3) -> (allowed, s0, s1, s2, s3)``
    inlined into the sweep after the alias draw picked term t (probability w_t / W_tot, w_t from
    :attr:`~models.compiled.CompiledModel.term_weights`): accept the insertion with probability
    W_t(state) / w_t, drawing from the RNG words if it needs to.  ``meta_kind(table[t, TT_META])`` tells a
    kind that covers several kinds which one term t has.
``loop_update(kind, chain, vertices, n_vertices) -> n_loops``
    the off-diagonal update on the linked vertex list the sweep built (records in :mod:`qmc.engine.records`).
``apply_changes(kind, op, p, t, k, table, spins, above, vflip, v) -> op``
    inlined into the sweep at an operator (slot p, term t, k bonds, bond vertices v .. v+k-1 of the last
    loop update): the operator word with the loop update's pending changes (``vflip``) applied and those
    cleared; ``spins`` is the state just below slot p, ``above`` the per-slot colours (``Chain.above``).
``hop(kind, spins, phase, above, p, a, i, j) -> (weight, d_ms)``
    inlined into the sweep at bond a (sites i, j) of an off-diagonal operator at slot p: propagate
    ``spins`` through it; returns the weight of the hop i -> j in the winding number (the net charge moved
    along the bond, e.g. S^z_i before the hop, times 2) and the change of ms = 2 x the staggered order.
``hop_masked(kind, spins, phase, above, p, a, i, j, f) -> (weight, d_ms)``
    ``hop`` if f = 1; if f = 0 the state stays and (0, 0) is returned.  The sweep calls it for every bond
    of an off-diagonal operator (f = its off-diagonal bit); the projector's has no branch.
``site_value(kind, spins, i) -> sigma_i``
    the site's share of the uniform order (2 S^z_i for spins); phase_i sigma_i is its share of ms.
``bond_value(kind, spins, i, j) -> c_ij``
    the bond correlation from which the dimer order parameters are built (4 S^z_i S^z_j for spins).

Python-level parts of a kind module: ``record(model)``, ``initial_spins(kind, u)`` (the first state from
uniform random numbers u, one per site) and ``SLOT_COLOURS`` (True if the kind keeps per-slot colours in
``Chain.above``); :func:`initial_spins` and :func:`slot_colours` ask them for a record.
``vertex_added(kind, vertices, v, t, a, op, si, sj)``
    inlined where the sweep appends bond vertex v (bond a of term t, operator ``op``, spins si, sj above it);
    projector: nothing, directed loops: the leg states into ``vertices.state``.
``measure(kind, chain, tallies)``
    inlined into measuring steps: the kind's own estimators, in the accumulator slots after the groups
    (``acc_slots(n_groups)`` of them).
``loop_label(kind, mark) -> b``
    the label (0, 1, ...) of the loop that the loop update marked ``mark`` in ``links`` (on the even leg of
    each pair of legs it passes; read ``links[leg & ~1]``), for the loop
    estimators (:mod:`qmc.engine.loop_estimators`); only kinds with ``LOOP_ESTIMATORS`` label their loops.
``loop_moments(kind) -> (E[x^2], E[x^4])``
    moments of a loop's share x of the staggered order per site (+-1/2 for spins; delta(c, 0) - 1/N for
    N colours), which the loop update draws independently and without bias for every loop.

A kind module that lacks one of these hooks gets the projector's (the directed kind keeps ±1 spins and the
``vflip`` changes, so it uses the projector's ``apply_changes``, ``hop``, ``site_value``, ``bond_value``; the
colour kind records nothing per vertex and has no estimators of its own).  Module attributes read in Python
(the projector's where a module has none): ``VERTEX_STATE`` (the kind needs ``vertices.state``;
:func:`vertex_state_length`), ``acc_slots`` (:func:`kind_acc_slots`), ``initial_spins``, ``SLOT_COLOURS`` and
``LOOP_ESTIMATORS`` (every loop is updated independently of the others, so the loop estimators apply;
:func:`loop_estimators_apply`), ``TRACER_CHOICE`` (the loop update reads ``vertices.interleave_above``:
:func:`tracer_choice`) and ``max_loop_labels`` (how many loops its marks can label,
:func:`max_loop_labels`).

:func:`kind_record` picks the record for a model from the kinds of its groups: the first kind registered
(:func:`register_kind`) whose set of kind codes covers all of them, so a model made only of projector
groups keeps the projector fast path even after kinds that also handle projector vertices are added behind
it.
"""

from __future__ import annotations

from types import ModuleType
from typing import Any

import numpy as np
from numba.core import types
from numba.extending import overload

from qmc.engine import colour, directed, projector
from qmc.models.compiled import KIND_COLOUR, KIND_DIRECTED, KIND_PROJECTOR, VERTEX_KINDS, CompiledModel

__all__ = ["HOOKS", "insertion_allowed", "loop_update", "apply_changes", "hop", "hop_masked", "site_value",
           "bond_value", "vertex_added", "measure", "loop_label", "loop_moments", "kind_record",
           "register_kind", "initial_spins", "slot_colours", "vertex_state_length", "kind_acc_slots",
           "loop_estimators_apply", "max_loop_labels", "tracer_choice"]

HOOKS = ("insertion_allowed", "loop_update", "apply_changes", "hop", "hop_masked", "site_value", "bond_value",
         "vertex_added", "measure", "loop_label", "loop_moments")
"""The numba-level hooks of a kind (a kind module that lacks one gets the projector's)."""

_SELECTION: list[tuple[frozenset[int], ModuleType]] = []
"""(kind codes a module's record handles, the module), in order of preference."""
_MODULE_OF_RECORD: dict[type, ModuleType] = {}


def register_kind(record: type, module: ModuleType, covers: frozenset[int]) -> None:
    """Make ``module`` (which defines the hooks and ``record(model)``) the implementation of the kind whose
    record class is ``record``; :func:`kind_record` picks it for models whose kind codes lie in ``covers``
    (an empty set: only reachable by passing its record to the kernels directly, as tests do)."""
    _MODULE_OF_RECORD[record] = module
    if covers:
        _SELECTION.append((frozenset(covers), module))


def kind_record(model: CompiledModel) -> Any:
    """The record of the vertex kind that runs ``model`` (built by the kind module's ``record(model)``)."""
    codes = frozenset(np.unique(model.group_kind).tolist())
    for covers, module in _SELECTION:
        if codes <= covers:
            return module.record(model)
    names = ", ".join(VERTEX_KINDS[c] for c in sorted(codes))
    raise ValueError(f"no update in this engine handles a model with vertex kinds {names}")


def _module_attribute(kind: Any, name: str) -> Any:
    """Attribute ``name`` of the kind record's module, the projector's where the module has none."""
    return getattr(_MODULE_OF_RECORD[type(kind)], name, getattr(projector, name))


def initial_spins(kind: Any, u: np.ndarray) -> np.ndarray:
    """The kind's first state (int8 per site) from uniform random numbers ``u`` in [0, 1), one per site."""
    return _module_attribute(kind, "initial_spins")(kind, u)


def slot_colours(kind: Any) -> bool:
    """Whether the kind keeps per-slot colours (``Chain.above`` as long as the operator string)."""
    return bool(_module_attribute(kind, "SLOT_COLOURS"))


def vertex_state_length(kind: Any, n_slots: int) -> int:
    """Length of ``vertices.state`` for a list of ``n_slots`` bond vertices (0 if the kind needs none)."""
    return n_slots if _module_attribute(kind, "VERTEX_STATE") else 0


def kind_acc_slots(kind: Any, n_groups: int) -> int:
    """Accumulator slots the kind adds after the ``n_groups`` group slots."""
    return int(_module_attribute(kind, "acc_slots")(n_groups))


def max_loop_labels(kind: Any) -> int:
    """How many loops the kind's loop update can label in its marks (the projector's bound where the module
    has none: its own loop update does not label)."""
    return int(_module_attribute(kind, "max_loop_labels")(kind))


def loop_estimators_apply(kind: Any) -> bool:
    """Whether the kind's loop update treats every loop independently (the loop estimators apply)."""
    return bool(_module_attribute(kind, "LOOP_ESTIMATORS"))


def tracer_choice(kind: Any) -> bool:
    """Whether the kind's loop update has a single-tracer and an interleaved path to choose from."""
    return bool(_module_attribute(kind, "TRACER_CHOICE"))


def _implementation(kind: Any, hook: str) -> Any:
    """The Python function of ``hook`` in the module of the kind record's numba type (typing time); the
    projector's where the module has none."""
    if isinstance(kind, types.BaseNamedTuple):
        module = _MODULE_OF_RECORD.get(kind.instance_class)
        if module is not None:
            return getattr(module, hook, getattr(projector, hook)).py_func
    return None


def insertion_allowed(kind, table, t, k, spins, s0, s1, s2, s3):
    """Hook (see module docstring): in a kernel the kind's own function, inlined; from Python, the same
    function called through numba."""
    return _module_attribute(kind, "insertion_allowed")(kind, table, t, k, spins, s0, s1, s2, s3)


def loop_update(kind, chain, vertices, n_vertices):
    """Hook (see module docstring): in a kernel the kind's own function, inlined; from Python, the same
    function called through numba."""
    return _module_attribute(kind, "loop_update")(kind, chain, vertices, n_vertices)


def vertex_added(kind, vertices, v, t, a, op, si, sj):
    """Hook (see module docstring): in a kernel the kind's own function, inlined; from Python, the same
    function called through numba."""
    return _module_attribute(kind, "vertex_added")(kind, vertices, v, t, a, op, si, sj)


def measure(kind, chain, tallies):
    """Hook (see module docstring): in a kernel the kind's own function, inlined; from Python, the same
    function called through numba."""
    return _module_attribute(kind, "measure")(kind, chain, tallies)


@overload(insertion_allowed, inline="always")
def _insertion_allowed(kind, table, t, k, spins, s0, s1, s2, s3):
    return _implementation(kind, "insertion_allowed")


@overload(loop_update)
def _loop_update(kind, chain, vertices, n_vertices):
    return _implementation(kind, "loop_update")


def apply_changes(kind, op, p, t, k, table, spins, above, vflip, v):
    """Hook (see module docstring): in a kernel the kind's own function, inlined; from Python, the same
    function called through numba."""
    return _module_attribute(kind, "apply_changes")(kind, op, p, t, k, table, spins, above, vflip, v)


def hop(kind, spins, phase, above, p, a, i, j):
    """Hook (see module docstring): in a kernel the kind's own function, inlined; from Python, the same
    function called through numba."""
    return _module_attribute(kind, "hop")(kind, spins, phase, above, p, a, i, j)


def hop_masked(kind, spins, phase, above, p, a, i, j, f):
    """Hook (see module docstring): in a kernel the kind's own function, inlined; from Python, the same
    function called through numba."""
    return _module_attribute(kind, "hop_masked")(kind, spins, phase, above, p, a, i, j, f)


def site_value(kind, spins, i):
    """Hook (see module docstring): in a kernel the kind's own function, inlined; from Python, the same
    function called through numba."""
    return _module_attribute(kind, "site_value")(kind, spins, i)


def bond_value(kind, spins, i, j):
    """Hook (see module docstring): in a kernel the kind's own function, inlined; from Python, the same
    function called through numba."""
    return _module_attribute(kind, "bond_value")(kind, spins, i, j)


@overload(apply_changes, inline="always")
def _apply_changes(kind, op, p, t, k, table, spins, above, vflip, v):
    return _implementation(kind, "apply_changes")


@overload(hop, inline="always")
def _hop(kind, spins, phase, above, p, a, i, j):
    return _implementation(kind, "hop")


@overload(hop_masked, inline="always")
def _hop_masked(kind, spins, phase, above, p, a, i, j, f):
    return _implementation(kind, "hop_masked")


@overload(site_value, inline="always")
def _site_value(kind, spins, i):
    return _implementation(kind, "site_value")


@overload(bond_value, inline="always")
def _bond_value(kind, spins, i, j):
    return _implementation(kind, "bond_value")


@overload(vertex_added, inline="always")
def _vertex_added(kind, vertices, v, t, a, op, si, sj):
    return _implementation(kind, "vertex_added")


@overload(measure, inline="always")
def _measure(kind, chain, tallies):
    return _implementation(kind, "measure")


def loop_label(kind, mark):
    """Hook (see module docstring): in a kernel the kind's own function, inlined; from Python, the same
    function called through numba."""
    return _module_attribute(kind, "loop_label")(kind, mark)


def loop_moments(kind):
    """Hook (see module docstring): in a kernel the kind's own function, inlined; from Python, the same
    function called through numba."""
    return _module_attribute(kind, "loop_moments")(kind)


@overload(loop_label, inline="always")
def _loop_label(kind, mark):
    return _implementation(kind, "loop_label")


@overload(loop_moments, inline="always")
def _loop_moments(kind):
    return _implementation(kind, "loop_moments")


register_kind(projector.ProjectorKind, projector, frozenset({KIND_PROJECTOR}))
register_kind(colour.ColourKind, colour, frozenset({KIND_COLOUR}))
register_kind(directed.DirectedKind, directed, frozenset({KIND_PROJECTOR, KIND_DIRECTED}))
