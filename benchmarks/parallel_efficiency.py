"""Parallel efficiency of `mpiexec -n 2 qmc run` against `mpiexec -n 1 qmc run` on a sweep of equal tasks.

Usage::

    python benchmarks/parallel_efficiency.py [--tasks 8] [--size 8] [--beta 4] [--steps 400000] [--ranks 2]
    python benchmarks/parallel_efficiency.py --ladder 4 [--size 8] [--beta 4] [--steps 40000] [--ranks 2]
    python benchmarks/parallel_efficiency.py --unequal [--sizes 32 26 24 8] [--steps 8000] [--repeats 3]
    python benchmarks/parallel_efficiency.py --simulate [--farms 16x4 64x8 256x32 1024x128]

``--unequal``: tasks of unequal cost (Heisenberg L x L at beta = 2L, cost ~ L^3) on K ranks; prints the
wall time of the farm against the largest task run alone (the best a farm can do when the largest task is
more than the total divided by K), the farm's decisions and coordinator cost, and whether the bins equal
those of a serial run.  ``--simulate``: no MPI; the farm's schedule driven through a simulated farm of
many ranks (a scan L = 8..256 with cost ~ L^3), printing the makespan against the lower bound
max(largest task, total work / ranks) for the farm's rules and for the rule before.

With ``--ladder M`` the work is instead ONE replica-exchange ladder of M chains (J-Q2 model, J = 1, Q from
1.0 in steps of 0.05, swaps every 10 steps), which K ranks run side by side (blocks of chains meeting at
every exchange point): the figures then measure the speed-up of a single ladder, including the waits at
exchange points.

Prints one JSON object:

* ``wall_seconds``: wall time of the whole command for 1 and K ranks (start-up included);
* ``efficiency`` = T(1) / (K T(K)) from those wall times;
* ``startup_seconds``: wall time of the same command when every task is already done (interpreter,
  imports, MPI start-up, configuration and run-directory checks), and ``efficiency_excluding_startup`` =
  (T(1) - S(1)) / (K (T(K) - S(K)));
* ``coordinator``: rank 0's own count of what coordinating cost it (seconds spent answering requests and
  writing the index, per unit handed out; the index writes alone), read from the run log of the K-rank
  run;
* ``bins_identical``: the K-rank bins equal the 1-rank bins bit for bit;
* ``task_seconds_mean``: mean time of one task (as its rank measured it) with 1 and K ranks: a larger
  K-rank figure means the tasks themselves ran slower side by side (shared core resources), not that
  the farm lost time; ``busy_fraction`` = (sum of K-rank task times) / (K x (T(K) - S(K))), the share of
  the ranks' time spent inside tasks;
* ``hardware_ceiling``: the same test without MPI or coordination -- K plain serial ``qmc run`` processes,
  each with 1/K of the tasks, started together, against one of them alone: T(alone) / T(together).  It
  is what K busy processes get out of this machine's K cores (shared caches, memory bandwidth, clock
  boost, virtual CPUs); ``efficiency_vs_ceiling`` = efficiency_excluding_startup / hardware_ceiling;
* ``cpu_seconds`` of each run (all its processes) and ``cores_used`` = CPU time / wall time: with K ranks
  on K idle cores this is close to K; much less means other processes took the cores, and the efficiency
  figures then measure the machine's load rather than the program;
* the machine's core count and load average.

All tasks are independent copies of one parameter point (equal cost).  The numba compilation cache is
warmed by a tiny run first, so compilation is not timed.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

_HEADER = """
[run]
seed = {seed}
output = "run"
[lattice]
kind = "square"
size = [{size}, {size}]
[[terms]]
type = "heisenberg"
bonds = "nn"
coupling = 1.0
"""

CONFIG = _HEADER.replace("{seed}", "4242") + """
[scan]
beta = {beta}
[sampling]
warmup_steps = {warmup}
measure_steps = {steps}
bins = 20
copies = {tasks}
checkpoint_seconds = 60
"""

LADDER_CONFIG = _HEADER.replace("{seed}", "4243") + """
[[terms]]
type = "projector-product"
shape = "plaquette-pair"
coupling = "Q"
[scan]
beta = {beta}
Q = {q}
[sampling]
warmup_steps = {warmup}
measure_steps = {steps}
bins = 20
checkpoint_seconds = 60
[exchange]
along = "Q"
every = 10
"""


def _config_text(args: argparse.Namespace, tasks: int) -> str:
    warmup = max(100, args.steps // 10)
    if args.ladder:
        q = [round(1.0 + 0.05 * i, 4) for i in range(args.ladder)]
        return LADDER_CONFIG.format(size=args.size, beta=args.beta, steps=args.steps, warmup=warmup, q=q)
    return CONFIG.format(size=args.size, beta=args.beta, steps=args.steps, tasks=tasks, warmup=warmup)


def _mpiexec() -> str:
    here = Path(sys.executable).parent / "mpiexec"
    found = str(here) if here.exists() else shutil.which("mpiexec")
    if not found:
        sys.exit("error: no mpiexec next to the Python interpreter or on PATH (pip extra 'mpi')")
    return found


def _cpu() -> float:
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def _run(cmd: list[str]) -> tuple[float, float]:
    """(wall seconds, CPU seconds of the command and all its processes)."""
    c0, t0 = _cpu(), time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True)
    dt, dc = time.perf_counter() - t0, _cpu() - c0
    if proc.returncode != 0:
        sys.exit(f"error: {' '.join(cmd)} failed ({proc.returncode}):\n{proc.stderr}")
    return dt, dc


def _bins(run_dir: Path) -> dict[str, dict[str, np.ndarray]]:
    from qmc.storage.task_file import read_run

    return {d.task_id: d.bins for d in read_run(run_dir)}


def _ceiling(tmp_path: Path, qmc: list[str], args: argparse.Namespace) -> float:
    """T(one serial process with tasks/K tasks alone) / T(K such processes at once), start-up excluded."""
    k = args.ranks
    part = tmp_path / "part.toml"
    part.write_text(CONFIG.format(size=args.size, beta=args.beta, steps=args.steps,
                                  tasks=max(1, args.tasks // k), warmup=max(100, args.steps // 10)))
    # (for a ladder the same plain sweep is used: the ceiling is a property of the machine)
    cmd = [*qmc, str(part), "--quiet", "--out"]
    alone = _run([*cmd, str(tmp_path / "alone")])[0] - _run([*cmd, str(tmp_path / "alone")])[0]
    t0 = time.perf_counter()
    procs = [subprocess.Popen([*cmd, str(tmp_path / f"together{i}")], stdout=subprocess.DEVNULL,
                              stderr=subprocess.DEVNULL) for i in range(k)]
    for p in procs:
        p.wait()
    together = time.perf_counter() - t0 - _run([*cmd, str(tmp_path / "together0")])[0]
    return alone / together


UNEQUAL_CONFIG = _HEADER.replace("{seed}", "4244").replace("[{size}, {size}]", '["L", "L"]') + """
[scan]
L = {sizes}
beta = "2*L"
[sampling]
warmup_steps = {warmup}
measure_steps = {steps}
bins = 20
checkpoint_seconds = 60
"""


def _farm_stats(run_dir: Path) -> dict:
    m = re.findall(r"MPI farm statistics: (\{.*\})", (run_dir / "run.log").read_text())
    return json.loads(m[0]) if m else {}


def unequal(args: argparse.Namespace) -> dict:
    """Unequal tasks (default L = 32, 26, 24, 8 at beta = 2L) on K ranks against the largest task alone:
    the wall time of ``mpiexec -n K qmc run`` over that of ``qmc run --only <largest>`` (start-up included
    in both), minimum over ``--repeats`` runs; the farm's figures; bins against one serial run."""
    sizes = sorted(args.sizes, reverse=True)
    steps = args.steps if args.steps_given else 8000
    qmc = [sys.executable, "-m", "qmc", "run"]
    runs: dict[str, list] = {"alone": [], "farm": []}
    with tempfile.TemporaryDirectory(prefix="qmc-unequal-") as tmp:
        tmp_path = Path(tmp)
        cfg = tmp_path / "unequal.toml"
        cfg.write_text(UNEQUAL_CONFIG.format(sizes=sizes, steps=steps, warmup=max(100, steps // 10)))
        from qmc.config.parser import load_config

        by_size = sorted(load_config(cfg).tasks(), key=lambda t: -t.size[0])
        largest = by_size[0].task_id
        _run([*qmc, str(cfg), "--quiet", "--only", by_size[-1].task_id, "--out",
              str(tmp_path / "warm")])  # numba cache, page cache
        for r in range(args.repeats):  # alternated, so that both see the same load of the machine
            runs["alone"].append(_run([*qmc, str(cfg), "--quiet", "--only", largest, "--out",
                                       str(tmp_path / f"alone{r}")])[0])
            out = tmp_path / f"farm{r}"
            runs["farm"].append(_run([_mpiexec(), "-n", str(args.ranks), *qmc, str(cfg), "--quiet", "--out",
                                      str(out)])[0])
        best = int(np.argmin(runs["farm"]))
        farm = _farm_stats(tmp_path / f"farm{best}")
        index = json.loads((tmp_path / f"farm{best}" / "index.json").read_text())
        _run([*qmc, str(cfg), "--quiet", "--out", str(tmp_path / "serial")])
        a, b = _bins(tmp_path / "serial"), _bins(tmp_path / f"farm{best}")
        identical = set(a) == set(b) and all(np.array_equal(a[t][n], b[t][n]) for t in a for n in a[t])
    alone, together = min(runs["alone"]), min(runs["farm"])
    return {
        "work": f"Heisenberg L = {', '.join(map(str, sizes))} at beta = 2L, {steps} measured steps each",
        "ranks": args.ranks,
        "wall_seconds_largest_alone": [round(x, 3) for x in runs["alone"]],
        "wall_seconds_all_on_farm": [round(x, 3) for x in runs["farm"]],
        "farm_over_largest_alone": round(together / alone, 4),
        "task_seconds_in_farm": {t: e["seconds"] for t, e in index["tasks"].items()},
        "units_by_rank": farm.get("units_by_rank"),
        "prefetch": {k: farm.get(k) for k in ("prefetch_granted", "prefetch_refused", "take_backs",
                                              "handed_back")},
        "coordinator": {k: farm.get(k) for k in ("coordinator_seconds", "index_seconds", "index_writes",
                                                 "progress_reports", "wall_seconds", "handed_out")},
        "bins_identical_to_serial": identical,
        "cores": os.cpu_count(), "load_average_1min": round(os.getloadavg()[0], 2),
    }


def simulated(args: argparse.Namespace) -> dict:
    """Simulated farms (the real Schedule, :mod:`qmc.mpi.simulation`): a finite-size scan with cost ~ L^3
    (beta = 2L) for L = 8, 16, ..., 256, the largest taking two hours, with ``C`` tasks per size on ``K``
    ranks for each ``KxC`` of ``--farms``; the farm's rules against the rule before (prefetch while K units
    are queued, no taking back), with exact cost estimates and with durations off their estimates by a
    factor exp(0.3 z), z normal."""
    from qmc.mpi.simulation import simulate

    out: dict = {"work": "L = 8..256 step 8, C tasks per size, cost ~ L^3, largest 2 h", "farms": []}
    rng = np.random.default_rng(1)
    for farm in args.farms:
        k, copies = (int(x) for x in farm.lower().split("x"))
        costs = [7200.0 * (L / 256) ** 3 for L in range(8, 257, 8) for _ in range(copies)]
        noisy = [c * f for c, f in zip(costs, rng.lognormal(0.0, 0.3, len(costs)), strict=True)]
        for label, seconds in (("exact estimates", costs), ("estimates off by ~30%", noisy)):
            new = simulate(costs, k, seconds=seconds)
            old = simulate(costs, k, seconds=seconds, prefetch_rule="queue-length", take_back=False)
            out["farms"].append({
                "ranks": k, "tasks": len(costs), "durations": label,
                "lower_bound_hours": round(new.bound / 3600, 3),
                "makespan_hours": round(new.makespan / 3600, 3), "makespan_over_bound": round(new.ratio, 4),
                "rule_before_makespan_over_bound": round(old.ratio, 4),
                "prefetch_granted": new.counts["prefetch_granted"], "take_backs": new.counts["take_backs"],
                "schedule_microseconds_per_unit": round(new.schedule_seconds_per_unit * 1e6, 1),
                "schedule_microseconds_per_progress_report": round(new.schedule_seconds_per_report * 1e6, 2)})
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--tasks", type=int, default=8, help="number of equal tasks (independent copies)")
    ap.add_argument("--size", type=int, default=8, help="L of the L x L Heisenberg lattice")
    ap.add_argument("--beta", type=float, default=4.0)
    ap.add_argument("--steps", type=int, default=400000, help="measured Monte Carlo steps per task")
    ap.add_argument("--ranks", type=int, default=2)
    ap.add_argument("--ladder", type=int, default=0, metavar="M",
                    help="measure one exchange ladder of M chains instead of a sweep of equal tasks")
    ap.add_argument("--unequal", action="store_true",
                    help="tasks of unequal sizes (--sizes) against the largest alone (--steps default 8000)")
    ap.add_argument("--sizes", type=int, nargs="+", default=[32, 26, 24, 8])
    ap.add_argument("--repeats", type=int, default=3, help="--unequal: runs of each, the minimum counts")
    ap.add_argument("--simulate", action="store_true", help="a simulated large farm (no MPI)")
    ap.add_argument("--farms", nargs="+", default=["16x4", "64x8", "256x32", "1024x128"], metavar="KxC",
                    help="--simulate: K ranks with C tasks per lattice size")
    args = ap.parse_args()
    args.steps_given = "--steps" in sys.argv
    if args.unequal or args.simulate:
        print(json.dumps(unequal(args) if args.unequal else simulated(args), indent=1))
        return
    mpiexec = _mpiexec()
    qmc = [sys.executable, "-m", "qmc", "run"]
    with tempfile.TemporaryDirectory(prefix="qmc-efficiency-") as tmp:
        tmp_path = Path(tmp)
        cfg = tmp_path / "sweep.toml"
        cfg.write_text(_config_text(args, args.tasks))
        warm = tmp_path / "warm.toml"
        warm.write_text(CONFIG.format(size=4, beta=1.0, steps=200, tasks=1, warmup=100))
        _run([*qmc, str(warm), "--quiet", "--out", str(tmp_path / "warm")])  # numba cache, page cache

        wall, cpu, startup = {}, {}, {}
        for k in (1, args.ranks):
            out = tmp_path / f"n{k}"
            cmd = [mpiexec, "-n", str(k), *qmc, str(cfg), "--quiet", "--out", str(out)]
            wall[k], cpu[k] = _run(cmd)
            startup[k] = _run(cmd)[0]  # everything done: start-up and checks only
        log = (tmp_path / f"n{args.ranks}" / "run.log").read_text()
        m = re.findall(r"MPI farm statistics: (\{.*\})", log)
        farm = json.loads(m[-2] if len(m) > 1 else m[-1]) if m else {}
        ceiling = _ceiling(tmp_path, qmc, args)
        a, b = _bins(tmp_path / "n1"), _bins(tmp_path / f"n{args.ranks}")
        identical = set(a) == set(b) and all(np.array_equal(a[t][n], b[t][n]) for t in a for n in a[t])
        task_seconds = {}
        for kk in (1, args.ranks):
            index = json.loads((tmp_path / f"n{kk}" / "index.json").read_text())
            task_seconds[kk] = [e["seconds"] for e in index["tasks"].values()]

    k = args.ranks
    result = {
        "work": f"one exchange ladder of {args.ladder} chains (J-Q2)" if args.ladder
        else f"{args.tasks} equal tasks (Heisenberg)",
        "tasks": args.ladder or args.tasks, "lattice": f"{args.size}x{args.size}", "beta": args.beta,
        "steps_per_task": args.steps + max(100, args.steps // 10), "ranks": k,
        "task_seconds_mean": {str(kk): round(float(np.mean(v)), 3) for kk, v in task_seconds.items()},
        "busy_fraction": round(sum(task_seconds[k]) / (k * (wall[k] - startup[k])), 4),
        "wall_seconds": {"1": round(wall[1], 3), str(k): round(wall[k], 3)},
        "startup_seconds": {"1": round(startup[1], 3), str(k): round(startup[k], 3)},
        "efficiency": round(wall[1] / (k * wall[k]), 4),
        "efficiency_excluding_startup": round((wall[1] - startup[1]) / (k * (wall[k] - startup[k])), 4),
        "hardware_ceiling": round(ceiling, 4),
        "efficiency_vs_ceiling": round((wall[1] - startup[1]) / (k * (wall[k] - startup[k])) / ceiling, 4),
        "coordinator": {"seconds_per_unit": farm.get("coordinator_seconds_per_unit"),
                        "seconds_total": farm.get("coordinator_seconds"),
                        "index_write_seconds_total": farm.get("index_seconds"),
                        "units_by_rank": farm.get("units_by_rank"), "index_writes": farm.get("index_writes")},
        "bins_identical": identical,
        "cpu_seconds": {"1": round(cpu[1], 3), str(k): round(cpu[k], 3)},
        "cores_used": {"1": round(cpu[1] / wall[1], 2), str(k): round(cpu[k] / wall[k], 2)},
        "cores": os.cpu_count(),
        "load_average_1min": round(os.getloadavg()[0], 2),
    }
    print(json.dumps(result, indent=1))


if __name__ == "__main__":
    main()
