"""Engine speed against the reference C implementation of the same algorithm (benchmarks/c_reference).

Usage:  python benchmarks/c_compare.py [--case square|jq2|all] [--L 32] [--beta 32] [--steps 200]
                                       [--steps-per-bin 200] [--warmup 300] [--repeats 3] [--seed 1]
                                       [--cc cc] [--c-variant best] [--estimators improved|plain]
        python benchmarks/c_compare.py --scaling 16,32,64,128 [--case ...] [--variants 1,16:0,32:4]
                                       [--rounds 3] [--work 2e7]

Compiles ``c_reference/sse_ref.c`` with ``<cc> -O3 -march=native`` into a temporary directory (if there is
no C compiler it prints a JSON note and exits with status 0), then for each case runs ``--repeats``
independent chains of the C program and of the numba engine (:class:`qmc.chain.simulation.Simulation`, with
all its measurements, as in benchmarks/throughput.py) and prints one JSON object per case:

- ``c_cpu_ns_per_slot_per_step`` / ``numba_cpu_ns_per_slot_per_step``: CPU time (``time.process_time``
  for numba, ``CLOCK_PROCESS_CPUTIME_ID`` inside the C program) of the measured steps divided by
  steps x cutoff, the minimum over repeats (the machine is shared), with the spread (max/min) of repeats;
  both include the per-step measurements (the C program's alone: ``c_measure_cpu_us_per_step``);
- ``ratio_numba_over_c``: the ratio of those minima (also per operator, since the two cutoffs differ, and
  ``ratio_numba_over_c_per_step`` of the CPU microseconds per step, ``*_cpu_us_per_step``);
  ``ratio_per_step_paired``: the mean over the repeats of each engine chain's time per step over that of
  the C chain run just before it, with its error bar (``ratio_per_step_paired_err``);
- the sweep / loop split of one step for both (for numba the two kernels are called one at a time from
  Python, so the split includes a few microseconds of dispatch per call), and the loop's CPU ns per leg
  visit (``*_loop_cpu_ns_per_leg``, 4 legs per bond vertex);
- the energy per site of both, each the mean over the repeats with its error bar (bin errors combined
  over the independent chains; with one bin per chain, the default ``--steps 200`` at ``--steps-per-bin
  200`` as in a run's configuration, the standard error of the chains' means), their difference in
  combined error bars, and ``energies_agree``: |difference| < 5 error bars or < 2e-3 relative
  (independent Markov chains; a loose check that the two programs sample the same distribution, not a
  precision test); the same for the staggered moment
  ``m_stag2`` = <(M_s/N)^2> and the staggered susceptibility ``chi_stag`` (``m_stag2_diff_sigmas``,
  ``m_stag2_agree``, ``chi_stag_*``), which the two programs estimate with the estimators chosen below.

``--estimators`` chooses the measurements of both programs (``estimators``): ``improved`` (default, what
``qmc run`` does by default: the loop estimators of m_stag2, m_stag4, chi_stag, chi_uniform and
S(Q + dq), one more pass over the string per measured step; the C program's ``improved`` mode does the
same work) or ``plain`` (the sweep's time averages and the slice-0 sums, both programs).

``--c-variant`` is the C program's loop variant (``K`` or ``K:E``, see ``--scaling``; ``0``: chosen by size,
as the C program does by itself).  The default ``best`` runs the single tracer and the interleaved one on the
same chain and counts the faster, as the engine keeps the faster of its two paths
(:mod:`qmc.chain.tracer_choice`).

``--scaling`` runs only the C program, on L x L lattices at beta = L, to compare loop-update variants on
one Markov chain (the variants give the same chain bit for bit, so one warm-up serves all): ``K`` tracers
(1 = one loop at a time; K >= 2 interleaved, up to K cache misses in flight) and ``E`` eager pairs (a
fresh tracer walks up to E pairs alone before it joins the round-robin).  Each of ``--rounds`` rounds runs
about ``--work`` slot-steps (steps x cutoff) of every variant back to back; per variant the fastest round
counts (the machine is shared).  One JSON object per case and L: the variants' CPU ns per slot per step
with the sweep / loop split and loop ns per leg visit, the links array size, and each variant's speed-up
over the single tracer.

Canonical cases (the same as benchmarks/throughput.py): square-lattice Heisenberg 32x32 at beta = 32
(J = 1), and J-Q2 32x32 at beta = 32 with J = 0.05, Q = 1.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time

import numpy as np
from _cases import CASES, add_case_arguments, case_model, selected_cases

from qmc.chain.simulation import Simulation
from qmc.engine.diagonal import diagonal_sweep
from qmc.engine.interleaved import ALONE, TRACERS, WINDOW
from qmc.engine.projector import loop_update
from qmc.engine.rng import stream_seed

__all__ = ["compile_reference", "run_c", "run_numba", "compare_case", "scaling_case", "main"]

HERE = os.path.dirname(os.path.abspath(__file__))
SOURCE = os.path.join(HERE, "c_reference", "sse_ref.c")
STEPS_PER_BIN = 200
"""Default measured steps per bin of the engine's chains: as in configs/quickstart.toml (a run's bins hold
hundreds of steps).  At 10 steps per bin the engine's per-bin work in Python (bin averages, the chain's
bookkeeping: 0.1-0.3 ms a bin), which the C program does not do, added 1-2% to the J-Q2 step."""
C_INTERLEAVED = f"{TRACERS}:{ALONE}:{WINDOW * 4 // 1024}"
"""The C program's interleaved variant with the engine's parameters (tracers : steps alone : window KiB)."""


def compile_reference(cc: str, workdir: str, march: str = "native", defines: tuple[str, ...] = ()) -> str:
    """Path of the compiled reference program (``cc -O3 -march=<march>``, ``-D`` each of ``defines``);
    raises CalledProcessError."""
    exe = os.path.join(workdir, "sse_ref")
    subprocess.run([cc, "-O3", f"-march={march}", "-std=c99", *(f"-D{d}" for d in defines), "-o", exe,
                    SOURCE, "-lm"],
                   check=True, capture_output=True, text=True)
    return exe


def run_c(exe: str, L: int, beta: float, J: float, Q: float, warmup: int, steps: int, seed: int,
          variants: str = "0", rounds: int = 1, estimators: str = "plain") -> dict:
    """One run of the C program (its JSON output as a dict).

    ``variants`` is the program's list of loop variants (``K`` or ``K:E``: K tracers, E eager pairs; ``0``
    chooses by size; ``best``: one tracer and :data:`C_INTERLEAVED`); every round runs ``steps`` steps of
    each variant in turn on the same chain; ``estimators`` is ``plain`` or ``improved`` (the loop
    estimators).  The timings of the first variant (with ``best``: of the faster) are also copied to the
    top level of the dict, and the staggered moment to ``m_stag2``."""
    best = variants == "best"
    if best:
        variants = f"1,{C_INTERLEAVED}"
    out = subprocess.run([exe, str(L), repr(beta), repr(J), repr(Q), str(warmup), str(steps), str(seed),
                          variants, str(rounds), estimators], check=True, capture_output=True, text=True)
    res = json.loads(out.stdout)
    res["m_stag2"] = res["m_stag2_time_avg"]
    chosen = min(res["variants"], key=lambda v: v["cpu_ms_per_step"]) if best else res["variants"][0]
    res.update({k: v for k, v in chosen.items() if k != "auto"})
    res["cpu_us_per_step"] = 1e3 * res["cpu_ms_per_step"]
    return res


def _kernel_split(sim: Simulation, steps: int) -> tuple[float, float, int]:
    """CPU seconds of the diagonal sweep and of the loop update over ``steps`` extra (unmeasured) steps,
    each kernel called directly so that the two can be timed separately, and the bond vertices summed over
    those steps."""
    t_sweep = t_loop = 0.0
    n_vert_sum = 0
    for _ in range(steps):
        c0 = time.process_time()
        n, n_vert = diagonal_sweep(sim.chain, sim.terms, sim.kind, sim.vertices, sim.probes, sim.tallies)
        c1 = time.process_time()
        sim.counters[0] = n
        loop_update(sim.kind, sim.chain, sim.vertices, n_vert)
        c2 = time.process_time()
        t_sweep += c1 - c0
        t_loop += c2 - c1
        n_vert_sum += int(n_vert)
    return t_sweep, t_loop, n_vert_sum


def run_numba(L: int, beta: float, J: float, Q: float, warmup: int, steps: int, seed: int,
              split_steps: int, estimators: str = "improved", steps_per_bin: int = STEPS_PER_BIN) -> dict:
    """One numba chain: warm-up, ``steps`` measured steps (CPU-timed) in bins of about ``steps_per_bin``,
    then the kernel split."""
    model = case_model(L, J, Q)
    most = max(1, steps // max(1, steps_per_bin))
    bins = max(b for b in range(1, most + 1) if steps % b == 0)
    sim = Simulation(model, beta, warmup_steps=warmup, measure_steps=steps, bins=bins,
                     seed_words=stream_seed(seed, f"c-compare-{L}-{beta}-{J}-{Q}"), estimators=estimators)
    sim.advance(warmup)
    c0 = time.process_time()
    rows = sim.advance(steps)
    cpu = time.process_time() - c0
    n_ops = rows[:, sim.bin_names.index("n_ops")]
    estimates = {}
    for name, key in (("energy", "energy_per_site"), ("m_stag2", "m_stag2"), ("chi_stag", "chi_stag")):
        x = rows[:, sim.bin_names.index(name)]
        estimates[key] = float(np.mean(x))
        estimates[f"{key}_err"] = float(np.std(x, ddof=1) / np.sqrt(len(x))) if len(x) > 1 else 0.0
    t_sweep, t_loop, n_vert_sum = _kernel_split(sim, split_steps)
    return {
        "cutoff": sim.cutoff, "mean_n": float(np.mean(n_ops)), **estimates,
        "cpu_ns_per_slot_per_step": cpu / steps / sim.cutoff * 1e9,
        "cpu_ns_per_op_per_step": cpu / steps / max(float(np.mean(n_ops)), 1.0) * 1e9,
        "sweep_cpu_ns_per_slot": t_sweep / split_steps / sim.cutoff * 1e9,
        "loop_cpu_ns_per_slot": t_loop / split_steps / sim.cutoff * 1e9,
        "loop_cpu_ns_per_leg": t_loop / max(4 * n_vert_sum, 1) * 1e9,
        "cpu_us_per_step": cpu / steps * 1e6,
    }


COMPARED = ("energy_per_site", "m_stag2", "chi_stag")
"""Estimates compared between the two programs (mean over the repeats, combined error bars)."""


def _combine(runs: list[dict], key: str = "energy_per_site") -> tuple[float, float]:
    """Mean of estimate ``key`` over independent runs and its error bar: the runs' bin errors combined, or,
    when the runs have one bin each, the standard error of the runs' means."""
    e = np.array([r[key] for r in runs])
    s = np.array([r[f"{key}_err"] for r in runs])
    if not np.any(s > 0) and len(runs) > 1:
        return float(np.mean(e)), float(np.std(e, ddof=1) / np.sqrt(len(runs)))
    return float(np.mean(e)), float(np.sqrt(np.sum(s**2)) / len(runs))


