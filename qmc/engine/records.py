"""The kernels' structured arguments: named tuples of arrays that numba passes as one value each.

Instead of thirty positional arrays (two int32 vectors of the same length could be swapped and still
compile), the kernels take a few records and read every array by field name.  Build them with
:func:`build`, which takes keywords only and checks each field's dtype and number of dimensions, so a
wrong array is refused where the record is made, not silently used.

==============  =============================================================================================
``Chain``       the Markov chain itself: ``spins`` int8[N] (the state at slice 0: +-1 spins, or colours
                0..N-1 of the colour kind), ``ops`` int32[M] (operator string, see
                :mod:`qmc.engine.vertices`), ``counters`` int64[1] (n), ``rng`` uint64[4] (xoshiro256**
                words), ``above`` int32[M] (colour kind: the colours above the bonds of slot p, 8 bits per
                bond; int32[0] for kinds without per-slot colours)
``Vertices``    the linked vertex list rebuilt by every sweep: ``links`` int32[4 M k_max], ``vflip``
                uint8[M k_max] (loop flips not yet applied to ``ops``), ``first``/``last`` int32[N]
                (first and last leg of each site's world line), ``state`` int32[M k_max or 0] (what the
                vertex kind records per vertex; empty for kinds that record nothing),
                ``interleave_above`` int64[1] (the projector kind's loop update traces several loops at
                once when the list has more bond vertices than this; speed only, the chain is the same:
                :mod:`qmc.chain.tracer_choice`)
``Terms``       the diagonal update's view of the model: ``table`` int32[T, w] (:func:`term_table`),
                ``bond_count`` uint8[T] (k_t, for passes that need only the bond counts),
                ``alias_prob`` float64[T], ``alias_idx`` int32[T], and for the draw by group (else empty)
                ``group_edge``/``group_scale`` float64[4], ``group_first``/``group_last`` int32[4]
                (:mod:`qmc.chain.alias`, :mod:`qmc.engine.term_draw`), ``beta``, ``beta_wtot`` =
                beta sum_t w_t
``Probes``      what the estimators need: ``phase`` int8[N] (staggered sign), ``disp_classes`` float64[C, D]
                (the distinct bond displacements; the term table gives each bond's row),
                ``cos_tab``/``sin_tab`` float64[D, N], ``vbs_bonds`` int32[nv, 2], ``vbs_dir``/``vbs_phase``
                int8[nv], ``hist_range``; for profiles along x (else empty) ``site_column`` int32[N]
                (:mod:`qmc.engine.profiles`)
``Tallies``     where results go: ``acc`` float64[acc_size(G, K, C, T)], ``hist`` int64[h, h], and the
                per-step scratch ``group_counts`` int64[G] (G >= 1), ``sweep_out`` float64[SW_SIZE],
                ``et_out`` float64[ET_SIZE] (slots in :mod:`qmc.engine.slots`); for the loop estimators
                (:mod:`qmc.engine.loop_estimators`) ``loop_tally`` int64[4 M k_max] (a loop's site count
                and length side by side, two per loop label; left zero between calls), ``loop_ends``
                uint8[M k_max + 1] (models with multi-bond terms, else length 0: where the operators end;
                left zero between calls), ``loop_site`` int64[N], ``loop_sums`` float64[N, 1 + 2 D] (all of
                length 0 when the chain uses the plain estimators)
==============  =============================================================================================

The vertex kind's own record (e.g. :class:`qmc.engine.projector.ProjectorKind`) is a further argument; see
:mod:`qmc.engine`.  Passing records costs no speed (measured with benchmarks/c_compare.py, see CHANGELOG):
numba unpacks them into the same arrays, and the kernels copy the fields into locals once per call.
"""

from __future__ import annotations

from typing import Any, NamedTuple

import numpy as np

__all__ = ["Chain", "Vertices", "Terms", "Probes", "Tallies", "build"]


class Chain(NamedTuple):
    spins: np.ndarray
    ops: np.ndarray
    counters: np.ndarray
    rng: np.ndarray
    above: np.ndarray


