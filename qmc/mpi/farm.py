"""MPI task farm behind ``mpiexec -n K qmc run CONFIG``: dynamic load balancing over K ranks.

The two entry points: :func:`run_farm` on rank 0 and :func:`run_worker` on the others (whether this is an
MPI run at all: :func:`qmc.mpi.world.mpi_world`).  The pieces, one module each:

* :mod:`qmc.mpi.protocol` -- the messages between rank 0 and the workers, typed, encoded in one place;
* :mod:`qmc.mpi.schedule` -- which rank runs which unit (largest first, ladder teams, prefetching);
* :mod:`qmc.mpi.coordinator` -- rank 0: answers the workers between chunks of its own units, keeps the
  run index and the log, stops everyone;
* :mod:`qmc.mpi.worker` -- the other ranks: ask, run, report.

Units of work are single tasks and whole replica-exchange ladders (:func:`qmc.run.units.work_units`); a
ladder of M chains runs side by side on ``team_size(M, min(K, exchange_ranks))`` ranks
(:mod:`qmc.exchange.team`), each member writing its chains' task files.  The farm itself uses only
``isend/recv/Iprobe/bcast`` with pickled objects; ladder teams add ``Create_group``, ``Allgather`` and
``sendrecv`` on their own communicators.  Bins do not depend on the number of ranks.
"""

from __future__ import annotations

import logging
import sys
from typing import Any

from qmc.mpi.coordinator import Coordinator
from qmc.mpi.protocol import Channel, Setup
from qmc.mpi.worker import Worker
from qmc.mpi.world import MpiWorld
from qmc.run.outcome import RunReport, StopFlag
from qmc.run.plan import RunPlan
from qmc.run.progress import NullProgress
from qmc.storage.formats import quiet_old_format_notes

__all__ = ["progress_seconds", "run_farm", "run_worker"]


def _abort(world: MpiWorld, exc: BaseException) -> None:
    print(f"error: rank {world.rank}: {type(exc).__name__}: {exc}; aborting all ranks", file=sys.stderr,
          flush=True)
    world.comm.Abort(1)


def progress_seconds(ranks: int) -> float:
    """How often a worker reports a running unit's progress: every 2 s, and every ranks/200 s beyond 400
    ranks, so that rank 0 receives at most about 200 reports a second (about 2% of its time)."""
    return max(2.0, ranks / 200.0)


def run_farm(world: MpiWorld, plan: RunPlan, *, stop_flag: StopFlag | None = None, progress: Any = None,
             logger: logging.Logger | None = None, deadline: float | None = None) -> RunReport:
    """Rank 0: hand the plan's units out to all ranks (and run some itself); keeps ``index.json``.

    Same result as :func:`qmc.run.serial.run_serial`; the statistics are logged and kept in
    ``run_farm.stats``.  Any unexpected error aborts the whole MPI job (``MPI_Abort``) rather than leaving
    ranks waiting.
    """
    stop_flag = stop_flag if stop_flag is not None else StopFlag()
    log = logger if logger is not None else logging.getLogger("qmc.run")
    prog = progress if progress is not None else NullProgress()
    try:
        Channel(world.comm).announce(Setup(True, str(plan.run_dir), plan.config.text,
                                           plan.config.fingerprint(), deadline, progress_seconds(world.size)))
        coord = Coordinator(world, plan, stop_flag, prog, log, deadline)
        report = coord.run()
        run_farm.stats = coord.stats  # type: ignore[attr-defined]
        return report
    except BaseException as exc:
        if isinstance(exc, SystemExit):
            raise
        log.error("MPI farm on rank 0 failed unexpectedly: %s: %s", type(exc).__name__, exc)
        _abort(world, exc)
        raise


def run_worker(world: MpiWorld, *, stop_flag: StopFlag | None = None) -> int:
    """Ranks 1..K-1: run the units rank 0 hands out until it says finish; returns the exit status
    (0, or 2 when rank 0 could not start the run -- rank 0 reports why)."""
    setup = Channel(world.comm).await_setup()
    if not setup.ok:
        return 2
    quiet_old_format_notes()  # rank 0 has read every task file's header and said it for the run
    try:
        Worker(world, stop_flag).run(setup)
    except BaseException as exc:
        if isinstance(exc, SystemExit):
            raise
        _abort(world, exc)
        raise
    return 0
