"""MPI task farm: rank 0 coordinates and computes, the other ranks compute."""

__all__: list[str] = []
