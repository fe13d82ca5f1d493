"""Single against interleaved loop tracing in the numba engine, on one Markov chain.

Usage:  python benchmarks/loop_tracers.py --scaling 16,32,64,128 [--case square|jq2|all] [--rounds 3]
                                          [--work 2e7] [--warmup-work 3e8]

For each case and L (L x L lattice, beta = L) one chain is warmed up with the engine's own steps, then in
each of ``--rounds`` rounds about ``--work`` slot-steps (steps x cutoff) are run with each loop path in
turn: ``single`` (:func:`qmc.engine.projector.loop_update` handed a links array too short for fragment ids,
so it takes its one-loop-at-a-time path) and ``interleaved``
(:func:`qmc.engine.interleaved.interleaved_loop_update` with the engine's settings). Both give the same
chain bit for bit (tests/engine/test_interleaved_loops.py), so they can take turns on one chain. Each step is
the diagonal sweep and the loop update, called one at a time from Python (a few microseconds of dispatch per
call, included; no measurements). Per path the fastest round counts (CPU time, ``time.process_time``; the
machine is shared). Prints one JSON object per case and L: CPU ns per slot per step (sweep + loop), loop ns
per leg visit (4 legs per bond vertex), the links array in MB, the speed-up of the interleaved path, and
``engine_path``: what a chain of this size does (:mod:`qmc.chain.tracer_choice`: one tracer, interleaved,
or timed by the chain).
"""

from __future__ import annotations

import argparse
import json
import sys
import time

from _cases import CASES, case_model, selected_cases

from qmc.chain.simulation import Simulation
from qmc.chain.tracer_choice import TRIAL_FROM, TRIAL_UP_TO
from qmc.engine.diagonal import diagonal_sweep
from qmc.engine.interleaved import ALONE, TRACERS, WINDOW, interleaved_loop_update
from qmc.engine.projector import loop_update
from qmc.engine.records import Vertices, build
from qmc.engine.rng import stream_seed

__all__ = ["scaling_case", "main"]


def _steps(sim: Simulation, n_steps: int, interleaved: bool) -> tuple[float, float, int]:
    """CPU seconds of the sweeps, of the loop updates, and the summed vertex counts of ``n_steps`` steps."""
    chain, vertices = sim.chain, sim.vertices
    t_sweep = t_loop = 0.0
    n_vert_sum = 0
    for _ in range(n_steps):
        c0 = time.process_time()
        n, nv = diagonal_sweep(chain, sim.terms, sim.kind, vertices, sim.probes, sim.tallies)
        chain.counters[0] = n
        c1 = time.process_time()
        if interleaved:
            interleaved_loop_update(vertices.links, vertices.vflip, vertices.first, chain.spins, chain.rng,
                                    nv, TRACERS, ALONE, WINDOW, 0, True)  # labelled, as the engine runs it
        else:
            short = build(Vertices, **{**vertices._asdict(), "links": vertices.links[:4 * nv]})
            loop_update(sim.kind, chain, short, nv)
        c2 = time.process_time()
        t_sweep += c1 - c0
        t_loop += c2 - c1
        n_vert_sum += int(nv)
    return t_sweep, t_loop, n_vert_sum


def scaling_case(case: str, L: int, rounds: int, work: float, warmup_work: float) -> dict:
    model = case_model(L, *CASES[case])
    beta = float(L)
    sim = Simulation(model, beta, warmup_steps=10**9, measure_steps=1, bins=1,
                     seed_words=stream_seed(7, f"tracers-{case}-{L}"))
    done = 0.0
    while done < warmup_work:  # grow the cutoff and equilibrate n
        sim.advance(10)
        done += 10 * sim.cutoff
    M = sim.cutoff
    n_steps = max(2, int(work / M))
    best: dict[str, tuple[float, float, int]] = {}
    for _ in range(rounds):
        for name in ("single", "interleaved"):
            r = _steps(sim, n_steps, name == "interleaved")
            if name not in best or r[0] + r[1] < best[name][0] + best[name][1]:
                best[name] = r
    out: dict = {"case": case, "L": L, "beta": beta, "cutoff": M, "n_ops": int(sim.counters[0]),
                 "steps_per_round": n_steps,
                 "rounds": rounds, "links_MB": round(sim.links.nbytes / 2**20, 2)}
    for name, (ts, tl, nvs) in best.items():
        out[name] = {"cpu_ns_per_slot_per_step": (ts + tl) / n_steps / M * 1e9,
                     "sweep_ns_per_slot": ts / n_steps / M * 1e9, "loop_ns_per_slot": tl / n_steps / M * 1e9,
                     "loop_ns_per_leg": tl / (4 * nvs) * 1e9, "mean_vertices": nvs / n_steps}
    out["speedup_interleaved"] = out["single"]["cpu_ns_per_slot_per_step"] / out["interleaved"][
        "cpu_ns_per_slot_per_step"]
    nv = out["single"]["mean_vertices"]  # what a chain does (qmc.chain.tracer_choice)
    out["engine_path"] = ("single" if nv <= TRIAL_FROM else "interleaved" if nv > TRIAL_UP_TO
                          else "timed by the chain")
    return out


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--case", default="all", choices=[*CASES, "all"])
    p.add_argument("--scaling", default="16,32,64,128", metavar="L1,L2,...")
    p.add_argument("--rounds", type=int, default=3)
    p.add_argument("--work", type=float, default=2e7, help="slot-steps per path and round")
    p.add_argument("--warmup-work", type=float, default=3e8, help="slot-steps of warm-up (engine steps)")
    a = p.parse_args()
    for case in selected_cases(a.case):
        for L in (int(x) for x in a.scaling.split(",")):
            print(json.dumps(scaling_case(case, L, a.rounds, a.work, a.warmup_work)))
            sys.stdout.flush()


if __name__ == "__main__":
    main()
