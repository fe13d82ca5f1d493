"""One Markov chain: warm-up with automatic cutoff growth, then binned measurement.

The whole state is plain numpy arrays (spins, operator string, RNG words, counters, partial-bin sums,
VBS histogram): :meth:`Simulation.state` exports it and :meth:`Simulation.restore` continues the chain
bit-identically, however the work is chunked by :meth:`Simulation.advance`.

One Monte Carlo step = one diagonal-update sweep over the operator string + one full loop decomposition
(every vertex leg visited once; each loop flipped with probability 1/2, or for N colours given one of them
uniformly); for models with directed loops (:mod:`qmc.engine.directed`) the loop part is a number of
directed loops adapted during the warm-up to the same work and fixed when measuring starts.  Warm-up steps
and measurement steps are counted the same way.

``estimators`` ("improved" or "plain", the ``[sampling]`` key of that name) says how the order-parameter
observables (chi_uniform, m_stag2, m_stag4, chi_stag, s_q, s_q_shifted) are measured: by the loop
estimators where the vertex kind updates its loops independently (:func:`uses_loop_estimators`), else by
the plain ones; the Markov chain is the same either way.

Cutoff: the string starts with max(32, 1.2 beta W_tot + 16) slots; during the warm-up, whenever fewer than
n/3 of them are empty it grows to :func:`grown_cutoff` = n + n/3 + 16 slots (about 4n/3; the margin n/3
is far beyond the fluctuations of n, of order sqrt(n), so the string never fills when measuring).  A
longer string costs sweep time and changes nothing else (empty slots carry no vertex).  Up to commit
46a0760 the string grew to n + n/2 + 16 (the same distribution, another random path; chains warmed up by
that code keep their longer string; tests/chain/test_stored_bins.py checks both rules).

The projector kind's loop update has two paths that give the same chain bit for bit, one tracer or 32
interleaved; which one runs is timed on the chain's own steps (:mod:`qmc.chain.tracer_choice`).

``counters`` (int64[COUNTERS]): n, the operators in the string; directed loops per step; 1 once that number
is frozen (measurement started); unused.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from qmc.chain.alias import alias_table, group_draw_tables
from qmc.chain.checkpoint import CHECKPOINT_LAYOUT, LAYOUT_KEY, current_layout
from qmc.chain.observables import bin_names, bin_row
from qmc.chain.profiles import profile_size
from qmc.chain.tracer_choice import TracerChoice
from qmc.config.schema import DEFAULT_ESTIMATORS, ESTIMATORS
from qmc.engine.diagonal import fold_pending
from qmc.engine.kinds import (
    initial_spins,
    kind_acc_slots,
    kind_record,
    loop_estimators_apply,
    max_loop_labels,
    slot_colours,
    tracer_choice,
    vertex_state_length,
)
from qmc.engine.records import Chain, Probes, Tallies, Terms, Vertices, build
from qmc.engine.rng import draw_doubles
from qmc.engine.slots import ET_SIZE, SW_SIZE, acc_size
from qmc.engine.steps import bound_run_steps
from qmc.engine.vertices import EMPTY, OP_TERM_SHIFT, count_ops, displacement_classes, term_table
from qmc.models.compiled import CompiledModel

__all__ = ["Simulation", "HIST_BINS", "HIST_RANGE", "COUNTERS", "uses_loop_estimators", "grown_cutoff"]

COUNTERS = 4

HIST_BINS = 64
HIST_RANGE = 0.25  # |D_a| <= 1/4 for the columnar dimer order parameter


def grown_cutoff(n: int) -> int:
    """The cutoff (slots) the string grows to when fewer than n/3 of its slots are empty (warm-up only):
    n + n // 3 + 16 for n operators (module docstring)."""
    return n + n // 3 + 16


def uses_loop_estimators(estimators: str, kind: object) -> bool:
    """Whether a chain with the ``[sampling] estimators`` choice and vertex kind record ``kind`` measures with
    the loop estimators (:mod:`qmc.engine.loop_estimators`): asked for ("improved") and valid for the kind
    (loops updated independently: projector and colour kinds, not directed loops)."""
    return estimators == "improved" and loop_estimators_apply(kind)


