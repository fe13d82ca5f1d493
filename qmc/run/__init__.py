"""Running tasks with their files: one path for a single task and for an exchange ladder.

- :mod:`qmc.run.plan`          checking a run directory against a configuration, the list of work
- :mod:`qmc.run.changes`       what a configuration changes in a run directory: growth, or what needs --force
- :mod:`qmc.run.status`        the state of a run directory at a glance (``qmc status``)
- :mod:`qmc.run.units`         units of work (a task, or a whole ladder) and running one
- :mod:`qmc.run.task_run`      the shared path: chunk loop, stops, checkpoint writes, failures
- :mod:`qmc.run.task_book`     the file side of one running task (bins, sessions, records)
- :mod:`qmc.run.single`        a single task (``run_task``)
- :mod:`qmc.run.ladder_run`    an exchange ladder (``run_group``): adds resuming together and meetings
- :mod:`qmc.run.serial`        the serial runner behind ``qmc run``
- :mod:`qmc.run.sharing`       a run directory shared with other processes: claims, index entries kept here
- :mod:`qmc.run.outcome`       outcomes, the stop flag, index entries of outcomes
- :mod:`qmc.run.pacing`        chunk lengths and write intervals
- :mod:`qmc.run.progress`      the progress display
- :mod:`qmc.run.task_identity` fingerprint, weight and step count of a task; how a stored file relates to it
"""

__all__: list[str] = []
