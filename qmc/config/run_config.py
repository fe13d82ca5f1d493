"""A loaded configuration: its parsed sections, its tasks and its fingerprint."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from qmc.config.fingerprint import fingerprint, physics_fingerprint
from qmc.config.schema import (
    GroundState,
    LatticeSpec,
    ModelSection,
    RunSection,
    Sampling,
    ScanEntry,
    TermSpec,
)
from qmc.config.tasks import Task, expand_tasks

__all__ = ["RunConfig", "config_fingerprint"]


@dataclass(eq=False)
class RunConfig:
    """A loaded configuration: parsed sections (``model`` is [model]), the raw ``text`` and ``data``, the file
    ``path``, the resolved absolute ``output_dir`` and ``[ground_state]`` (None without it)."""

    path: Path
    text: str
    data: dict[str, Any]
    run: RunSection
    lattice: LatticeSpec
    terms: tuple[TermSpec, ...]
    scan: tuple[ScanEntry, ...]
    sampling: Sampling
    output_dir: Path
    model: ModelSection = field(default_factory=ModelSection)
    ground_state: GroundState | None = None
    _tasks: tuple[Task, ...] | None = field(default=None, repr=False)

    @property
    def name(self) -> str:
        return self.run.name

    @property
    def seed(self) -> int:
        return self.run.seed

    def where(self, key: str = "") -> str:
        """``"<file>: <key>"`` for messages."""
        return f"{self.path}: {key}" if key else str(self.path)

    def tasks(self) -> list[Task]:
        """All tasks: cartesian product of the scan entries in file order (first slowest), copies inner."""
        if self._tasks is None:
            self._tasks = tuple(expand_tasks(str(self.path), self.run, self.lattice, self.terms, self.scan,
                                             self.sampling, self.model, self.ground_state))
        return list(self._tasks)

    def fingerprint(self) -> str:
        """See :func:`qmc.config.fingerprint.fingerprint`."""
        return fingerprint(self.run, self.lattice, self.terms, self.scan, self.sampling, self.model,
                           self.ground_state)

    def physics_fingerprint(self) -> str:
        """See :func:`qmc.config.fingerprint.physics_fingerprint`."""
        return physics_fingerprint(self.run, self.lattice, self.terms, self.model)


def config_fingerprint(config: RunConfig) -> str:
    """The fingerprint of ``config`` (:meth:`RunConfig.fingerprint`)."""
    return config.fingerprint()
