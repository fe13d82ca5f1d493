"""Engine throughput: ns per operator slot per Monte Carlo step, steps/s, memory per slot, start-up.

Usage:  python benchmarks/throughput.py [--case square|jq2|jq2_su3|jq2_su4|jq2_colour2|xxz|xxz-field|all]
                                       [--L 32] [--beta 32] [--steps 200] [--repeats 1]
        python benchmarks/throughput.py --scaling 8,16,32,64,128,256 [--case square|jq2|all]
                                       [--plot docs/speed/scaling.png] [--large-from 256]
                                       [--large-steps 5] [--large-warmup 60]

``--scaling`` measures L x L lattices at beta = L instead (no start-up figures): the cost of a step is
linear in N beta when ns per slot stays flat; it rises where the vertex list outgrows the caches.  Sizes
L >= ``--large-from`` run one chain of ``--large-steps`` measured steps after ``--large-warmup`` (a step
at L = 256 takes seconds).  Each row also gives the CPU seconds per step and the process's peak resident
memory so far (``resource.getrusage``; the sizes run in increasing order, so at the largest L it is that
size's peak, or an earlier case's if that was larger).  With ``--case all`` it runs the two canonical
cases.  After the JSON lines a table goes to stderr, and a plot of CPU ns per slot per step against L
(log-2 axis) is written to ``--plot`` (default ``docs/speed/scaling.png``, shown in the README;
``--plot ""`` writes none).

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
import resource
import subprocess
import sys
import tempfile
import time

import numpy as np
from _cases import CASES, COLOUR_CASES, XXZ_CASES, add_case_arguments, any_case_model, selected_cases

from qmc.chain.simulation import Simulation
from qmc.engine.rng import stream_seed

__all__ = ["measure_case", "peak_rss_mb", "scaling_table", "plot_scaling", "run_scaling", "main"]


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
        "cpu_seconds_per_step": min(cpus) * sim.cutoff * 1e-9,
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


def peak_rss_mb() -> float:
    """Peak resident memory of this process so far in MB (Linux reports ``ru_maxrss`` in KiB)."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def scaling_table(rows: list[dict]) -> str:
    """Markdown table of the ``--scaling`` rows."""
    lines = ["| case | L = beta | cutoff | steps x chains | CPU ns / slot / step | CPU s / step "
             "| peak RSS MB |", "|---|---|---|---|---|---|---|"]
    for r in rows:
        lines.append(f"| {r['case']} | {r['L']} | {r['cutoff']} | {r['steps']} x {r['repeats']} "
                     f"| {r['cpu_ns_per_slot_per_step']:.1f} | {r['cpu_seconds_per_step']:.3g} "
                     f"| {r['peak_rss_MB']:.0f} |")
    return "\n".join(lines)


CASE_LABELS = {"square": "square-lattice Heisenberg", "jq2": "J-Q2 model, J/Q = 0.05"}


def plot_scaling(rows: list[dict], path: str) -> None:
    """Write a PNG of CPU ns per operator slot per step against L (log-2 axis), one curve per case."""
    from matplotlib.ticker import FixedLocator, NullLocator, ScalarFormatter

    from qmc.analysis.plots import new_figure, set_labels

    fig, axes = new_figure(size=(5.4, 3.8), note=(
        "One Monte Carlo step (diagonal update, loop update, all measurements) on L x L periodic lattices "
        "at inverse temperature beta = L; CPU time divided by the length of the operator string. "
        "A flat curve means the cost of a step grows only like L^2 beta. "
        "Shared 2-core machine; minimum over repeated chains."))
    ax = axes[0, 0]
    sizes = sorted({r["L"] for r in rows})
    for case in dict.fromkeys(r["case"] for r in rows):
        pts = sorted((r["L"], r["cpu_ns_per_slot_per_step"]) for r in rows if r["case"] == case)
        ax.plot([p[0] for p in pts], [p[1] for p in pts], "o-", label=CASE_LABELS.get(case, case))
    ax.set_xscale("log", base=2)
    ax.xaxis.set_major_locator(FixedLocator(sizes))
    ax.xaxis.set_major_formatter(ScalarFormatter())
    ax.xaxis.set_minor_locator(NullLocator())
    ax.set_ylim(bottom=0)
    ax.grid(alpha=0.3)
    ax.legend(fontsize="small")
    set_labels(ax, "lattice size L (L x L sites, beta = L)", "CPU ns per operator slot per step")
    os.makedirs(os.path.dirname(os.path.abspath(path)), exist_ok=True)
    fig.savefig(path, dpi=150)


def run_scaling(a: argparse.Namespace) -> None:
    """The ``--scaling`` mode: JSON lines, then the table (stderr) and the plot."""
    rows = []
    sizes = sorted(int(x) for x in a.scaling.split(","))
    for case in ([*CASES] if a.case == "all" else [a.case]):  # "all": the two canonical cases
        for L in sizes:
            large = L >= a.large_from
            steps, warmup, repeats = ((a.large_steps, a.large_warmup, 1) if large
                                      else (a.steps, a.warmup, a.repeats))
            r = measure_case(case, L, float(L), steps, warmup, repeats)
            r["repeats"] = repeats
            r["slots_times_bytes_MB"] = round(r["bytes_per_slot"] * r["cutoff"] / 2**20, 2)
            r["peak_rss_MB"] = peak_rss_mb()
            rows.append(r)
            print(json.dumps(r))
            sys.stdout.flush()
    print(scaling_table(rows), file=sys.stderr)
    if a.plot:
        plot_scaling(rows, a.plot)
        print(f"plot: {a.plot}", file=sys.stderr)


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    add_case_arguments(p, colour_cases=True, directed=True)
    p.add_argument("--repeats", type=int, default=1,
                   help="independent chains per case; the minimum time is reported")
    p.add_argument("--scaling", default="", metavar="L1,L2,...",
                   help="measure these L at beta = L (linearity in N beta) instead of one size")
    p.add_argument("--plot", default=os.path.join("docs", "speed", "scaling.png"),
                   help="--scaling: PNG to write ('' for none)")
    p.add_argument("--large-from", type=int, default=256,
                   help="--scaling: from this L on, one chain with --large-steps and --large-warmup")
    p.add_argument("--large-steps", type=int, default=5)
    p.add_argument("--large-warmup", type=int, default=60)
    a = p.parse_args()
    if a.scaling:
        run_scaling(a)
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
