"""The in-memory ladder of replica exchange: the chains of an exchange group side by side, with swaps.

An exchange group (``Task.exchange_group``) is the set of tasks that differ only in the coupling named by
``[sampling] exchange``; sorted by that coupling they form a *ladder* of M chains.  The chains advance in
lockstep; every ``exchange_every`` Monte Carlo steps (warm-up and measurement alike) neighbouring pairs
(i, i+1) -- even i at odd exchange rounds, odd i at even rounds, round r = step / exchange_every -- try to
swap their configurations, accepted with probability min(1, R) where ln R is
:func:`qmc.exchange.rule.swap_log_ratio` of the two chains' group couplings and group operator counts.
One uniform number per attempted pair is drawn from the group's own xoshiro stream
``stream_seed(master_seed, "exchange:" + group key)``; each chain keeps its own RNG, step counter, bin
accumulators and VBS histogram (they belong to the coupling); only the configuration (spins, operator
string, operator count) moves.  Nothing depends on the process or the number of MPI ranks.

Cutoff: during warm-up each chain grows the cutoff of the configuration it holds; at the end of the
warm-up all configurations are padded with empty slots to the largest cutoff of the ladder, so that any
configuration fits any coupling during measurement (the weight summed over placements does not depend on
the cutoff; warm-up states are never measured).

Walkers: configuration ``w`` starts at position ``w``; ``labels[i]`` is the configuration now at
position i.  A round trip is counted when a configuration that went from the lowest to the highest
coupling comes back to the lowest.  Acceptance counts, round trips and the up/down occupation (``n_up``,
``n_down``: exchange points at which the configuration at position i last visited the lowest / highest
coupling) cover the measurement phase; the warm-up attempts are counted separately.

Precision target: each local chain's :class:`~qmc.chain.target.TargetWatch` is fed with its bins as they
complete; at every meeting each member says whether the target of all its chains is met by their bins at
that step, and the ladder is finished (:attr:`Ladder.finished`) at the first meeting at which every chain
meets it.  The decision depends only on the bins at the meeting's step, never on timing or on the team.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence

import numpy as np

from qmc.chain.simulation import Simulation
from qmc.chain.target import TargetWatch
from qmc.config.parser import Task, build_model
from qmc.engine.rng import draw_doubles, stream_seed
from qmc.errors import UserError
from qmc.exchange.meeting import LadderError, Vote, meet, trade_configuration
from qmc.exchange.rule import group_couplings, swap_log_ratio
from qmc.exchange.team import LadderTeam, SoloTeam, chain_blocks
from qmc.models.compiled import CompiledModel

__all__ = ["Ladder", "LadderError", "ladder_tasks", "check_ladder_models", "check_ladders", "chain_costs",
           "exchange_seed_key", "GROUP_STATE_KEYS"]

GROUP_STATE_KEYS = ("rng", "labels", "direction", "round_trips", "attempted", "accepted",
                    "warmup_attempted", "warmup_accepted", "n_up", "n_down")
"""Arrays of the ladder state (besides the chains): exchange RNG words, configuration at each position,
walker directions (0 none yet, +1 last extreme was the lowest coupling, -1 highest after the lowest,
-2 highest without the lowest before), round trips per configuration, per-pair counts, occupations."""


def exchange_seed_key(group: str) -> str:
    """Key of the swap-decision stream of an exchange group: ``"exchange:" + group``."""
    return "exchange:" + group


def ladder_tasks(tasks: Sequence[Task]) -> list[Task]:
    """The tasks of one exchange group sorted by the exchanged parameter (lowest first); checks the group."""
    tasks = list(tasks)
    if not tasks:
        raise ValueError("an exchange group needs tasks")
    name, group = tasks[0].exchange, tasks[0].exchange_group
    if name is None or group is None or any(t.exchange_group != group or t.exchange != name for t in tasks):
        raise ValueError("tasks of different exchange groups (or without exchange) cannot form one ladder")
    ordered = sorted(tasks, key=lambda t: float(t.params[name]))
    values = [float(t.params[name]) for t in ordered]
    if len(set(values)) != len(values):
        raise UserError(f"exchange group {group} has the value {name} = {values} twice", ordered[0].source)
    return ordered


def chain_costs(tasks: Sequence[Task], models: Sequence[CompiledModel]) -> list[float]:
    """Relative cost of a Monte Carlo step of each chain: beta W_tot = beta sum_t C_t / 2^{k_t}, which sets
    the length of the operator string (used to balance a ladder's blocks over its team)."""
    return [max(float(t.beta) * float(np.sum(m.term_weights)), 1e-300)
            for t, m in zip(tasks, models, strict=True)]


def check_ladder_models(tasks: Sequence[Task], models: Sequence[CompiledModel]) -> np.ndarray:
    """Check that the models differ only in their couplings; return the group couplings, float64[M, G].

    Replica exchange compares the weights of one configuration under two couplings, which needs the same
    terms (``term_start``, ``term_bonds``, ``term_group``, sites, groups) at every point of the ladder.
    """
    name = tasks[0].exchange
    where = f"{tasks[0].source}: exchange.along"
    ref = models[0]
    out = []
    for task, m in zip(tasks, models, strict=True):
        same = (m.n_sites == ref.n_sites and tuple(m.group_names) == tuple(ref.group_names)
                and all(np.array_equal(getattr(m, k), getattr(ref, k))
                        for k in ("term_start", "term_bonds", "term_group")))
        if not same:
            raise UserError(
                f"replica exchange along '{name}' needs the same terms at every value of {name}, but at "
                f"{name} = {task.params[name]} the model has {m.n_terms} terms in groups "
                f"{list(m.group_names)} "
                f"and at {name} = {tasks[0].params[name]} {ref.n_terms} terms in groups "
                f"{list(ref.group_names)} (a zero coupling drops its terms: use a small positive value, or "
                "leave that point out of the exchange)", where)
        try:
            out.append(group_couplings(np.asarray(m.term_coupling, dtype=np.float64),
                                       np.asarray(m.term_group), len(m.group_names)))
        except ValueError as exc:
            raise UserError(f"replica exchange along '{name}': {exc} (task {task.task_id})", where) from None
    return np.array(out, dtype=np.float64)


def check_ladders(tasks: Sequence[Task]) -> int:
    """Check every exchange ladder among ``tasks`` (same terms at every point, uniform group couplings)
    before anything runs; raises UserError.  Returns the number of ladders."""
    groups: dict[str, list[Task]] = {}
    for t in tasks:
        if t.exchange_group is not None:
            groups.setdefault(t.exchange_group, []).append(t)
    for members in groups.values():
        ordered = ladder_tasks(members)
        check_ladder_models(ordered, [build_model(t) for t in ordered])
    return len(groups)


# ----------------------------------------------------------------------------------------------------------
# the ladder in memory


class Ladder:
    """M chains of one exchange group in lockstep, with configuration swaps at exchange points.

    ``tasks`` must be in ladder order (:func:`ladder_tasks`).  With a ``team`` of several processes
    (:mod:`qmc.exchange.team`) this process holds only the chains of its block, :attr:`local` (a range of
    positions); all members must make the same calls.  Without ``chain_states`` the chains start from
    their tasks' own streams; otherwise the local chains are restored from their :meth:`Simulation.state`
    (one per local position, all at the same step) and the ladder from ``group_state``
    (:data:`GROUP_STATE_KEYS`).  :meth:`advance` returns the bins completed by each local chain;
    :attr:`walker_rows` collects, per local chain, the configuration label at that chain when each of
    those bins closed.

    Synchronisation points are the end of the warm-up and every exchange point; there the members meet
    (:func:`qmc.exchange.meeting.meet`) and share their :attr:`vote` (a :class:`~qmc.exchange.meeting.Vote`
    set by the caller before :meth:`advance`); afterwards :attr:`votes` holds every member's vote and
    :attr:`voted_at` the step.  A chain that raises makes every member raise :class:`LadderError` at the
    next synchronisation point.  ``watches`` are the precision-target watches of the local chains (ladder
    order; by default new ones from the tasks' targets, fed with nothing); the ladder feeds them.
    """

    def __init__(self, tasks: Sequence[Task], models: Sequence[CompiledModel] | None = None, *,
                 chain_states: Sequence[dict[str, np.ndarray]] | None = None,
                 group_state: dict[str, np.ndarray] | None = None, team: LadderTeam | None = None,
                 watches: Sequence[TargetWatch] | None = None) -> None:
        self.tasks = list(tasks)
        if ladder_tasks(self.tasks) != self.tasks:
            raise ValueError("tasks must be in ladder order (sorted by the exchanged parameter)")
        self.models = list(models) if models is not None else [build_model(t) for t in self.tasks]
        self.couplings = check_ladder_models(self.tasks, self.models)
        t0 = self.tasks[0]
        s = t0.sampling
        self.m = len(self.tasks)
        self.team: LadderTeam = team if team is not None else SoloTeam()
        self.blocks = chain_blocks(self.m, self.team.size, chain_costs(self.tasks, self.models))
        self.local = self.blocks[self.team.member]
        self.owner = [r for r, b in enumerate(self.blocks) for _ in b]
        self.every = int(s.exchange_every)
        self.warmup_steps = int(s.warmup_steps)
        self.total_steps = int(s.warmup_steps + s.measure_steps)
        self.group = str(t0.exchange_group)
        kw = dict(warmup_steps=s.warmup_steps, measure_steps=s.measure_steps, bins=s.bins,
                  estimators=s.estimators)
        self.sims: dict[int, Simulation] = {}
        if chain_states is None:
            for i in self.local:
                t = self.tasks[i]
                self.sims[i] = Simulation(self.models[i], t.beta, seed_words=stream_seed(t.seed, t.seed_key),
                                          **kw)
            m = self.m
            self.state = {
                "rng": stream_seed(t0.seed, str(t0.exchange_seed_key)),
                "labels": np.arange(m, dtype=np.int64),
                "direction": np.zeros(m, dtype=np.int8),
                "round_trips": np.zeros(m, dtype=np.int64),
                "attempted": np.zeros(m - 1, dtype=np.int64), "accepted": np.zeros(m - 1, dtype=np.int64),
                "warmup_attempted": np.zeros(m - 1, dtype=np.int64),
                "warmup_accepted": np.zeros(m - 1, dtype=np.int64),
                "n_up": np.zeros(m, dtype=np.int64), "n_down": np.zeros(m, dtype=np.int64),
            }
            self._walk(count=False)
        else:
            if group_state is None or len(chain_states) != len(self.local):
                raise ValueError("restoring a ladder needs one chain state per local chain and the "
                                 "ladder state")
            for i, st in zip(self.local, chain_states, strict=True):
                self.sims[i] = Simulation.restore(self.models[i], self.tasks[i].beta, state=st, **kw)
            if len({sim.steps_done for sim in self.sims.values()}) != 1:
                raise ValueError("the chains of a ladder checkpoint are at different steps")
            self.state = self._check_state(group_state)
        self.walker_rows: list[list[int]] = [[] for _ in self.local]
        if watches is None:
            watches = [TargetWatch(self.tasks[i].sampling.target, self.sims[i].bin_names) for i in self.local]
        if len(watches) != len(self.local):
            raise ValueError("a ladder needs one target watch per local chain")
        self.watches = list(watches)
        self.finished = False
        self._n_groups = len(self.sims[self.local.start].group_op_counts())
        self.vote: Vote | None = None
        self.votes: list[Vote] = []
        self.voted_at = -1
        self._padded = False

    def _check_state(self, st: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
        m = self.m
        shapes = {"rng": 4, "labels": m, "direction": m, "round_trips": m, "attempted": m - 1,
                  "accepted": m - 1, "warmup_attempted": m - 1, "warmup_accepted": m - 1, "n_up": m,
                  "n_down": m}
        dtypes = {"rng": np.uint64, "direction": np.int8}
        out = {}
        for k, n in shapes.items():
            if k not in st:
                raise ValueError(f"ladder checkpoint lacks {k}")
            a = np.array(st[k], dtype=dtypes.get(k, np.int64)).reshape(-1)
            if a.shape != (n,):
                raise ValueError(f"ladder checkpoint {k} has {a.size} entries, expected {n}")
            out[k] = a
        if sorted(out["labels"].tolist()) != list(range(m)):
            raise ValueError("ladder checkpoint labels are not a permutation")
        return out

    # -------------------------------------------------------------------------------------------- counters
    @property
    def local_sims(self) -> list[Simulation]:
        """The chains of this process, in ladder order."""
        return [self.sims[i] for i in self.local]

    @property
    def steps_done(self) -> int:
        return self.sims[self.local.start].steps_done

    @property
    def done(self) -> bool:
        """At the last step, or finished by the precision target."""
        return self.steps_done >= self.total_steps or self.finished

    def next_stop(self) -> int:
        """The next step at which the ladder is at an exchange point (or the warm-up end, or the end)."""
        s = self.steps_done
        nxt = min(self.total_steps, (s // self.every + 1) * self.every)
        if s < self.warmup_steps:
            nxt = min(nxt, self.warmup_steps)
        return nxt

    def is_sync_point(self, s: int) -> bool:
        """Whether the members meet at step ``s`` (end of the warm-up, or an exchange point)."""
        return s == self.warmup_steps or (s % self.every == 0 and 0 < s < self.total_steps)

    def rejoin(self) -> None:
        """Hold the meeting of the current step if it is a synchronisation point before the end.

        A run's last step is no exchange point, so a ladder restored from the end of a finished, shorter
        run (the configuration now asks for more steps) has missed the meeting, and swap round, that a run
        of the new length holds there; held now, the continued run is bit-identical to that run."""
        s = self.steps_done
        if s < self.total_steps and self.is_sync_point(s):
            self._sync(s, None)

    def group_state(self) -> dict[str, np.ndarray]:
        """Copy of the ladder state (:data:`GROUP_STATE_KEYS`)."""
        return {k: self.state[k].copy() for k in GROUP_STATE_KEYS}

    # -------------------------------------------------------------------------------------------- running
    def advance(self, max_steps: int) -> list[np.ndarray]:
        """Advance every local chain by up to ``max_steps`` steps (all chains equally), meeting the other
        members and swapping at each synchronisation point reached; returns the completed bins of each
        local chain (list of arrays (k_i, n_columns), in ladder order)."""
        rows: list[list[np.ndarray]] = [[] for _ in self.local]
        left = int(max_steps)
        if self.steps_done == 0 and self.warmup_steps == 0 and not self._padded and left > 0:
            self._sync(0, None)  # no warm-up: the cutoffs must agree before the first measured step
        while left > 0 and not self.done:
            target = self.next_stop()
            k = min(left, target - self.steps_done)
            labels = self.state["labels"]
            error = None
            for j, i in enumerate(self.local):
                try:
                    new = self.sims[i].advance(k)
                except Exception as exc:  # shared with the other members at the next meeting
                    error = f"chain at {self.tasks[i].task_id}: {type(exc).__name__}: {exc}"
                    break
                rows[j].extend(new)
                for row in new:
                    self.watches[j].add(row)
                self.walker_rows[j].extend([int(labels[i])] * len(new))
            left -= k
            if error is not None:  # meet the others where they will wait for this member, then stop
                if self.is_sync_point(target):
                    self._sync(target, error)
                raise LadderError(error)
            if self.is_sync_point(self.steps_done):
                self._sync(self.steps_done, None)
        return [np.array(r, dtype=np.float64).reshape(len(r), len(self.sims[i].bin_names))
                for i, r in zip(self.local, rows, strict=True)]

    def _sync(self, s: int, error: str | None) -> None:
        """Meet the other members at step ``s`` (:func:`qmc.exchange.meeting.meet`), with this member's vote
        on the precision target; pad the cutoffs at the end of the warm-up; run the swap round of an
        exchange point; finish when every chain meets the target."""
        counts = np.zeros((self.m, self._n_groups), dtype=np.int64)
        if error is None:
            for i in self.local:
                counts[i] = self.sims[i].group_op_counts()
        cutoff = max(sim.cutoff for sim in self.local_sims)
        met = all(w.met for w in self.watches)  # False without a target, or before its first 64 bins
        vote = dataclasses.replace(self.vote if self.vote is not None else Vote(), target=met)
        got = meet(self.team, error, vote, cutoff, counts)
        self.votes, self.voted_at = got.votes, s
        self.finished = all(v.target for v in got.votes)
        if s == self.warmup_steps:
            self._pad_cutoffs(got.top_cutoff)
        if s % self.every == 0 and 0 < s < self.total_steps:
            self._swap_round(s, got.counts)
            self._walk(count=s >= self.warmup_steps)

    def _pad_cutoffs(self, top: int) -> None:
        self._padded = True
        for sim in self.local_sims:
            if sim.cutoff < top:
                conf = sim.configuration()
                conf["ops"] = np.concatenate([conf["ops"], np.full(top - sim.cutoff, -1, dtype=np.int32)])
                sim.set_configuration(conf)

    def _swap_round(self, s: int, counts: np.ndarray) -> None:
        """Decide every pair of this round (identically on all members: same counts int64[M, G], same
        stream), then move the configurations of the accepted pairs (across members with
        :func:`qmc.exchange.meeting.trade_configuration`, pairs in increasing order)."""
        st = self.state
        measuring = s >= self.warmup_steps
        tried = st["attempted"] if measuring else st["warmup_attempted"]
        took = st["accepted"] if measuring else st["warmup_accepted"]
        first = (s // self.every - 1) % 2
        accepted = []
        for i in range(first, self.m - 1, 2):
            log_r = swap_log_ratio(self.couplings[i], self.couplings[i + 1], counts[i], counts[i + 1])
            u = float(draw_doubles(st["rng"], 1)[0])
            tried[i] += 1
            if log_r >= 0.0 or u < math.exp(log_r):
                took[i] += 1
                accepted.append(i)
                st["labels"][i], st["labels"][i + 1] = st["labels"][i + 1], st["labels"][i]
        for i in accepted:
            a, b = self.sims.get(i), self.sims.get(i + 1)
            if a is not None and b is not None:
                conf_a, conf_b = a.configuration(), b.configuration()
                a.set_configuration(conf_b)
                b.set_configuration(conf_a)
            elif a is not None:
                a.set_configuration(trade_configuration(self.team, a.configuration(), self.owner[i + 1]))
            elif b is not None:
                b.set_configuration(trade_configuration(self.team, b.configuration(), self.owner[i]))

    def _walk(self, count: bool) -> None:
        st = self.state
        lab, d = st["labels"], st["direction"]
        bottom, top = int(lab[0]), int(lab[-1])
        if d[bottom] == -1 and count:
            st["round_trips"][bottom] += 1
        d[bottom] = 1
        if d[top] >= 0:
            d[top] = -1 if d[top] == 1 else -2
        if count:
            dirs = d[lab]
            st["n_up"] += dirs == 1
            st["n_down"] += dirs < 0
