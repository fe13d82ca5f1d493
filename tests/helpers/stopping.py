"""A progress sink for tests that asks a run to stop once a task has made some progress."""

from __future__ import annotations

from qmc.run.outcome import StopFlag

__all__ = ["StopAfter"]


class StopAfter:
    """Sets ``flag`` once a running task reports at least ``steps`` steps (or ``bins`` bins) done; counts
    the reports in ``calls``.  Also takes the outcomes of a whole run (``qmc.run.progress.RunDisplay``)."""

    def __init__(self, flag: StopFlag, steps: int | None = None, *, bins: int | None = None) -> None:
        self.flag, self.steps, self.bins, self.calls = flag, steps, bins, 0

    def task_started(self, *a):
        pass

    def task_advanced(self, steps_done, bins_done):
        self.calls += 1
        if (self.steps is not None and steps_done >= self.steps) or (self.bins is not None
                                                                     and bins_done >= self.bins):
            self.flag.set("test stop")

    def task_finished(self, status):
        pass

    def outcome(self, outcome, rank=None):
        pass
