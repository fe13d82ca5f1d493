"""MPI task farm: rank 0 coordinates and computes, the other ranks compute.

- :mod:`qmc.mpi.farm`         the entry points (``run_farm`` on rank 0, ``run_worker`` on the others)
- :mod:`qmc.mpi.world`        whether this is an MPI run (launcher detection, mpi4py)
- :mod:`qmc.mpi.protocol`     the messages between rank 0 and the workers
- :mod:`qmc.mpi.schedule`     which rank runs which unit (no MPI in it)
- :mod:`qmc.mpi.simulation`   the schedule driven through a simulated farm of any size
- :mod:`qmc.mpi.coordinator`  rank 0
- :mod:`qmc.mpi.worker`       ranks 1 .. K-1
"""

__all__: list[str] = []
