"""The MPI farm without MPI: its messages survive encoding, and its queue follows the documented rules.

(The farm under a real ``mpiexec`` is in test_mpi.py.)
"""

from __future__ import annotations

import pickle
from types import SimpleNamespace

import pytest

from qmc.mpi.protocol import (
    Assign,
    Done,
    Finish,
    JoinTeam,
    Kind,
    NoUnit,
    ProtocolError,
    Request,
    Stop,
    Tag,
    Unstarted,
    decode,
    encode,
    tag_of,
)
from qmc.mpi.schedule import Placement, Schedule, unit_cost
from qmc.run.outcome import TaskOutcome


def fake_task(tid: str, L: int, beta: float = 1.0, steps: int = 100, ladder: str | None = None):
    return SimpleNamespace(task_id=tid, size=(L, L), beta=beta, exchange_group=ladder,
                           sampling=SimpleNamespace(warmup_steps=steps // 10, measure_steps=steps))


# ------------------------------------------------------------------------------------------- protocol


def test_every_message_survives_the_wire():
    out = TaskOutcome("L8_r0", "done", "", 20, 20, 1100, 1100, 1.5, "/r/tasks/L8_r0.h5")
    task = fake_task("L8_r0", 8)
    messages = [Request(True), Request(False), Done(3, [out], [(20, "(at 12:00:00.000) task L8_r0: done")]),
                Unstarted(4), Assign(5, [task]), JoinTeam(6, [task, task], [0, 2]), NoUnit(), Finish(),
                Stop("SIGTERM received")]
    for msg in messages:
        wire = pickle.loads(pickle.dumps(encode(msg)))  # what mpi4py does with the tuple
        assert isinstance(wire, tuple) and isinstance(wire[0], int)
        assert decode(wire) == msg
    assert decode(encode(messages[2])).outcomes[0] == out
    assert {tag_of(m) for m in messages[:3]} == {Tag.TO_RANK0}
    assert {tag_of(m) for m in messages[4:8]} == {Tag.WORK} and tag_of(messages[-1]) == Tag.STOP
    assert len({int(k) for k in Kind}) == len(Kind) == 8


@pytest.mark.parametrize("wire", [("req", False), (99,), (int(Kind.DONE), 1), "finish", None])
def test_a_foreign_message_is_a_protocol_error(wire):
    with pytest.raises(ProtocolError, match="not a farm message"):
        decode(wire)


# ------------------------------------------------------------------------------------------- schedule


def singles(*sizes: int) -> list[list]:
    return [[fake_task(f"L{L}", L)] for L in sizes]


def one_rank_each(unit: list) -> int:
    return 1


def test_units_are_queued_largest_first_by_work_left():
    units = singles(8, 16, 12)
    index = {"tasks": {"L16": {"steps_done": 100}}}  # L16 has 10 of 110 steps left: 256 * 10 < 144 * 110
    s = Schedule(units, index, 2, one_rank_each)
    assert [s.units[i][0].task_id for i in s.queue] == ["L12", "L8", "L16"]
    assert unit_cost(units[0]) == 64 * 1.0 * 110
    assert unit_cost(units[1], index) == 256 * 1.0 * 10


def test_waiting_workers_get_units_in_order_then_finish():
    s = Schedule(singles(16, 12, 8), None, 3, one_rank_each)
    assert s.workers_not_heard()
    s.wait(2)
    s.wait(1)
    placed, finished = s.dispatch(stopping=False)
    assert placed == [Placement(0, (2,)), Placement(1, (1,))] and finished == []
    assert not s.workers_not_heard()
    assert s.own(stopping=False) == Placement(2, (0,))  # rank 0 takes the last one itself
    s.returned(2, 0)
    s.wait(2)
    assert s.dispatch(stopping=False) == ([], [2])  # queue empty: finish
    assert not s.all_finished()
    s.returned(1, 1)
    s.wait(1)
    assert s.dispatch(stopping=False) == ([], [1]) and s.all_finished()


def test_prefetch_only_while_the_queue_is_long():
    s = Schedule(singles(16, 14, 12, 10, 8), None, 2, one_rank_each)
    s.wait(1)
    s.dispatch(stopping=False)
    assert s.prefetch(1, stopping=True) is None  # never while stopping
    assert s.prefetch(1, stopping=False) == Placement(1, (1,))  # 4 queued >= 2 ranks
    assert s.own(stopping=False) == Placement(2, (0,))
    assert s.prefetch(1, stopping=False) == Placement(3, (1,))  # 2 queued >= 2 ranks
    assert s.prefetch(1, stopping=False) is None  # 1 queued < 2 ranks: it would wait behind a running unit
    assert s.held[1] == {0, 1, 3}


def test_a_ladder_at_the_front_waits_for_its_team():
    ladder = [fake_task(f"Q{i}", 16, ladder="g") for i in range(4)]
    units = [ladder, *singles(4, 6)]
    s = Schedule(units, None, 3, lambda u: 2 if len(u) > 1 else 1)
    assert s.members(s.queue[0]) == 2
    assert s.prefetch(1, stopping=False) is None  # no prefetch of a ladder
    s.wait(2)
    assert s.dispatch(stopping=False) == ([], [])  # one worker is not a team; the singles wait behind
    assert s.own(stopping=False) == Placement(0, (0, 2))  # rank 0 and worker 2 form it
    s.wait(1)
    assert s.dispatch(stopping=False) == ([Placement(1, (1,))], [])
    assert s.held == {1: {1}, 2: {0}}
    s2 = Schedule(units, None, 3, lambda u: 2 if len(u) > 1 else 1)
    s2.wait(2)
    s2.wait(1)
    assert s2.dispatch(stopping=False)[0] == [Placement(0, (1, 2))]  # a team of workers, in rank order
    assert s2.dispatch(stopping=True) == ([], [])  # nobody waits
    s2.wait(1)
    assert s2.dispatch(stopping=True) == ([], [1])  # stopping: finish, although work is queued
