"""A hand-made task record (invented numbers, every field filled) for the storage tests, also imported by
the subprocess that rewrites a task file in a loop."""

from __future__ import annotations

import numpy as np

from qmc.storage.task_file import TaskRecord

__all__ = ["NAMES", "make_record"]

NAMES = ("energy", "m_stag2", "stiffness", "stiffness/x", "bond_energy/q2")


def make_record(task_id: str = "L4_beta2_r0", n_bins: int = 3, status: str = "running") -> TaskRecord:
    rows = np.arange(n_bins * len(NAMES), dtype=np.float64).reshape(n_bins, len(NAMES)) / 7.0
    return TaskRecord(
        task_id=task_id, status=status, task_fingerprint="f" * 64, config_path="/x/config.toml",
        config_text="[run]\nseed = 1\n" + "#" * 70000, config_fingerprint="c" * 64,
        params={"L": 4, "beta": 2.0, "replica": 0, "lattice": "square", "size": [4, 4],
                "boundary": "periodic"},
        model={"n_sites": np.asarray(16), "group_names": np.array([b"nn", b"q2"], dtype="S64"),
               "lattice_kind": np.asarray("square"), "term_coupling": np.ones(5)},
        provenance={"package_version": "0.1.0", "git_revision": "", "master_seed": 7, "seed_key": "L=4.0",
                    "stream_seed": np.array([1, 2, 3, 2**64 - 1], dtype=np.uint64)},
        sessions=[{"start": "a", "stop": "b", "ended": status}],
        bin_names=NAMES, bins=rows,
        bins_attrs={"steps_per_bin": 10, "n_sites": 16, "linear_size": 4, "beta": 2.0, "bins_total": 8,
                    "warmup_steps": 5, "measure_steps": 80},
        vbs_histogram=np.arange(16, dtype=np.int64).reshape(4, 4), vbs_hist_range=0.25,
        checkpoint={"spins": np.ones(16, dtype=np.int8), "rng": np.array([5, 6, 7, 8], dtype=np.uint64)},
        checkpoint_attrs={"steps_done": 35, "bins_done": n_bins, "steps_total": 85, "time": 1.0,
                          "time_iso": "2024-01-01T00:00:00+0000"},
    )