class Simulation:
    """SSE Markov chain for a compiled model at inverse temperature ``beta`` (see :mod:`qmc.engine`).

    The kernels' arguments are records (:mod:`qmc.engine.records`): ``chain`` (spins, operator string,
    operator count, RNG words), ``terms``, ``kind`` (the model's vertex kind), ``vertices``, ``probes`` and
    ``tallies``; ``spins``, ``ops``, ``counters``, ``rng``, ``links``... read their arrays."""

    def __init__(
        self,
        model: CompiledModel,
        beta: float,
        *,
        warmup_steps: int,
        measure_steps: int,
        bins: int,
        seed_words: np.ndarray,
        estimators: str = DEFAULT_ESTIMATORS,
    ) -> None:
        self._setup(model, beta, warmup_steps, measure_steps, bins, estimators)
        rng = np.array(seed_words, dtype=np.uint64).copy()
        if rng.shape != (4,) or not np.any(rng):
            raise ValueError("seed_words must be four uint64 words, not all zero")
        u = draw_doubles(rng, model.n_sites)
        cutoff = max(32, int(1.2 * self.terms.beta_wtot) + 16)
        self.chain = build(Chain, spins=initial_spins(self.kind, u),
                           ops=np.full(cutoff, EMPTY, dtype=np.int32),
                           counters=np.zeros(COUNTERS, dtype=np.int64), rng=rng,
                           above=np.zeros(cutoff if slot_colours(self.kind) else 0, dtype=np.int32))
        self.acc = np.zeros(self._acc_size, dtype=np.float64)
        self.hist = np.zeros((self._hist_bins, self._hist_bins), dtype=np.int64)
        self.steps = np.zeros(1, dtype=np.int64)
        self._allocate_work()

    @classmethod
    def restore(
        cls,
        model: CompiledModel,
        beta: float,
        *,
        warmup_steps: int,
        measure_steps: int,
        bins: int,
        state: dict[str, np.ndarray],
        estimators: str = DEFAULT_ESTIMATORS,
    ) -> Simulation:
        """Continue a chain from :meth:`state` output (bit-identical continuation).  A checkpoint of an
        older layout is migrated or refused (:mod:`qmc.chain.checkpoint`).  The partial bin in the state
        must have been summed with the same ``estimators`` (the task fingerprint holds the choice)."""
        self = cls.__new__(cls)
        self._setup(model, beta, warmup_steps, measure_steps, bins, estimators)
        state = current_layout(state)
        self.chain = build(Chain, spins=np.array(state["spins"], dtype=np.int8),
                           ops=np.array(state["ops"], dtype=np.int32),
                           counters=np.array(state["counters"], dtype=np.int64),
                           rng=np.array(state["rng"], dtype=np.uint64),
                           above=np.array(state["above"], dtype=np.int32).reshape(-1))
        self.acc = np.array(state["acc"], dtype=np.float64)
        self.hist = np.array(state["hist"], dtype=np.int64)
        self.steps = np.array(state["steps"], dtype=np.int64)
        if (self.spins.shape != (model.n_sites,) or self.acc.shape != (self._acc_size,)
                or self.counters.shape != (COUNTERS,)):
            raise ValueError("checkpoint does not match the model (site, term-group or column count differs)")
        if (np.any(self.ops >= (model.n_terms << OP_TERM_SHIFT))
                or int(np.sum(self.ops >= 0)) != int(self.counters[0])
                or self.chain.above.shape[0] != self._above_length(self.ops.shape[0])):
            raise ValueError("checkpoint operator string is inconsistent with the model")
        self._allocate_work()
        return self

    # ------------------------------------------------------------------ set-up
    def _setup(self, model: CompiledModel, beta: float, warmup: int, measure: int, bins: int,
               estimators: str) -> None:
        if not beta > 0:
            raise ValueError(f"beta must be positive, got {beta}")
        if estimators not in ESTIMATORS:
            raise ValueError(f"estimators must be one of {', '.join(ESTIMATORS)}, got {estimators!r}")
        if bins < 1 or measure < 0 or warmup < 0 or (bins and measure % bins):
            raise ValueError("need bins >= 1, non-negative step counts and bins dividing measure_steps")
        if model.n_terms == 0:
            raise ValueError("the model has no terms")
        self.model = model
        self.beta = float(beta)
        self.warmup_steps = int(warmup)
        self.measure_steps = int(measure)
        self.n_bins = int(bins)
        self.steps_per_bin = self.measure_steps // self.n_bins
        k = np.diff(model.term_start).astype(np.int64)
        weights = model.term_weights
        alias_prob, alias_idx = alias_table(weights)
        self.kmax = int(np.max(k))
        self.term_start = np.ascontiguousarray(model.term_start, dtype=np.int32)
        self.term_group = np.ascontiguousarray(model.term_group, dtype=np.int32)
        disp_rows, bond_class = displacement_classes(
            np.reshape(model.bond_disp, (len(model.bond_sites), model.n_dirs)))
        table = term_table(self.term_start, model.term_bonds, self.term_group, model.bond_sites,
                           model.group_kind, bond_class)
        edge, scale, first, last = group_draw_tables(self.term_group, weights)
        self.terms = build(Terms, table=table, bond_count=k.astype(np.uint8),
                           alias_prob=alias_prob, alias_idx=alias_idx, group_edge=edge, group_scale=scale,
                           group_first=first, group_last=last, beta=self.beta,
                           beta_wtot=self.beta * float(np.sum(weights)))
        self.kind = kind_record(model)
        self.estimators = estimators
        self.improved = uses_loop_estimators(estimators, self.kind)
        n_groups = len(model.group_names)
        self._acc_size = acc_size(n_groups, kind_acc_slots(self.kind, n_groups), *profile_size(model))
        phase = np.ascontiguousarray(model.phase, dtype=np.int8)
        coords = np.asarray(model.site_coords, dtype=np.float64).reshape(model.n_sites, model.n_dirs)
        lengths = np.asarray(model.dir_lengths, dtype=np.float64)
        arg = 2.0 * np.pi * coords / lengths[None, :] if model.n_dirs else coords
        self.probes = build(
            Probes, phase=phase,
            disp_classes=disp_rows,
            cos_tab=np.ascontiguousarray((np.cos(arg) * phase[:, None]).T),
            sin_tab=np.ascontiguousarray((np.sin(arg) * phase[:, None]).T),
            vbs_bonds=np.ascontiguousarray(model.vbs_bonds, dtype=np.int32).reshape(-1, 2),
            vbs_dir=np.ascontiguousarray(model.vbs_dir, dtype=np.int8),
            vbs_phase=np.ascontiguousarray(model.vbs_phase, dtype=np.int8), hist_range=HIST_RANGE,
            site_column=np.ascontiguousarray(model.site_column if model.n_columns else np.zeros(0), np.int32))
        self._hist_bins = HIST_BINS if model.n_vbs_dirs >= 2 else 0
        self.bin_names = bin_names(model)
        self._kernel = None
        self._tracers = TracerChoice(tracer_choice(self.kind))

    def _above_length(self, cutoff: int) -> int:
        """Length of ``Chain.above``: the cutoff for kinds with per-slot colours, else 0."""
        return cutoff if slot_colours(self.kind) else 0

    def _allocate_work(self) -> None:
        """Scratch records sized by the cutoff (vertex list) and the model (per-step outputs)."""
        n_slots = self.ops.shape[0] * self.kmax
        n_sites = self.model.n_sites
        if 2 * n_slots > max_loop_labels(self.kind):  # at most one loop per vertex side
            raise ValueError(f"an operator string of {n_slots} bond vertices has more loops than the loop "
                             f"update can label ({max_loop_labels(self.kind)})")
        self.vertices = build(Vertices, links=np.zeros(4 * n_slots, dtype=np.int32),
                              vflip=np.zeros(n_slots, dtype=np.uint8),
                              first=np.zeros(n_sites, dtype=np.int32), last=np.zeros(n_sites, dtype=np.int32),
                              state=np.zeros(vertex_state_length(self.kind, n_slots), dtype=np.int32),
                              interleave_above=np.array([self._tracers.setting], dtype=np.int64))
        self.tallies = build(Tallies, acc=self.acc, hist=self.hist,
                             group_counts=np.zeros(len(self.model.group_names), dtype=np.int64),
                             sweep_out=np.zeros(SW_SIZE, dtype=np.float64),
                             et_out=np.zeros(ET_SIZE, dtype=np.float64),
                             loop_tally=np.zeros(4 * n_slots if self.improved else 0, dtype=np.int64),
                             loop_ends=np.zeros(n_slots + 1 if self.improved and self.kmax > 1 else 0,
                                                dtype=np.uint8),
                             loop_site=np.zeros(n_sites if self.improved else 0, dtype=np.int64),
                             loop_sums=np.zeros((n_sites if self.improved else 0, 1 + 2 * self.model.n_dirs),
                                                dtype=np.float64))

    def _grow_cutoff(self) -> None:
        """Append empty slots so that the string is at least :func:`grown_cutoff` (n) long (warm-up only)."""
        new = grown_cutoff(int(self.counters[0]))
        if new <= self.ops.shape[0]:
            return
        self._fold_flips()
        ops = np.concatenate([self.ops, np.full(new - self.ops.shape[0], EMPTY, dtype=np.int32)])
        above = np.zeros(self._above_length(new), dtype=np.int32)
        above[:self.chain.above.shape[0]] = self.chain.above
        self.chain = build(Chain, **{**self.chain._asdict(), "ops": ops, "above": above})
        self._allocate_work()

    def _fold_flips(self) -> None:
        """Apply the loop update's pending changes that the next sweep would apply (the chain is unchanged
        in law and bits)."""
        fold_pending(self.chain, self.terms, self.kind, self.vertices, self.probes)

    # ------------------------------------------------------------------ arrays of the records
    @property
    def spins(self) -> np.ndarray:
        return self.chain.spins

    @property
    def ops(self) -> np.ndarray:
        return self.chain.ops

    @property
    def counters(self) -> np.ndarray:
        return self.chain.counters

    @property
    def rng(self) -> np.ndarray:
        return self.chain.rng

    @property
    def links(self) -> np.ndarray:
        return self.vertices.links

    @property
    def vflip(self) -> np.ndarray:
        return self.vertices.vflip

    @property
    def first(self) -> np.ndarray:
        return self.vertices.first

    @property
    def last(self) -> np.ndarray:
        return self.vertices.last

    # ------------------------------------------------------------------ running
    @property
    def total_steps(self) -> int:
        return self.warmup_steps + self.measure_steps

    @property
    def steps_done(self) -> int:
        return int(self.steps[0])

    @property
    def bins_done(self) -> int:
        return max(0, self.steps_done - self.warmup_steps) // max(self.steps_per_bin, 1)

    @property
    def done(self) -> bool:
        return self.steps_done >= self.total_steps

    @property
    def cutoff(self) -> int:
        return int(self.ops.shape[0])

    @property
    def n_ops(self) -> int:
        return int(self.counters[0])

    @property
    def vbs_histogram(self) -> np.ndarray:
        return self.hist

    @property
    def vbs_hist_range(self) -> float:
        return HIST_RANGE

    def _run(self, n_steps: int, measure: bool, stop_when_full: bool) -> int:
        records = (self.chain, self.terms, self.kind, self.vertices, self.probes, self.tallies)
        if self._kernel is None:  # the records' types never change (records.build fixes them)
            self._kernel = bound_run_steps(*records)

        def call(k: int) -> int:
            return self._kernel(k, measure, stop_when_full, self.improved, *records)

        # the loop update's path, timed half-way through the warm-up
        return self._tracers.run(call, n_steps, self.vertices.interleave_above,
                                 due_in=self.warmup_steps // 2 - self.steps_done, count=self._bond_vertices)

    def fix_loop_tracing(self, setting: int) -> None:
        """Fix the loop update's path instead of timing it: :data:`qmc.chain.tracer_choice.SINGLE`,
        :data:`~qmc.chain.tracer_choice.INTERLEAVED`, or a bond-vertex count above which it interleaves
        (speed only: the chain is the same)."""
        self._tracers.fix(setting)
        self.vertices.interleave_above[0] = setting

    def _bond_vertices(self) -> int:
        """Bond vertices of the current operator string."""
        return int(np.sum(self.terms.bond_count[self.ops[self.ops >= 0] >> OP_TERM_SHIFT], dtype=np.int64))

    def advance(self, max_steps: int, until: Callable[[np.ndarray], bool] | None = None) -> np.ndarray:
        """Run up to ``max_steps`` steps; returns the bins completed meanwhile, shape (k, len(bin_names)).

        ``until`` (optional) is called with every completed bin row; when it returns True the chain stops
        right after that bin and the rest of ``max_steps`` is not run (a precision target met,
        :class:`qmc.chain.target.TargetWatch`)."""
        rows = []
        left = int(max_steps)
        while left > 0 and not self.done:
            done = self.steps_done
            if done < self.warmup_steps:
                k = self._run(min(left, self.warmup_steps - done), False, True)
                self.steps[0] += k
                left -= k
                n = int(self.counters[0])
                if 3 * (self.cutoff - n) < n:
                    self._grow_cutoff()
            else:
                self.counters[2] = 1  # freezes the directed-loop count (qmc.engine.directed)
                in_bin = (done - self.warmup_steps) % self.steps_per_bin
                k = min(left, self.steps_per_bin - in_bin)
                self._run(k, True, False)
                self.steps[0] += k
                left -= k
                if (self.steps_done - self.warmup_steps) % self.steps_per_bin == 0:
                    rows.append(bin_row(self.model, self.beta, self.acc, self.steps_per_bin))
                    self.acc[:] = 0.0
                    if until is not None and until(rows[-1]):
                        break
        return np.array(rows, dtype=np.float64).reshape(len(rows), len(self.bin_names))

    # ------------------------------------------------------------------ replica exchange support
    def group_op_counts(self) -> np.ndarray:
        """n_g: operators of each term group in the current configuration (int64[G])."""
        return count_ops(self.ops, self.term_group, len(self.model.group_names))

    def configuration(self) -> dict[str, np.ndarray]:
        """The configuration alone (spins, operator string, operator count): what replica exchange swaps.

        The per-slot colours (``above``) belong to the configuration.  The RNG, step counters, accumulators
        and histogram stay with the chain.  The cutoff travels with the
        configuration: the SSE weight summed over placements does not depend on it, so the swap acceptance
        involves only the couplings (see :func:`qmc.exchange.rule.swap_log_ratio`)."""
        self._fold_flips()
        return {"spins": self.spins.copy(), "ops": self.ops.copy(), "counters": self.counters.copy(),
                "above": self.chain.above.copy()}

    def set_configuration(self, conf: dict[str, np.ndarray]) -> None:
        """Replace the configuration by one from :meth:`configuration` of a chain of the same lattice.  An
        operator string padded with empty slots (a larger cutoff) may come with ``above`` of the old length:
        it is padded likewise."""
        spins = np.array(conf["spins"], dtype=np.int8)
        ops = np.array(conf["ops"], dtype=np.int32)
        above = np.array(conf["above"], dtype=np.int32).reshape(-1)
        want = self._above_length(ops.shape[0])
        if 0 < above.shape[0] < want and np.all(ops[above.shape[0]:] < 0):
            above = np.concatenate([above, np.zeros(want - above.shape[0], dtype=np.int32)])
        if (spins.shape != self.spins.shape or np.any(ops >= (self.model.n_terms << OP_TERM_SHIFT))
                or above.shape[0] != self._above_length(ops.shape[0])):
            raise ValueError("configuration does not fit this model")
        counters = self.counters.copy()  # the loop count stays with the chain
        counters[0] = np.asarray(conf["counters"]).reshape(-1)[0]
        self.chain = build(Chain, spins=spins, ops=ops, counters=counters, rng=self.rng, above=above)
        self._allocate_work()

    def state(self) -> dict[str, np.ndarray]:
        """Exact snapshot of the chain (copies) in checkpoint layout ``CHECKPOINT_LAYOUT``
        (:mod:`qmc.chain.checkpoint`).  Pending loop flips are folded into the operator string."""
        self._fold_flips()
        return {
            LAYOUT_KEY: np.asarray(CHECKPOINT_LAYOUT, dtype=np.int64),
            "spins": self.spins.copy(),
            "ops": self.ops.copy(),
            "counters": self.counters.copy(),
            "rng": self.rng.copy(),
            "acc": self.acc.copy(),
            "hist": self.hist.copy(),
            "steps": self.steps.copy(),
            "above": self.chain.above.copy(),
        }
