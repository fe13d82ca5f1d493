"""What the cutoff rule costs per step: today's M = n + n/3 + 16 against the former M = n + n/2 + 16.

Usage:  python benchmarks/cutoff_cost.py [--case square|jq2|all] [--L 32] [--beta 32] [--rounds 7]
                                         [--steps 40] [--warmup 400]

The engine grows its cutoff to M = n + n/3 + 16 during warm-up (:func:`qmc.chain.simulation.grown_cutoff`,
as the C reference in benchmarks/c_reference does); up to commit 46a0760 it grew it to n + n/2 + 16.  The
rule changes the Markov chain's random path, so this script measures its cost on one chain: two copies of
one warmed-up chain, one with the engine's string and one padded with empty slots (evenly spread over the
string) up to the former n + n/2 + 16, run the diagonal sweep and the loop update (no measurements) in turn
for ``--rounds`` rounds of ``--steps`` steps each.  Empty slots carry no vertex, so the vertex list, the
pending loop flips and the loop update are the same size in both; the difference is the sweep over the
extra empty slots.  Per copy the fastest round counts (CPU time; the machine is shared).  Prints one JSON
object per case: CPU microseconds per step of both, the saving per step, per removed slot and as a
fraction of the step.
"""

from __future__ import annotations

import argparse
import json
import sys
import time

import numpy as np
from _cases import CASES, add_case_arguments, case_model, selected_cases

from qmc.chain.simulation import Simulation
from qmc.engine.diagonal import diagonal_sweep
from qmc.engine.projector import loop_update
from qmc.engine.records import Chain, build
from qmc.engine.rng import stream_seed
from qmc.engine.vertices import EMPTY

__all__ = ["padded_chain", "measure", "main"]


def padded_chain(sim: Simulation) -> Chain:
    """A copy of the chain whose string has the former n + n/2 + 16 slots (empty slots added, evenly
    spread)."""
    ops = sim.chain.ops
    n = int(sim.counters[0])
    add = max(0, n + n // 2 + 16 - ops.shape[0])
    at = np.linspace(0, ops.shape[0], add, endpoint=False).astype(np.int64)
    fields = {k: np.array(v, copy=True) for k, v in sim.chain._asdict().items()}
    fields["ops"] = np.ascontiguousarray(np.insert(ops, at, EMPTY))
    return build(Chain, **fields)


def measure(case: str, L: int, beta: float, rounds: int, steps: int, warmup: int) -> dict:
    copies = {}
    for name in ("former_cutoff", "engine_cutoff"):
        sim = Simulation(case_model(L, *CASES[case]), beta, warmup_steps=warmup, measure_steps=1, bins=1,
                         seed_words=stream_seed(3, f"cutoff-{case}"))
        sim.advance(warmup)
        copies[name] = (sim, sim.chain if name == "engine_cutoff" else padded_chain(sim))
    best = {name: (np.inf, 0, 0.0) for name in copies}
    for _ in range(rounds):
        for name, (sim, chain) in copies.items():
            t, n_sum = 0.0, 0
            for _ in range(steps):
                c0 = time.process_time()
                n, nv = diagonal_sweep(chain, sim.terms, sim.kind, sim.vertices, sim.probes, sim.tallies)
                chain.counters[0] = n
                loop_update(sim.kind, chain, sim.vertices, nv)
                t += time.process_time() - c0
                n_sum += int(n)
            if t / steps < best[name][0]:
                best[name] = (t / steps, chain.ops.shape[0], n_sum / steps)
    out: dict = {"case": case, "L": L, "beta": beta, "rounds": rounds, "steps_per_round": steps}
    for name, (sec, M, n) in best.items():
        out[name] = {"cpu_us_per_step": sec * 1e6, "cutoff": M, "mean_n": n, "cutoff_over_n": M / n}
    e, f = best["former_cutoff"], best["engine_cutoff"]
    out["saving_us_per_step"] = (e[0] - f[0]) * 1e6
    out["saving_ns_per_removed_slot"] = (e[0] - f[0]) / max(e[1] - f[1], 1) * 1e9
    out["saving_fraction"] = 1.0 - f[0] / e[0]
    return out


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    add_case_arguments(p)
    p.add_argument("--rounds", type=int, default=7)
    p.set_defaults(steps=40, warmup=400)
    a = p.parse_args()
    for case in selected_cases(a.case):
        print(json.dumps(measure(case, a.L, a.beta, a.rounds, a.steps, a.warmup)))
        sys.stdout.flush()


if __name__ == "__main__":
    main()
