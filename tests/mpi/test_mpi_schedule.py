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
    Progress,
    ProtocolError,
    Request,
    Stop,
    Tag,
    TakeBack,
    Unstarted,
    decode,
    encode,
    tag_of,
)
from qmc.mpi.schedule import Placement, Schedule, unit_cost
from qmc.mpi.simulation import simulate
from qmc.run.outcome import TaskOutcome


def fake_task(tid: str, L: int, beta: float = 1.0, steps: int = 100, ladder: str | None = None):
    return SimpleNamespace(task_id=tid, size=(L, L), beta=beta, exchange_group=ladder,
                           sampling=SimpleNamespace(warmup_steps=steps // 10, measure_steps=steps))


# ------------------------------------------------------------------------------------------- protocol


def test_every_message_survives_the_wire():
    out = TaskOutcome("L8_r0", "done", "", 20, 20, 1100, 1100, 1.5, "/r/tasks/L8_r0.h5")
    task = fake_task("L8_r0", 8)
    messages = [Request(True), Request(False), Done(3, [out], [(20, "(at 12:00:00.000) task L8_r0: done")]),
                Unstarted(4), Progress(4, 1200, 7), Assign(5, [task]), JoinTeam(6, [task, task], [0, 2]),
                NoUnit(), Finish(), Stop("SIGTERM received"), TakeBack(5)]
    for msg in messages:
        wire = pickle.loads(pickle.dumps(encode(msg)))  # what mpi4py does with the tuple
        assert isinstance(wire, tuple) and isinstance(wire[0], int)
        assert decode(wire) == msg
    assert decode(encode(messages[2])).outcomes[0] == out
    assert {tag_of(m) for m in messages[:5]} == {Tag.TO_RANK0}
    assert {tag_of(m) for m in messages[5:9]} == {Tag.WORK}
    assert {tag_of(m) for m in messages[9:]} == {Tag.CONTROL}
    assert len({int(k) for k in Kind}) == len(Kind) == 10


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


def started_pair(sizes: list[int], ranks: int = 2, **kw) -> Schedule:
    """A schedule whose first units run on worker 1 and rank 0."""
    s = Schedule(singles(*sizes), None, ranks, one_rank_each, **kw)
    s.wait(1)
    assert s.dispatch(stopping=False) == ([Placement(0, (1,))], [])
    assert s.own(stopping=False) == Placement(1, (0,))
    return s


def test_prefetch_only_when_the_unit_would_not_wait_behind_another_while_ranks_idle():
    # the scan of issue 17: L = 48, 32, 24, 16, 12, 8 at beta = 2L on 2 ranks (cost ~ L^3): L24 behind
    # L48 would end at (48^3 + 24^3) / (cost of a beta-step), long after the balanced end of all the work
    s = started_pair([48, 32, 24, 16, 12, 8])
    assert s.prefetch(1, stopping=False) is None
    assert s.reserved == {} and list(s.queue) == [2, 3, 4, 5]
    # the rule before (at least K units queued) granted it: the situation the issue measured
    old = started_pair([48, 32, 24, 16, 12, 8], prefetch_rule="queue-length")
    assert old.prefetch(1, stopping=False) == Placement(2, (1,))
    # many equal tasks (cost c each): granted while much work is left, refused near the end
    s = started_pair([8] * 6)
    assert s.prefetch(1, stopping=True) is None  # never while stopping
    assert s.prefetch(1, stopping=False) == Placement(2, (1,))  # 1 + 1 <= (3 + 1 + 1 + 1) / 2
    assert s.prefetch(1, stopping=False) is None  # one prefetched unit per worker
    s.returned(0, 1)
    assert s.own(stopping=False) == Placement(3, (0,))
    s.returned(1, 0)
    s.started(1, 2)  # the worker started its prefetched unit
    assert s.reserved == {} and s.running[1] == 2
    c = s.cost[0]
    s.progress(3, 0.5 * c)  # rank 0 is half way: it will be free first, the next unit waits for it
    assert s.prefetch(1, stopping=False) is None  # 1 + 1 > (2 + 0.5 + 1) / 2
    s.progress(3, c)
    assert s.prefetch(1, stopping=False) == Placement(4, (1,))  # 1 + 1 <= (2 + 1 + 1) / 2
    assert s.counts["prefetch_granted"] == 2


def test_a_prefetched_unit_is_taken_back_for_an_idle_rank():
    s = started_pair([8] * 6)
    assert s.prefetch(1, stopping=False) == Placement(2, (1,))
    assert s.take_backs(rank0_idle=True, stopping=False) == []  # the queue is not empty
    while s.queue:  # rank 0 runs the rest while rank 1 is stuck in a slow unit
        s.returned(0, s.running[0])
        s.own(stopping=False)
    s.returned(0, s.running[0])
    assert s.take_backs(rank0_idle=False, stopping=False) == []  # nobody idles
    assert s.take_backs(rank0_idle=True, stopping=True) == []  # not while stopping
    assert s.take_backs(rank0_idle=True, stopping=False) == [(1, 2)]
    assert s.take_backs(rank0_idle=True, stopping=False) == []  # asked once
    s.handed_back(1, 2)  # the worker had not started it
    assert list(s.queue) == [2] and s.reserved == {} and not s.taking_back
    assert s.own(stopping=False) == Placement(2, (0,))
    assert s.counts["take_backs"] == 1 and s.counts["handed_back"] == 1
    # a worker that has just started it keeps it: the take-back is forgotten, nothing comes back
    s = started_pair([8] * 4)
    assert s.prefetch(1, stopping=False) == Placement(2, (1,))
    s.returned(0, 1)
    assert s.own(stopping=False) == Placement(3, (0,))
    s.returned(0, 3)
    assert s.take_backs(rank0_idle=True, stopping=False) == [(1, 2)]
    s.returned(1, 0)
    s.started(1, 2)
    assert not s.taking_back and not s.queue and not s.reserved and s.running[1] == 2
    # while a prefetched unit may come back, a waiting worker is not told to finish
    s = Schedule(singles(*[8] * 9), None, 3, one_rank_each)
    s.wait(1)
    s.wait(2)
    assert s.dispatch(stopping=False)[0] == [Placement(0, (1,)), Placement(1, (2,))]
    assert s.own(stopping=False) == Placement(2, (0,))
    assert s.prefetch(1, stopping=False) == Placement(3, (1,))  # 1 + 1 <= (6 + 3) / 3
    s.queue.clear()  # the other ranks have run the rest
    s.queue_cost = 0.0
    s.returned(2, 1)
    s.wait(2)
    assert s.dispatch(stopping=False) == ([], [])
    assert s.take_backs(rank0_idle=False, stopping=False) == [(1, 3)]
    s.handed_back(1, 3)
    assert s.dispatch(stopping=False) == ([Placement(3, (2,))], [])
    s.returned(2, 3)
    s.wait(2)
    assert s.dispatch(stopping=False) == ([], [2])  # nothing can come back now


def test_units_held_by_other_processes_are_set_aside_and_retried():
    held = {"L12"}
    s = Schedule(singles(16, 12, 8), None, 2, one_rank_each, lambda unit: unit[0].task_id not in held)
    s.wait(1)
    assert s.dispatch(stopping=False) == ([Placement(0, (1,))], [])
    assert s.own(stopping=False) == Placement(2, (0,))  # L12 is set aside, rank 0 takes L8
    assert s.elsewhere == [1] and not s.queue
    s.retry()  # still held: set aside again when it comes to be placed
    s.returned(0, 2)
    assert s.own(stopping=False) is None and s.elsewhere == [1]
    held.clear()  # its process died, or released it
    s.retry()
    assert s.own(stopping=False) == Placement(1, (0,))


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
    assert s.running == {0: 0, 1: 1, 2: 0}
    s2 = Schedule(units, None, 3, lambda u: 2 if len(u) > 1 else 1)
    s2.wait(2)
    s2.wait(1)
    assert s2.dispatch(stopping=False)[0] == [Placement(0, (1, 2))]  # a team of workers, in rank order
    assert s2.dispatch(stopping=True) == ([], [])  # nobody waits
    s2.wait(1)
    assert s2.dispatch(stopping=True) == ([], [1])  # stopping: finish, although work is queued


# ------------------------------------------------------------------------------------------- simulated farm


def l_cubed(sizes) -> list[float]:
    """Costs of square-lattice tasks at beta = 2L: N beta = 2 L^3 (per step, equal step counts)."""
    return [2.0 * L**3 / 1000.0 for L in sizes]


@pytest.mark.parametrize("sizes", [[48, 32, 24, 16, 12, 8], [32, 26, 24, 8]])
def test_simulated_two_ranks_finish_with_the_largest_task(sizes):
    costs = l_cubed(sizes)
    new = simulate(costs, 2)
    assert new.makespan == pytest.approx(max(costs)) and new.ratio == pytest.approx(1.0)
    old = simulate(costs, 2, prefetch_rule="queue-length", take_back=False)  # issue 17 as measured
    assert old.ratio > 1.25 and old.counts["prefetch_granted"] == 1


def test_simulated_take_back_rescues_a_unit_stuck_behind_a_slow_one():
    costs = [100.0] * 20
    seconds = [1000.0] + [100.0] * 19  # one task ten times slower than its estimate
    with_take_back = simulate(costs, 4, seconds=seconds)
    without = simulate(costs, 4, seconds=seconds, take_back=False)
    assert with_take_back.ratio == pytest.approx(1.0) and with_take_back.counts["handed_back"] == 1
    assert without.ratio == pytest.approx(1.1)


def test_simulated_large_farm_of_a_finite_size_scan():
    # 256 tasks on 64 ranks, the largest (L = 256) of ten minutes
    costs = [600.0 * (L / 256) ** 3 for L in range(8, 257, 8) for _ in range(8)]
    farm = simulate(costs, 64)
    assert farm.ratio < 1.03, farm.as_dict()
    assert simulate(costs, 64, prefetch_rule="queue-length", take_back=False).ratio > 1.3


# ------------------------------------------------------------------------------------------- worker side


class _ScriptedChannel:
    """A worker's channel to rank 0 without MPI: rank 0's answers (tag WORK) and control messages (tag
    CONTROL) are queued in advance or pushed by the test while a unit runs; what the worker sends is kept."""

    def __init__(self) -> None:
        self.queues = {Tag.WORK: [], Tag.CONTROL: []}
        self.sent: list = []

    def send(self, msg, dest: int) -> None:
        self.sent.append(msg)

    def waiting(self, source: int, tag) -> bool:
        return bool(self.queues[tag])

    def receive(self, source: int, tag):
        return self.queues[tag].pop(0)

    def flush(self) -> None:
        pass


def test_a_unit_handed_back_then_given_again_runs():
    """The race that lost a task under mpiexec -n 2: the worker prefetches unit 5, rank 0 takes it back
    while unit 4 runs, the worker hands it back, and rank 0 then gives unit 5 to this same worker in answer
    to its next request.  The stale prefetch answer is skipped once; the second Assign runs."""
    from qmc.mpi.worker import Worker

    worker = Worker(SimpleNamespace(comm=None, rank=1), stop_flag=None)
    channel = worker.channel = _ScriptedChannel()
    ran: list[int] = []

    def fake_run(msg, setup):
        ran.append(msg.unit)
        if msg.unit == 4:  # while unit 4 runs: its prefetch was granted (unit 5), then taken back
            worker.asked = True
            channel.queues[Tag.CONTROL].append(TakeBack(5))
            worker.check_control()
            channel.queues[Tag.WORK].append(Assign(5, []))  # the prefetch answer, read after unit 4
            channel.queues[Tag.WORK].append(Assign(5, []))  # the answer to the next plain request
            channel.queues[Tag.WORK].append(Finish())

    worker._run = fake_run
    channel.queues[Tag.WORK].append(Assign(4, []))
    worker.run(SimpleNamespace())
    assert ran == [4, 5]
    assert [m for m in channel.sent if isinstance(m, Unstarted)] == [Unstarted(5)]


def test_a_take_back_read_with_the_prefetched_unit_in_hand_hands_it_back_once():
    """The take-back may be read only when the worker is about to start the prefetched unit: it is handed
    back (once) and not run."""
    from qmc.mpi.worker import Worker

    worker = Worker(SimpleNamespace(comm=None, rank=1), stop_flag=None)
    channel = worker.channel = _ScriptedChannel()
    ran: list[int] = []

    def fake_run(msg, setup):
        ran.append(msg.unit)
        if msg.unit == 4:
            worker.asked = True
            channel.queues[Tag.WORK].append(Assign(5, []))  # prefetch answer
            channel.queues[Tag.CONTROL].append(TakeBack(5))  # not read before unit 4 ends
            channel.queues[Tag.WORK].append(Finish())

    worker._run = fake_run
    channel.queues[Tag.WORK].append(Assign(4, []))
    worker.run(SimpleNamespace())
    assert ran == [4]
    assert [m for m in channel.sent if isinstance(m, Unstarted)] == [Unstarted(5)]
