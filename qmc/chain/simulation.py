"""One Markov chain: warm-up with automatic cutoff growth, then binned measurement.

The whole state is plain numpy arrays (spins, operator string, RNG words, counters, partial-bin sums,
VBS histogram): :meth:`Simulation.state` exports it and :meth:`Simulation.restore` continues the chain
bit-identically, however the work is chunked by :meth:`Simulation.advance`.

One Monte Carlo step = one diagonal-update sweep over the operator string + one full loop decomposition
(every vertex leg visited once, each loop flipped with probability 1/2).  Warm-up steps and measurement
steps are counted the same way.
"""

from __future__ import annotations

import numpy as np

from qmc.chain.alias import alias_table
from qmc.chain.observables import bin_names, bin_row
from qmc.engine.diagonal import SWEEP_OUT_SIZE
from qmc.engine.rng import draw_doubles
from qmc.engine.steps import acc_size, run_steps
from qmc.engine.vertices import apply_pending_flips, count_ops, term_table
from qmc.models.compiled import CompiledModel

__all__ = ["Simulation", "HIST_BINS", "HIST_RANGE"]

HIST_BINS = 64
HIST_RANGE = 0.25  # |D_a| <= 1/4 for the columnar dimer order parameter
_STATE_KEYS = ("spins", "ops", "counters", "rng", "acc", "hist", "steps")


