"""Engine throughput: ns per operator slot per Monte Carlo step, steps/s, memory per slot, start-up.

Usage:  python benchmarks/throughput.py [--case square|jq2|jq2_su3|jq2_su4|jq2_colour2|xxz|xxz-field|all]
                                       [--L 32] [--beta 32] [--steps 200] [--repeats 1]
        python benchmarks/throughput.py --scaling 8,16,32,64 [--case ...]

``--scaling`` measures L x L lattices at beta = L instead (no start-up figures): the cost of a step is
linear in N beta when ns per slot stays flat; it rises where the vertex list outgrows the caches.

Prints one JSON object per case; with ``--repeats`` > 1 the time figures are the minimum over that many
independent chains (the machine is shared), ``..._all`` lists every repeat.  Start-up is measured in fresh
subprocesses: once with an empty numba cache directory (cold: every kernel compiles) and once more with the
same directory (cached).  Canonical cases: square-lattice Heisenberg 32x32 at beta = 32, and J-Q2 32x32
at beta = 32 with J/Q = 0.05.  SU(N) cases (benchmarks/_cases.py): the SU(3) and SU(4) J-Q2 models with
the same couplings, and the S = 1/2 J-Q2 model run by the colour kind; each reports ``ratio_to_jq2``, its
CPU ns per slot per step over that of ``jq2`` (when ``jq2`` is measured in the same call).  Directed
loops: XXZ 32x32 at beta = 32 with delta = 1, h = 0 and delta = 0.5, h = 1.
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
from _cases import CASES, COLOUR_CASES, XXZ_CASES, add_case_arguments, any_case_model, selected_cases

from qmc.chain.simulation import Simulation
from qmc.engine.rng import stream_seed

__all__ = ["measure_case", "main"]


def make_model(case: str, L: int):
    if case not in CASES and case not in COLOUR_CASES and case not in XXZ_CASES:
        raise SystemExit(f"unknown case {case!r}")
    return any_case_model(case, L)


def measure_case(case: str, L: int, beta: float, steps: int, warmup: int, repeats: int = 1) -> dict:
    model = make_model(case, L)
    walls, cpus, per_op = [], [], []  # ns per slot per step (wall, CPU), ns per operator per step (wall)
    for rep in range(repeats):
        t0 = time.perf_counter()
        sim = Simulation(model, beta, warmup_steps=warmup, measure_steps=steps, bins=1,
                         seed_words=stream_seed(7, f"bench-{case}" + (f"-{rep}" if rep else "")))
        sim.advance(1)
        if rep == 0:
            first_call = time.perf_counter() - t0
        sim.advance(warmup - 1)
        t1, c1 = time.perf_counter(), time.process_time()
        sim.advance(steps)
        wall, cpu = time.perf_counter() - t1, time.process_time() - c1
        walls.append(wall / steps / sim.cutoff * 1e9)
        cpus.append(cpu / steps / sim.cutoff * 1e9)
        per_op.append(wall / steps / max(sim.n_ops, 1) * 1e9)
    work_bytes = sim.ops.nbytes + sim.links.nbytes + sim.vflip.nbytes + sim.spins.nbytes
    work_bytes += sim.first.nbytes + sim.last.nbytes + sim.chain.above.nbytes
    return {
        "case": case, "L": L, "N": model.n_sites, "beta": beta, "steps": steps,
        "cutoff": sim.cutoff, "mean_n_ops": sim.n_ops,
        "colours": model.n_colours, "kind": type(sim.kind).__name__,
        "ns_per_slot_per_step": min(walls),
        "cpu_ns_per_slot_per_step": min(cpus),
        "cpu_ns_per_slot_per_step_all": cpus,
        "ns_per_op_per_step": min(per_op),
        "steps_per_second": 1e9 / (min(walls) * sim.cutoff),
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
    add_case_arguments(p, colour_cases=True, directed=True)
    p.add_argument("--repeats", type=int, default=1,
                   help="independent chains per case; the minimum time is reported")
    p.add_argument("--scaling", default="", metavar="L1,L2,...",
                   help="measure these L at beta = L (linearity in N beta) instead of one size")
    a = p.parse_args()
    if a.scaling:
        for case in selected_cases(a.case, colour_cases=True, directed=True):
            for L in (int(x) for x in a.scaling.split(",")):
                r = measure_case(case, L, float(L), a.steps, a.warmup, a.repeats)
                r["slots_times_bytes_MB"] = round(r["bytes_per_slot"] * r["cutoff"] / 2**20, 2)
                print(json.dumps(r))
                sys.stdout.flush()
        return
    with tempfile.TemporaryDirectory() as cache:
        cold, cold_whole = startup_seconds(cache)
        warm, warm_whole = startup_seconds(cache)
    print(json.dumps({"startup_cold_seconds": cold, "startup_cold_process_seconds": cold_whole,
                      "startup_cached_seconds": warm, "startup_cached_process_seconds": warm_whole}))
    reference = None
    for case in selected_cases(a.case, colour_cases=True, directed=True):
        r = measure_case(case, a.L, a.beta, a.steps, a.warmup, a.repeats)
        if case == "jq2":
            reference = r["cpu_ns_per_slot_per_step"]
        if case in COLOUR_CASES and reference is not None:
            r["ratio_to_jq2"] = r["cpu_ns_per_slot_per_step"] / reference
        print(json.dumps(r))
        sys.stdout.flush()
    np.seterr(all="ignore")


if __name__ == "__main__":
    main()
