"""Engine throughput: ns per operator slot per Monte Carlo step, steps/s, memory per slot, start-up.

Usage:  python benchmarks/throughput.py [--case square|jq2|xxz|xxz-field|all] [--L 32] [--beta 32]
                                       [--steps 200]
        python benchmarks/throughput.py --scaling 8,16,32,64 [--case ...]

``--scaling`` measures L x L lattices at beta = L instead (no start-up figures): the cost of a step is
linear in N beta when ns per slot stays flat; it rises where the vertex list outgrows the caches.

Prints one JSON object per case.  Start-up is measured in fresh subprocesses: once with an
empty numba cache directory (cold: every kernel compiles) and once more with the same directory
(cached).  Canonical cases: square-lattice Heisenberg 32x32 at beta = 32, and J-Q2 32x32 at beta = 32
with J/Q = 0.05; directed loops: XXZ 32x32 at beta = 32 with delta = 1, h = 0 and delta = 0.5, h = 1.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time

import numpy as np
from _cases import CASES, XXZ_CASES, add_case_arguments, any_case_model, selected_cases

from qmc.chain.simulation import Simulation
from qmc.engine.rng import stream_seed

__all__ = ["measure_case", "main"]


def make_model(case: str, L: int):
    if case not in CASES and case not in XXZ_CASES:
        raise SystemExit(f"unknown case {case!r}")
    return any_case_model(case, L)


def measure_case(case: str, L: int, beta: float, steps: int, warmup: int) -> dict:
    model = make_model(case, L)
    t0 = time.perf_counter()
    sim = Simulation(model, beta, warmup_steps=warmup, measure_steps=steps, bins=1,
                     seed_words=stream_seed(7, f"bench-{case}"))
    sim.advance(1)
    first_call = time.perf_counter() - t0
    sim.advance(warmup - 1)
    t1, c1 = time.perf_counter(), time.process_time()
    sim.advance(steps)
    dt, cpu = time.perf_counter() - t1, time.process_time() - c1
    work_bytes = sim.ops.nbytes + sim.links.nbytes + sim.vflip.nbytes + sim.spins.nbytes
    work_bytes += sim.first.nbytes + sim.last.nbytes
    return {
        "case": case, "L": L, "N": model.n_sites, "beta": beta, "steps": steps,
        "cutoff": sim.cutoff, "mean_n_ops": sim.n_ops,
        "ns_per_slot_per_step": dt / steps / sim.cutoff * 1e9,
        "cpu_ns_per_slot_per_step": cpu / steps / sim.cutoff * 1e9,
        "ns_per_op_per_step": dt / steps / max(sim.n_ops, 1) * 1e9,
        "steps_per_second": steps / dt,
        "bytes_per_slot": work_bytes / sim.cutoff,
        "first_call_seconds_in_process": first_call,
    }


def startup_seconds(cache_dir: str | None = None) -> tuple[float, float]:
    """(seconds inside, wall time) of a fresh interpreter that imports the engine and runs one tiny step.

    With ``cache_dir`` numba's on-disk cache lives there: an empty directory gives the cold (compiling)
    start-up, a second call with the same directory the cached one."""
    code = ("import time; t=time.perf_counter();"
            "from qmc.models import build_lattice, HeisenbergTerm, compile_model;"
            "from qmc.chain.simulation import Simulation; from qmc.engine.rng import stream_seed;"
            "m=compile_model(build_lattice('square',(4,4)),[HeisenbergTerm(bonds='nn',coupling=1.0)]);"
            "s=Simulation(m,1.0,warmup_steps=1,measure_steps=1,bins=1,seed_words=stream_seed(1,'s'));"
            "s.advance(2); print(time.perf_counter()-t)")
    t = time.perf_counter()
    env = dict(os.environ)
    if cache_dir is not None:
        env["NUMBA_CACHE_DIR"] = cache_dir
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, env=env)
    total = time.perf_counter() - t
    return float(out.stdout.strip()), total


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    add_case_arguments(p, directed=True)
    p.add_argument("--scaling", default="", metavar="L1,L2,...",
                   help="measure these L at beta = L (linearity in N beta) instead of one size")
    a = p.parse_args()
    if a.scaling:
        for case in selected_cases(a.case, directed=True):
            for L in (int(x) for x in a.scaling.split(",")):
                r = measure_case(case, L, float(L), a.steps, a.warmup)
                r["slots_times_bytes_MB"] = round(r["bytes_per_slot"] * r["cutoff"] / 2**20, 2)
                print(json.dumps(r))
                sys.stdout.flush()
        return
    with tempfile.TemporaryDirectory() as cache:
        cold, cold_whole = startup_seconds(cache)
        warm, warm_whole = startup_seconds(cache)
    print(json.dumps({"startup_cold_seconds": cold, "startup_cold_process_seconds": cold_whole,
                      "startup_cached_seconds": warm, "startup_cached_process_seconds": warm_whole}))
    for case in selected_cases(a.case, directed=True):
        print(json.dumps(measure_case(case, a.L, a.beta, a.steps, a.warmup)))
    np.seterr(all="ignore")


if __name__ == "__main__":
    main()