def _summary(runs: list[dict], prefix: str) -> dict:
    out = {}
    for key in ("cpu_ns_per_slot_per_step", "cpu_ns_per_op_per_step", "sweep_cpu_ns_per_slot",
                "loop_cpu_ns_per_slot", "loop_cpu_ns_per_leg", "cpu_us_per_step"):
        vals = [r[key] for r in runs]
        out[f"{prefix}_{key}"] = min(vals)
        if key == "cpu_ns_per_slot_per_step":
            out[f"{prefix}_{key}_all"] = vals
            out[f"{prefix}_spread_max_over_min"] = max(vals) / min(vals)
    out[f"{prefix}_cutoff"] = runs[0]["cutoff"]
    out[f"{prefix}_mean_n"] = float(np.mean([r["mean_n"] for r in runs]))
    for key in COMPARED:
        e, err = _combine(runs, key)
        out[f"{prefix}_{key}"] = e
        out[f"{prefix}_{key}_err"] = err
    return out


def compare_case(exe: str, case: str, L: int, beta: float, warmup: int, steps: int, repeats: int,
                 seed: int, c_variant: str = "best", estimators: str = "improved",
                 steps_per_bin: int = STEPS_PER_BIN) -> dict:
    """Timings and energies of the C program and the numba engine on one case (see module docstring)."""
    J, Q = CASES[case]
    split_steps = max(10, steps // 4)
    c_runs, nb_runs = [], []
    for r in range(repeats):  # interleaved, so that a burst of load on the machine hits both
        c_runs.append(run_c(exe, L, beta, J, Q, warmup, steps, seed + r, c_variant, estimators=estimators))
        nb_runs.append(run_numba(L, beta, J, Q, warmup, steps, seed + r, split_steps, estimators,
                                 steps_per_bin))
    out = {"case": case, "L": L, "beta": beta, "J": J, "Q": Q, "warmup": warmup, "steps": steps,
           "repeats": repeats, "estimators": estimators, "numba_estimators": estimators,
           "c_estimators": c_runs[0]["estimators"]}
    out.update(_summary(c_runs, "c"))
    out["c_loop_variant"] = {"tracers": c_runs[0]["tracers"], "eager": c_runs[0]["eager"]}
    out["c_measure_cpu_us_per_step"] = min(r["measure_cpu_us_per_step"] for r in c_runs)
    out.update(_summary(nb_runs, "numba"))
    out["ratio_numba_over_c"] = out["numba_cpu_ns_per_slot_per_step"] / out["c_cpu_ns_per_slot_per_step"]
    out["ratio_numba_over_c_per_step"] = out["numba_cpu_us_per_step"] / out["c_cpu_us_per_step"]
    out["ratio_numba_over_c_per_op"] = out["numba_cpu_ns_per_op_per_step"] / out["c_cpu_ns_per_op_per_step"]
    paired = np.array([nb["cpu_us_per_step"] / c["cpu_us_per_step"]
                       for c, nb in zip(c_runs, nb_runs, strict=True)])
    out["ratio_per_step_paired"] = float(np.mean(paired))
    out["ratio_per_step_paired_err"] = float(np.std(paired, ddof=1) / np.sqrt(repeats)) if repeats > 1 else 0.
    out["ratio_sweep"] = out["numba_sweep_cpu_ns_per_slot"] / out["c_sweep_cpu_ns_per_slot"]
    out["ratio_loop"] = out["numba_loop_cpu_ns_per_slot"] / out["c_loop_cpu_ns_per_slot"]
    for key in COMPARED:
        name, flag = ("energy", "energies_agree") if key == "energy_per_site" else (key, f"{key}_agree")
        diff = out[f"numba_{key}"] - out[f"c_{key}"]
        sigma = float(np.hypot(out[f"numba_{key}_err"], out[f"c_{key}_err"]))
        out[f"{name}_diff"] = diff
        out[f"{name}_diff_sigmas"] = diff / sigma if sigma > 0 else float("inf")
        out[flag] = bool(abs(diff) < 5.0 * sigma or abs(diff) < 2e-3 * abs(out[f"c_{key}"]))
    return out


def scaling_case(exe: str, case: str, L: int, variants: str, rounds: int, work: float, seed: int) -> dict:
    """Loop-variant comparison of the C program on one case at L x L, beta = L (see module docstring)."""
    J, Q = CASES[case]
    slots = 1.2 * L**3  # about 4/3 n for both cases at beta = L (n ~ 0.9-1.2 beta N)
    steps = max(2, int(work / slots))
    warmup = max(30, steps)
    res = run_c(exe, L, float(L), J, Q, warmup, steps, seed, variants, rounds)
    single = next((v["cpu_ns_per_slot_per_step"] for v in res["variants"]
                   if v["tracers"] == 1 and not v["auto"]), None)
    for v in res["variants"]:
        v["speedup_over_single"] = single / v["cpu_ns_per_slot_per_step"] if single else None
    best = min(res["variants"], key=lambda v: v["cpu_ns_per_slot_per_step"])
    keep = ("L", "N", "beta", "cutoff", "mean_n", "mean_vertices", "mean_loops", "bytes_per_slot",
            "energy_per_site", "energy_per_site_err", "steps", "rounds", "warmup")
    out = {"case": case, "implementation": "c"}
    out.update({k: res[k] for k in keep})
    out["links_MB"] = round(16 * res["mean_vertices"] / 2**20, 2)
    out["variants"] = res["variants"]
    out["best"] = {k: best[k] for k in ("tracers", "eager", "cpu_ns_per_slot_per_step")}
    return out


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    add_case_arguments(p)
    p.add_argument("--repeats", type=int, default=3)
    p.add_argument("--seed", type=int, default=1)
    p.add_argument("--cc", default=os.environ.get("CC", "cc"))
    p.add_argument("--c-variant", default="best",
                   help="loop variant of the C program (K or K:E; 0 = by size; best = the faster of one "
                        "tracer and interleaved tracers)")
    p.add_argument("--estimators", default="improved", choices=["improved", "plain"],
                   help="the estimators of both programs (improved: the loop estimators, qmc run's "
                        "default; plain: the sweep's time averages and slice-0 sums)")
    p.add_argument("--steps-per-bin", type=int, default=STEPS_PER_BIN,
                   help="measured steps per bin of the engine's chains (the C program's bins cost nothing)")
    p.add_argument("--scaling", default="", metavar="L1,L2,...",
                   help="C program only: compare loop variants at these L (beta = L)")
    p.add_argument("--variants", default="1,8:0,16:0,32:0,16:4,32:4",
                   help="--scaling: comma-separated K or K:E (K tracers, E eager pairs)")
    p.add_argument("--rounds", type=int, default=3, help="--scaling: rounds of all variants back to back")
    p.add_argument("--work", type=float, default=2e7, help="--scaling: slot-steps per variant and round")
    a = p.parse_args()
    if (a.L < 4 or a.L % 2 or a.steps < 1 or a.repeats < 1 or a.warmup < 1 or a.rounds < 1
            or a.steps_per_bin < 1):
        raise SystemExit("need an even --L >= 4 and positive --steps, --steps-per-bin, --warmup, --repeats "
                         "and --rounds")
    sizes = [int(x) for x in a.scaling.split(",")] if a.scaling else []
    if any(L < 4 or L % 2 for L in sizes):
        raise SystemExit("--scaling needs even sizes >= 4")
    if shutil.which(a.cc) is None:
        print(json.dumps({"note": f"no C compiler ({a.cc!r} not found): comparison skipped"}))
        return
    with tempfile.TemporaryDirectory() as work:
        try:
            exe = compile_reference(a.cc, work)
        except subprocess.CalledProcessError as err:
            print(json.dumps({"note": "compiling the C reference failed: comparison skipped",
                              "stderr": err.stderr[-2000:]}))
            return
        for case in selected_cases(a.case):
            if sizes:
                for L in sizes:
                    print(json.dumps(scaling_case(exe, case, L, a.variants, a.rounds, a.work, a.seed)))
                    sys.stdout.flush()
                continue
            out = compare_case(exe, case, a.L, a.beta, a.warmup, a.steps, a.repeats, a.seed, a.c_variant,
                               a.estimators, a.steps_per_bin)
            print(json.dumps({"steps_per_bin": a.steps_per_bin, **out}))
            sys.stdout.flush()


if __name__ == "__main__":
    main()
