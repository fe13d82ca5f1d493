"""Running `qmc run` under a real `mpiexec` (or serially) from tests, and comparing the bins of two runs.

``PLAIN``, ``EXCHANGE`` and ``EXCHANGE_ONE_RANK`` are keyword sets of :func:`helpers.configs.write_config`
(without ``measure_steps`` and ``bins``, see :func:`write`): 4x4 and 6x6 Heisenberg scans, and a 4x4 J-Q2
exchange ladder along Q.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np

from helpers.configs import JQ2_TERMS, heisenberg_nn, write_config
from qmc.config.parser import load_config
from qmc.storage.task_file import read_task, task_path

__all__ = ["EXCHANGE", "EXCHANGE_ONE_RANK", "MPIEXEC", "PLAIN", "all_bins", "assert_same_bins", "qmc_run",
           "start", "write"]


def _mpiexec() -> str | None:
    here = Path(sys.executable).parent / "mpiexec"
    return str(here) if here.exists() else shutil.which("mpiexec")


MPIEXEC = _mpiexec()


# keywords of helpers.configs.write_config, without measure_steps and bins (see write below)
PLAIN = dict(seed=31, terms=[heisenberg_nn("J")], scan={"L": [4, 6], "J": [1.0, 1.5, 2.0], "beta": 1.5},
             warmup_steps=100, checkpoint_seconds=0.3)
EXCHANGE = dict(seed=32, terms=JQ2_TERMS, scan={"L": [4], "Q": [0.5, 0.75, 1.0], "beta": 2.0},
                warmup_steps=200, copies=2, checkpoint_seconds=0.3, exchange={"along": "Q", "every": 4})
EXCHANGE_ONE_RANK = dict(EXCHANGE, exchange={"along": "Q", "every": 4, "max_ranks": 1})


def write(tmp: Path, template: dict, name: str, measure: int = 2000, bins: int = 10) -> Path:
    return write_config(tmp, name, **template, measure_steps=measure, bins=bins)


def qmc_run(config: Path, out: Path, ranks: int | None = None, *extra: str, env: dict | None = None,
            timeout: float = 180) -> subprocess.CompletedProcess:
    cmd = [sys.executable, "-m", "qmc", "run", str(config), "--quiet", "--out", str(out), *extra]
    if ranks is not None:
        cmd = [MPIEXEC, "-n", str(ranks), *cmd]
    full_env = dict(os.environ, PYTHONUNBUFFERED="1", **(env or {}))
    return subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, env=full_env)


def start(config: Path, out: Path, ranks: int, *extra: str) -> subprocess.Popen:
    cmd = [MPIEXEC, "-n", str(ranks), sys.executable, "-m", "qmc", "run", str(config), "--quiet", "--out",
           str(out), *extra]
    return subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env=dict(os.environ, PYTHONUNBUFFERED="1"))


def all_bins(run_dir: Path, config: Path) -> dict[str, dict[str, np.ndarray]]:
    return {t.task_id: read_task(task_path(run_dir, t.task_id)).bins for t in load_config(config).tasks()}


def assert_same_bins(a: dict, b: dict) -> None:
    assert set(a) == set(b)
    for tid in a:
        assert set(a[tid]) == set(b[tid])
        for name in a[tid]:
            assert np.array_equal(a[tid][name], b[tid][name]), f"{tid} {name}"
