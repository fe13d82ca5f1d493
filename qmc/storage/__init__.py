"""Storage: HDF5 task files, the run index, atomic writes and provenance records."""

__all__: list[str] = []
