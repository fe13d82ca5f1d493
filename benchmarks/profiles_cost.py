"""Cost of the profiles along x: one strip model measured with and without them (prints JSON).

Usage:  python benchmarks/profiles_cost.py [--L 16] [--beta 16] [--steps 400] [--repeats 5]

The model is the J-Q3 strip (J = 0, Q = 1, L x L, open along x, periodic along y, pinned "pi" wall, pin 2)
that the domain-wall runs use; the same compiled model with ``site_column`` removed measures nothing per
column.  Both chains run the same steps from the same seed; the figure is the CPU time per measured step,
minimum over ``repeats`` alternating runs (the machine is shared: the minimum is the least disturbed).
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import time

from qmc.models import DomainWall, ProjectorProductTerm, build_lattice, compile_model

from qmc.chain.simulation import Simulation
from qmc.engine.rng import stream_seed

__all__ = ["main"]


def _seconds_per_step(model, beta: float, steps: int) -> tuple[float, int]:
    sim = Simulation(model, beta, warmup_steps=300, measure_steps=steps, bins=1,
                     seed_words=stream_seed(3, "profiles-cost"))
    sim.advance(300)
    c0 = time.process_time()
    sim.advance(steps)
    return (time.process_time() - c0) / steps, sim.n_ops


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--L", type=int, default=16)
    p.add_argument("--beta", type=float, default=16.0)
    p.add_argument("--steps", type=int, default=400)
    p.add_argument("--repeats", type=int, default=5)
    a = p.parse_args()
    lattice = build_lattice("square", (a.L, a.L), ("open", "periodic"))
    terms = [ProjectorProductTerm("column-of-three", 1.0)]
    with_profiles = compile_model(lattice, terms, wall=DomainWall("pi", 2.0))
    without = dataclasses.replace(with_profiles, site_column=None)
    best = {"with": float("inf"), "without": float("inf")}
    n_ops = 0
    for _ in range(a.repeats):
        for name, model in (("without", without), ("with", with_profiles)):
            t, n_ops = _seconds_per_step(model, a.beta, a.steps)
            best[name] = min(best[name], t)
    print(json.dumps({"L": a.L, "beta": a.beta, "steps": a.steps, "repeats": a.repeats, "n_ops": n_ops,
                      "us_per_step_without_profiles": best["without"] * 1e6,
                      "us_per_step_with_profiles": best["with"] * 1e6,
                      "overhead": best["with"] / best["without"] - 1.0}))


if __name__ == "__main__":
    main()
