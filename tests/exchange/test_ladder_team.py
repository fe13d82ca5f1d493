"""A replica-exchange ladder split over several processes (qmc.exchange.team) gives the bins of one process.

The team members here are threads of this test with an in-memory allgather/sendrecv (the same two calls an
MPI team makes; the real ``mpiexec`` runs are in test_mpi.py).  Checks: bins, walks and ladder state are
bit-identical for teams of 1, 2, 3 and 5 members (a 5-chain ladder, so blocks of unequal length and swaps
across block boundaries at both parities); a stop asked by one member only stops every member at the same
exchange point, and the files resume bit-identically with another team size; a chain that fails on one
member makes every member record the failure instead of waiting forever.  Reference: the same ladder run
by one process (``Ladder.advance``), whose physics is checked against exact diagonalization in
test_exchange.py.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
from helpers.exchange_ladder import ladder_of, reference, stored, write_config
from helpers.team_threads import run_team

from qmc.chain.simulation import Simulation
from qmc.exchange.team import SoloTeam, chain_blocks
from qmc.storage.task_file import task_path

Q5 = [0.6, 0.8, 1.0, 1.2, 1.4]


def test_chain_blocks_cover_the_ladder():
    for m in range(1, 8):
        for size in range(1, m + 1):
            blocks = chain_blocks(m, size)
            assert [i for b in blocks for i in b] == list(range(m))
            assert max(map(len, blocks)) - min(map(len, blocks)) <= 1
    with pytest.raises(ValueError):
        chain_blocks(2, 3)
    assert SoloTeam().allgather(5) == [5]


@pytest.mark.parametrize("size", [2, 3, 5])
def test_bins_do_not_depend_on_the_team_size(tmp_path, size):
    config, unit = ladder_of(write_config(tmp_path, q=Q5, warmup=200, measure=800, bins=8, every=3))
    rows, walk, state = reference(unit)
    assert state["accepted"].sum() > 0
    out = run_team(unit, tmp_path / "run", size, config.text)
    blocks = chain_blocks(len(unit), size)
    for r, block in enumerate(blocks):
        assert [o.task_id for o in out[r]] == [unit[i].task_id for i in block]
        assert {o.status for o in out[r]} == {"done"}
    for i, t in enumerate(unit):
        table, d = stored(task_path(tmp_path / "run", t.task_id))
        assert np.array_equal(table, rows[i]), t.task_id
        assert list(np.asarray(d.exchange["walker"]).reshape(-1)) == walk[i]
        assert np.array_equal(np.asarray(d.exchange["accepted"]).reshape(-1), state["accepted"])


def test_one_member_stops_the_team_and_another_team_size_resumes(tmp_path):
    config, unit = ladder_of(write_config(tmp_path, q=Q5, warmup=200, measure=1200, bins=12, every=4))
    rows, walk, _ = reference(unit)
    run_dir = tmp_path / "run"
    out = run_team(unit, run_dir, 3, config.text, stop_member=2, stop_steps=2 * 500)
    flat = [o for part in out for o in part]
    assert {o.status for o in flat} == {"stopped"}
    steps = {o.steps_done for o in flat}
    assert len(steps) == 1 and 0 < steps.pop() < 1400
    out = run_team(unit, run_dir, 2, config.text)
    assert {o.status for part in out for o in part} == {"done"}
    for i, t in enumerate(unit):
        table, d = stored(task_path(run_dir, t.task_id))
        assert np.array_equal(table, rows[i]), t.task_id
        assert list(np.asarray(d.exchange["walker"]).reshape(-1)) == walk[i]


def test_a_failing_chain_fails_every_member(tmp_path, monkeypatch):
    config, unit = ladder_of(write_config(tmp_path, q=Q5, warmup=100, measure=400, bins=4, every=3))
    bad_beta = unit[3].beta
    original = Simulation.advance

    def advance(self, n):  # the chain at position 3 (second member's block of a 2-team) breaks at step 50
        if self.steps_done >= 50 and self.beta == bad_beta and self.model is broken_model[0]:
            raise FloatingPointError("injected failure")
        return original(self, n)

    broken_model: list[Any] = [None]
    import qmc.exchange.ladder as ladder_module

    real_init = ladder_module.Ladder.__init__

    def init(self, *a, **kw):
        real_init(self, *a, **kw)
        if 3 in self.sims:
            broken_model[0] = self.sims[3].model

    monkeypatch.setattr(Simulation, "advance", advance)
    monkeypatch.setattr(ladder_module.Ladder, "__init__", init)
    out = run_team(unit, tmp_path / "run", 2, config.text)
    flat = [o for part in out for o in part]
    assert {o.status for o in flat} == {"failed"}
    assert all("injected failure" in o.message for o in flat)


def test_blocks_balance_the_chains_costs():
    # contiguous blocks minimising the largest block cost (checked against all splits by brute force)
    import itertools

    rng = np.random.default_rng(5)
    for _ in range(200):
        m = int(rng.integers(1, 9))
        size = int(rng.integers(1, m + 1))
        costs = list(rng.uniform(0.5, 3.0, m))
        blocks = chain_blocks(m, size, costs)
        assert [i for b in blocks for i in b] == list(range(m)) and all(len(b) > 0 for b in blocks)
        got = max(sum(costs[i] for i in b) for b in blocks)
        best = min(max(sum(costs[a:b]) for a, b in zip((0, *cuts), (*cuts, m), strict=True))
                   for cuts in itertools.combinations(range(1, m), size - 1))
        assert got == pytest.approx(best, rel=1e-12)
    assert [len(b) for b in chain_blocks(4, 2, [1.0, 1.0, 1.0, 3.0])] == [3, 1]
