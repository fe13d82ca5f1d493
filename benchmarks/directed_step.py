"""Cost of a directed-loop Monte Carlo step against a deterministic-loop step of the same model.

Usage:  python benchmarks/directed_step.py [--L 32] [--beta 32] [--steps 200] [--warmup 300] [--repeats 5]

The square-lattice Heisenberg model (J = 1) runs once as ``heisenberg`` terms (singlet-projector kind,
deterministic loops) and once as ``xxz`` terms with delta = 1, h = 0 (directed-loop kind: directed loops,
whose count per step is adapted in the warm-up to 2 vertex visits per vertex).  Both sample the same
distribution.  Prints one JSON object: seconds per step of each (the minimum over ``--repeats`` timings,
since other processes on the machine only ever slow a run down), their ratio, the directed loops per step
and the mean operator count.  The target is a ratio of at most 1.5.
"""

from __future__ import annotations

import argparse
import json
import time

from _cases import case_model, xxz_model

from qmc.chain.simulation import Simulation
from qmc.engine.rng import stream_seed

__all__ = ["step_seconds", "main"]


def step_seconds(model, beta: float, steps: int, warmup: int, repeats: int) -> tuple[float, Simulation]:
    """Minimum over ``repeats`` of the wall time per measured step, and the simulation."""
    sim = Simulation(model, beta, warmup_steps=warmup, measure_steps=steps * repeats, bins=repeats,
                     seed_words=stream_seed(9, "directed-step"))
    sim.advance(warmup)
    best = float("inf")
    for _ in range(repeats):
        t = time.perf_counter()
        sim.advance(steps)
        best = min(best, (time.perf_counter() - t) / steps)
    return best, sim


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--L", type=int, default=32)
    p.add_argument("--beta", type=float, default=32.0)
    p.add_argument("--steps", type=int, default=200)
    p.add_argument("--warmup", type=int, default=300)
    p.add_argument("--repeats", type=int, default=5)
    a = p.parse_args()
    det, sim_det = step_seconds(case_model(a.L, 1.0, 0.0), a.beta, a.steps, a.warmup, a.repeats)
    dirl, sim_dir = step_seconds(xxz_model(a.L, 1.0, 0.0), a.beta, a.steps, a.warmup, a.repeats)
    print(json.dumps({"L": a.L, "beta": a.beta, "steps": a.steps, "repeats": a.repeats,
                      "deterministic_seconds_per_step": det, "directed_seconds_per_step": dirl,
                      "ratio": dirl / det, "directed_loops_per_step": int(sim_dir.counters[1]),
                      "n_ops_deterministic": sim_det.n_ops, "n_ops_directed": sim_dir.n_ops}))


if __name__ == "__main__":
    main()