class Simulation:
    """SSE Markov chain for a compiled model at inverse temperature ``beta`` (see :mod:`qmc.engine`)."""

    def __init__(
        self,
        model: CompiledModel,
        beta: float,
        *,
        warmup_steps: int,
        measure_steps: int,
        bins: int,
        seed_words: np.ndarray,
    ) -> None:
        self._setup(model, beta, warmup_steps, measure_steps, bins)
        self.rng = np.array(seed_words, dtype=np.uint64).copy()
        if self.rng.shape != (4,) or not np.any(self.rng):
            raise ValueError("seed_words must be four uint64 words, not all zero")
        u = draw_doubles(self.rng, model.n_sites)
        self.spins = np.where(u < 0.5, 1, -1).astype(np.int8)
        cutoff = max(32, int(1.2 * self.beta_wtot) + 16)
        self.ops = np.full(cutoff, -1, dtype=np.int32)
        self.counters = np.zeros(1, dtype=np.int64)
        self.acc = np.zeros(acc_size(len(model.group_names)), dtype=np.float64)
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
    ) -> Simulation:
        """Continue a chain from :meth:`state` output (bit-identical continuation)."""
        self = cls.__new__(cls)
        self._setup(model, beta, warmup_steps, measure_steps, bins)
        missing = [k for k in _STATE_KEYS if k not in state]
        if missing:
            raise ValueError(f"checkpoint lacks {', '.join(missing)}")
        self.spins = np.array(state["spins"], dtype=np.int8)
        self.ops = np.array(state["ops"], dtype=np.int32)
        self.counters = np.array(state["counters"], dtype=np.int64)
        self.rng = np.array(state["rng"], dtype=np.uint64)
        self.acc = np.array(state["acc"], dtype=np.float64)
        self.hist = np.array(state["hist"], dtype=np.int64)
        self.steps = np.array(state["steps"], dtype=np.int64)
        if self.spins.shape != (model.n_sites,) or self.acc.shape != (acc_size(len(model.group_names)),):
            raise ValueError("checkpoint does not match the model (site or term-group count differs)")
        if np.any(self.ops >= (model.n_terms << 3)) or int(np.sum(self.ops >= 0)) != int(self.counters[0]):
            raise ValueError("checkpoint operator string is inconsistent with the model")
        self._allocate_work()
        return self

    # ------------------------------------------------------------------ set-up
    def _setup(self, model: CompiledModel, beta: float, warmup: int, measure: int, bins: int) -> None:
        if not beta > 0:
            raise ValueError(f"beta must be positive, got {beta}")
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
        self.alias_prob, self.alias_idx = alias_table(weights)
        self.beta_wtot = self.beta * float(np.sum(weights))
        self.kmax = int(np.max(k))
        self.term_start = np.ascontiguousarray(model.term_start, dtype=np.int32)
        self.term_bonds = np.ascontiguousarray(model.term_bonds, dtype=np.int32)
        self.term_group = np.ascontiguousarray(model.term_group, dtype=np.int32)
        self.bond_sites = np.ascontiguousarray(model.bond_sites, dtype=np.int32)
        self.term_table = term_table(self.term_start, self.term_bonds, self.term_group, self.bond_sites)
        self.phase = np.ascontiguousarray(model.phase, dtype=np.int8)
        self.bond_disp = np.ascontiguousarray(model.bond_disp, dtype=np.float64).reshape(
            len(model.bond_sites), model.n_dirs
        )
        coords = np.asarray(model.site_coords, dtype=np.float64).reshape(model.n_sites, model.n_dirs)
        lengths = np.asarray(model.dir_lengths, dtype=np.float64)
        arg = 2.0 * np.pi * coords / lengths[None, :] if model.n_dirs else coords
        self.cos_tab = np.ascontiguousarray((np.cos(arg) * self.phase[:, None]).T)
        self.sin_tab = np.ascontiguousarray((np.sin(arg) * self.phase[:, None]).T)
        self.vbs_bonds = np.ascontiguousarray(model.vbs_bonds, dtype=np.int32).reshape(-1, 2)
        self.vbs_dir = np.ascontiguousarray(model.vbs_dir, dtype=np.int8)
        self.vbs_phase = np.ascontiguousarray(model.vbs_phase, dtype=np.int8)
        self._hist_bins = HIST_BINS if model.n_vbs_dirs >= 2 else 0
        self.bin_names = bin_names(model)

    def _allocate_work(self) -> None:
        cutoff = self.ops.shape[0]
        self.vflip = np.zeros(cutoff * self.kmax, dtype=np.uint8)
        self.links = np.zeros(4 * cutoff * self.kmax, dtype=np.int32)
        self.first = np.zeros(self.model.n_sites, dtype=np.int32)
        self._group_counts = np.zeros(max(len(self.model.group_names), 1), dtype=np.int64)
        self._sweep_out = np.zeros(SWEEP_OUT_SIZE, dtype=np.float64)
        self._et_out = np.zeros(4, dtype=np.float64)
        self.last = np.zeros(self.model.n_sites, dtype=np.int32)

    def _grow_cutoff(self) -> None:
        """Append empty slots so that the string is at least 1.5 n + 16 long (warm-up only)."""
        n = int(self.counters[0])
        new = n + n // 2 + 16
        if new <= self.ops.shape[0]:
            return
        apply_pending_flips(self.ops, self.vflip, self.term_start)
        self.ops = np.concatenate([self.ops, np.full(new - self.ops.shape[0], -1, dtype=np.int32)])
        self._allocate_work()

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
        return run_steps(
            n_steps, measure, stop_when_full,
            self.ops, self.vflip, self.spins, self.links, self.first, self.last, self.counters,
            self.beta, self.beta_wtot, self.alias_prob, self.alias_idx,
            self.term_table, self.bond_disp, self.phase,
            self.cos_tab, self.sin_tab, self.vbs_bonds, self.vbs_dir, self.vbs_phase, self.hist, HIST_RANGE,
            self.rng, self.acc, self._group_counts, self._sweep_out, self._et_out,
        )

    def advance(self, max_steps: int) -> np.ndarray:
        """Run up to ``max_steps`` steps; returns the bins completed meanwhile, shape (k, len(bin_names))."""
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
                in_bin = (done - self.warmup_steps) % self.steps_per_bin
                k = min(left, self.steps_per_bin - in_bin)
                self._run(k, True, False)
                self.steps[0] += k
                left -= k
                if (self.steps_done - self.warmup_steps) % self.steps_per_bin == 0:
                    rows.append(bin_row(self.model, self.beta, self.acc, self.steps_per_bin))
                    self.acc[:] = 0.0
        return np.array(rows, dtype=np.float64).reshape(len(rows), len(self.bin_names))

    # ------------------------------------------------------------------ replica exchange support
    def group_op_counts(self) -> np.ndarray:
        """n_g: operators of each term group in the current configuration (int64[G])."""
        return count_ops(self.ops, self.term_group, len(self.model.group_names))

    def configuration(self) -> dict[str, np.ndarray]:
        """The configuration alone (spins, operator string, operator count): what replica exchange swaps.

        The RNG, step counters, accumulators and histogram stay with the chain.  The cutoff travels with the
        configuration: the SSE weight summed over placements does not depend on it, so the swap acceptance
        involves only the couplings (see :func:`qmc.exchange.rule.swap_log_ratio`)."""
        apply_pending_flips(self.ops, self.vflip, self.term_start)
        return {"spins": self.spins.copy(), "ops": self.ops.copy(), "counters": self.counters.copy()}

    def set_configuration(self, conf: dict[str, np.ndarray]) -> None:
        """Replace the configuration by one from :meth:`configuration` of a chain of the same lattice."""
        spins = np.array(conf["spins"], dtype=np.int8)
        ops = np.array(conf["ops"], dtype=np.int32)
        if spins.shape != self.spins.shape or np.any(ops >= (self.model.n_terms << 3)):
            raise ValueError("configuration does not fit this model")
        self.spins = spins
        self.ops = ops
        self.counters = np.array(conf["counters"], dtype=np.int64)
        self._allocate_work()

    def state(self) -> dict[str, np.ndarray]:
        """Exact snapshot of the chain (copies).  Pending loop flips are folded into the operator string."""
        apply_pending_flips(self.ops, self.vflip, self.term_start)
        return {
            "spins": self.spins.copy(),
            "ops": self.ops.copy(),
            "counters": self.counters.copy(),
            "rng": self.rng.copy(),
            "acc": self.acc.copy(),
            "hist": self.hist.copy(),
            "steps": self.steps.copy(),
        }
