"""MPI task farm: rank 0 coordinates and computes, the other ranks compute (entry points:
:mod:`qmc.mpi.farm`)."""

__all__: list[str] = []
