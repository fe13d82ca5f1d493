"""A small J-Q2 replica-exchange ladder shared by the exchange tests: its config, its one work unit,
an uninterrupted in-memory reference run, and the bins stored in a task file."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from helpers import configs
from helpers.configs import JQ2_TERMS
from qmc.config.parser import load_config
from qmc.exchange.ladder import Ladder
from qmc.run.units import work_units
from qmc.storage.task_file import read_task

__all__ = ["Q_VALUES", "ladder_of", "reference", "stored", "write_config"]


Q_VALUES = [0.5, 0.75, 1.0, 1.25]


def write_config(tmp: Path, *, seed=17, q=Q_VALUES, warmup=500, measure=4000, bins=20, replicas=1, every=5,
                 name="x.toml") -> Path:
    """The 4x4 J-Q2 ladder along Q at beta = 2 (J = 1), written to ``tmp / name``."""
    return configs.write_config(tmp, name, seed=seed, terms=JQ2_TERMS,
                                scan={"L": [4], "Q": list(q), "beta": 2.0}, warmup_steps=warmup,
                                measure_steps=measure, bins=bins, copies=replicas, checkpoint_seconds=0.2,
                                exchange={"along": "Q", "every": every})


def ladder_of(path: Path):
    config = load_config(path)
    units = work_units(config.tasks())
    assert len(units) == 1
    return config, units[0]


def reference(unit):
    """Bins, walker rows and final ladder state of one uninterrupted in-memory run."""
    lad = Ladder(unit)
    rows = lad.advance(10**12)
    return rows, [list(w) for w in lad.walker_rows], lad.group_state()


def stored(path: Path):
    d = read_task(path)
    return np.column_stack([d.bins[n] for n in d.bin_names]), d
