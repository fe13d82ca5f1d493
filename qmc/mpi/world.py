"""Whether this process is one of several MPI ranks: launcher detection and the MPI world.

mpi4py is imported only when the process looks started by an MPI launcher (environment variables of
MPICH/Hydra, Intel MPI, Open MPI, MVAPICH, PMIx) or when ``QMC_MPI=1``; ``QMC_MPI=0`` forces a serial run.
With one rank, or without mpi4py, ``qmc run`` runs serially.  Without mpi4py but with a launcher that
started K > 1 processes, rank 0 (from the launcher's environment) runs everything serially and the others
exit at once (an ``idle`` world), so no task runs twice.
"""

from __future__ import annotations

import os
import sys
from dataclasses import dataclass
from typing import Any

from qmc.mpi.protocol import Channel, Setup

__all__ = ["MpiWorld", "launcher_rank_size", "mpi_world"]

_LAUNCHER_ENV = (  # (rank variable, size variable) set by common MPI launchers
    ("PMI_RANK", "PMI_SIZE"),  # MPICH (Hydra), Intel MPI, Slurm PMI-2
    ("OMPI_COMM_WORLD_RANK", "OMPI_COMM_WORLD_SIZE"),  # Open MPI
    ("MV2_COMM_WORLD_RANK", "MV2_COMM_WORLD_SIZE"),  # MVAPICH
    ("PMIX_RANK", None),  # PMIx (size known only to MPI)
)


@dataclass
class MpiWorld:
    """The MPI communicator of this run (``comm`` is mpi4py's COMM_WORLD).

    ``idle`` marks an extra process started by a launcher when mpi4py is missing: it must do nothing.
    """

    comm: Any
    rank: int
    size: int
    idle: bool = False

    def cancel(self) -> None:
        """Rank 0: tell the workers that the run will not start (bad configuration, refused directory)."""
        if self.comm is not None and self.rank == 0:
            Channel(self.comm).announce(Setup(ok=False))


def launcher_rank_size() -> tuple[int, int | None] | None:
    """(rank, size) announced by an MPI launcher in the environment, None when there is none."""
    for rank_var, size_var in _LAUNCHER_ENV:
        if rank_var in os.environ:
            try:
                rank = int(os.environ[rank_var])
                size = int(os.environ[size_var]) if size_var and size_var in os.environ else None
            except ValueError:
                continue
            return rank, size
    return None


def mpi_world() -> MpiWorld | None:
    """The MPI world when this process is one of K > 1 MPI ranks, else None (run serially).

    Returns an ``idle`` world for the extra processes of a launcher when mpi4py cannot be imported (rank 0
    prints a warning and runs serially).  ``QMC_MPI=0`` never uses MPI, ``QMC_MPI=1`` always tries.
    """
    setting = os.environ.get("QMC_MPI", "").strip().lower()
    if setting in ("0", "no", "off", "false"):
        return None
    launched = launcher_rank_size()
    if launched is None and setting not in ("1", "yes", "on", "true"):
        return None
    try:
        from mpi4py import MPI
    except ImportError as exc:
        if launched is None:
            return None
        rank, size = launched
        if rank == 0:
            count = "?" if size is None else size
            print(f"warning: started by an MPI launcher ({count} processes) but mpi4py "
                  f"cannot be imported ({exc}); install it (pip extra 'mpi'). Rank 0 runs every task "
                  "serially; the other processes exit.", file=sys.stderr, flush=True)
            return None
        return MpiWorld(None, rank, size or 0, idle=True)
    comm = MPI.COMM_WORLD
    if comm.Get_size() < 2:
        return None
    return MpiWorld(comm, comm.Get_rank(), comm.Get_size())
