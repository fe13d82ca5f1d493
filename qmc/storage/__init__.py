"""Storage: what a run leaves on disk.

- :mod:`qmc.storage.task_file`    HDF5 task files (one per task: bins, checkpoint, provenance)
- :mod:`qmc.storage.run_index`    the run index ``index.json``
- :mod:`qmc.storage.atomic`       atomic replacement of a file
- :mod:`qmc.storage.faults`       a write the machine refuses (full disk, ...): WriteFault, exit status 74
- :mod:`qmc.storage.claims`       claims of processes sharing a run directory (job arrays)
- :mod:`qmc.storage.processes`    host name, whether a process is alive
- :mod:`qmc.storage.formats`      format names (current and earlier) and the note about old files
- :mod:`qmc.storage.hdf5_values`  Python values in HDF5 attributes and datasets
- :mod:`qmc.storage.provenance`   versions, host, seeds, sessions, time stamps
"""

__all__: list[str] = []
