"""Storage: what a run leaves on disk.

- :mod:`qmc.storage.task_file`    HDF5 task files (one per task: bins, checkpoint, provenance)
- :mod:`qmc.storage.run_index`    the run index ``index.json``
- :mod:`qmc.storage.atomic`       atomic replacement of a file
- :mod:`qmc.storage.formats`      format names (current and earlier) and the note about old files
- :mod:`qmc.storage.hdf5_values`  Python values in HDF5 attributes and datasets
- :mod:`qmc.storage.provenance`   versions, host, seeds, sessions, time stamps
"""

__all__: list[str] = []
