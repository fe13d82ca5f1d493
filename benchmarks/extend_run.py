"""Cost of growing a run: `qmc run` of a short configuration, then of the long one on the same directory
(every task continues from its checkpoint), against `qmc run` of the long configuration from the start.

Usage::

    python benchmarks/extend_run.py [--size 12] [--beta 12] [--steps 20000] [--factor 2] [--repeats 3]

The short run measures ``steps`` Monte Carlo steps in bins of ``steps / 100`` steps, the long one
``factor * steps`` in ``factor * 100`` bins of the same length (square-lattice Heisenberg model, two tasks:
L = size/2 and size, beta as given, 1000 warm-up steps).  Prints one JSON object:

* ``cpu_seconds``: CPU time (user + system, all processes) of ``short``, ``extension`` (the long
  configuration on the short run's directory), ``grown`` = short + extension, and ``direct`` (the long
  configuration from the start); the minimum over ``repeats`` repetitions of each, as other processes on
  the machine slow a run down but never speed it up;
* ``grown_over_direct`` = grown / direct (the aim: within 1.10);
* ``startup_cpu_seconds``: CPU time of ``qmc run`` on a finished run (interpreter, imports, run-directory
  checks): the fixed cost that a second command adds;
* ``bins_identical``: the grown run's bins equal the direct run's bit for bit.

The numba compilation cache is warmed by a tiny run first, so compilation is not timed.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

CONFIG = """
[run]
seed = 4242
output = "run"
[lattice]
kind = "square"
size = ["L", "L"]
[[terms]]
type = "heisenberg"
bonds = "nn"
coupling = 1.0
[scan]
L = [{half}, {size}]
beta = {beta}
[sampling]
warmup_steps = 1000
measure_steps = {steps}
bins = {bins}
checkpoint_seconds = 300
"""


def _cpu_of(args: list[str]) -> float:
    """CPU seconds (user + system) of one command and its children."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    proc = subprocess.run(args, capture_output=True, text=True)
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if proc.returncode != 0:
        raise SystemExit(f"{' '.join(args)} failed ({proc.returncode}): {proc.stderr[-2000:]}")
    return (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def _qmc(config: Path, out: Path) -> float:
    return _cpu_of([sys.executable, "-m", "qmc", "run", str(config), "--out", str(out), "--quiet"])


def _bins(run_dir: Path) -> dict[str, dict[str, np.ndarray]]:
    from qmc.storage.task_file import read_task

    return {p.name: read_task(p).bins for p in sorted((run_dir / "tasks").glob("*.h5"))}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--size", type=int, default=12)
    ap.add_argument("--beta", type=float, default=12.0)
    ap.add_argument("--steps", type=int, default=20000)
    ap.add_argument("--factor", type=int, default=2)
    ap.add_argument("--repeats", type=int, default=3)
    a = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp_name:
        tmp = Path(tmp_name)

        def config(name: str, steps: int, bins: int, size: int = a.size) -> Path:
            path = tmp / name
            path.write_text(CONFIG.format(half=max(2, size // 4 * 2), size=size, beta=a.beta, steps=steps,
                                          bins=bins))
            return path

        short = config("short.toml", a.steps, 100)
        long = config("long.toml", a.factor * a.steps, a.factor * 100)
        _qmc(config("warm.toml", 200, 2, size=4), tmp / "warm")  # numba's cache, not timed
        runs: dict[str, list[float]] = {k: [] for k in ("short", "extension", "grown", "direct", "startup")}
        for k in range(a.repeats):
            grown, direct = tmp / f"grown{k}", tmp / f"direct{k}"
            t_short = _qmc(short, grown)
            t_ext = _qmc(long, grown)
            runs["short"].append(t_short)
            runs["extension"].append(t_ext)
            runs["grown"].append(t_short + t_ext)
            runs["direct"].append(_qmc(long, direct))
            runs["startup"].append(_qmc(long, direct))  # everything done: start-up and checks only
        identical = True
        for k in range(a.repeats):
            g, d = _bins(tmp / f"grown{k}"), _bins(tmp / f"direct{k}")
            identical &= set(g) == set(d) and all(
                np.array_equal(g[t][n], d[t][n]) for t in d for n in d[t])
    best = {k: min(v) for k, v in runs.items()}
    print(json.dumps({
        "size": a.size, "beta": a.beta, "steps_short": a.steps, "steps_long": a.factor * a.steps,
        "repeats": a.repeats,
        "cpu_seconds": {k: round(best[k], 3) for k in ("short", "extension", "grown", "direct")},
        "cpu_seconds_all": {k: [round(x, 3) for x in v] for k, v in runs.items()},
        "grown_over_direct": round(best["grown"] / best["direct"], 4),
        "startup_cpu_seconds": round(best["startup"], 3),
        "bins_identical": bool(identical),
        "cores": os.cpu_count(), "load_average": [round(x, 2) for x in os.getloadavg()],
    }, indent=1))


if __name__ == "__main__":
    main()