class Vertices(NamedTuple):
    links: np.ndarray
    vflip: np.ndarray
    first: np.ndarray
    last: np.ndarray
    state: np.ndarray
    interleave_above: np.ndarray


class Terms(NamedTuple):
    table: np.ndarray
    bond_count: np.ndarray
    alias_prob: np.ndarray
    alias_idx: np.ndarray
    group_edge: np.ndarray
    group_scale: np.ndarray
    group_first: np.ndarray
    group_last: np.ndarray
    beta: float
    beta_wtot: float


class Probes(NamedTuple):
    phase: np.ndarray
    disp_classes: np.ndarray
    cos_tab: np.ndarray
    sin_tab: np.ndarray
    vbs_bonds: np.ndarray
    vbs_dir: np.ndarray
    vbs_phase: np.ndarray
    hist_range: float
    site_column: np.ndarray


class Tallies(NamedTuple):
    acc: np.ndarray
    hist: np.ndarray
    group_counts: np.ndarray
    sweep_out: np.ndarray
    et_out: np.ndarray
    loop_tally: np.ndarray
    loop_ends: np.ndarray
    loop_site: np.ndarray
    loop_sums: np.ndarray


_I8, _I32, _I64, _U8, _U64, _F64 = np.int8, np.int32, np.int64, np.uint8, np.uint64, np.float64
_SPEC: dict[type, dict[str, tuple[Any, int]]] = {  # field -> (dtype, ndim); ndim 0 is a Python float
    Chain: {"spins": (_I8, 1), "ops": (_I32, 1), "counters": (_I64, 1), "rng": (_U64, 1),
            "above": (_I32, 1)},
    Vertices: {"links": (_I32, 1), "vflip": (_U8, 1), "first": (_I32, 1), "last": (_I32, 1),
               "state": (_I32, 1), "interleave_above": (_I64, 1)},
    Terms: {"table": (_I32, 2), "bond_count": (_U8, 1), "alias_prob": (_F64, 1), "alias_idx": (_I32, 1),
            "group_edge": (_F64, 1), "group_scale": (_F64, 1), "group_first": (_I32, 1),
            "group_last": (_I32, 1), "beta": (float, 0), "beta_wtot": (float, 0)},
    Probes: {"phase": (_I8, 1), "disp_classes": (_F64, 2), "cos_tab": (_F64, 2), "sin_tab": (_F64, 2),
             "vbs_bonds": (_I32, 2), "vbs_dir": (_I8, 1), "vbs_phase": (_I8, 1), "hist_range": (float, 0),
             "site_column": (_I32, 1)},
    Tallies: {"acc": (_F64, 1), "hist": (_I64, 2), "group_counts": (_I64, 1), "sweep_out": (_F64, 1),
              "et_out": (_F64, 1), "loop_tally": (_I64, 1), "loop_ends": (_U8, 1),
              "loop_site": (_I64, 1),
              "loop_sums": (_F64, 2)},
}


def build(cls: type, **fields: Any) -> Any:
    """``cls(**fields)`` after checking every field: arrays C-contiguous with the declared dtype and number
    of dimensions, scalars converted to float.  Raises TypeError naming the field otherwise."""
    spec = _SPEC[cls]
    if set(fields) != set(spec):
        raise TypeError(f"{cls.__name__} needs exactly the fields {', '.join(spec)}")
    for name, (dtype, ndim) in spec.items():
        value = fields[name]
        if ndim == 0:
            fields[name] = float(value)
            continue
        if not (isinstance(value, np.ndarray) and value.dtype == dtype and value.ndim == ndim
                and value.flags.c_contiguous):
            got = (f"{value.dtype}[{value.ndim}d]" if isinstance(value, np.ndarray) else type(value).__name__)
            raise TypeError(f"{cls.__name__}.{name} must be a C-contiguous {np.dtype(dtype)} array with "
                            f"{ndim} dimension(s), got {got}")
    return cls(**fields)
