"""CPU cost of the loop-estimator pass alone (qmc/engine/loop_estimators.py) on warmed canonical chains.

Usage:  python benchmarks/loop_estimator_cost.py [--case square|jq2|jq2_su3|...|all] [--L 32] [--beta 32]
                                                 [--warmup 300] [--configs 20] [--repeats 5]

For each case one chain (improved estimators) is warmed up; then for each of ``--configs`` configurations
(one diagonal sweep + loop update apart) the pass is timed once right after the loop update, as in a Monte
Carlo step (``pass_us_first_*``, less the median time of an empty call through numba's dispatch,
``dispatch_us``), and then run ``10 x --repeats`` times on the same loops (it only reads the configuration
and adds to the accumulator), the fastest call counting (``pass_us_*``). Repeated calls on one configuration
run 5-12% faster than the first one (32x32, minima and medians over 20 configurations, net of the dispatch:
square 127-131 us against 142-156, J-Q2 240-243 against 258-273;
benchmarks/results/loop_estimator_cost_first_call.jsonl), so the first-call figures are the ones to compare
with a step's cost. One JSON object per case: the string's n, bond vertices and loops of the last
configuration, the pass's wall-clock microseconds per call (median and minimum over the configurations) and
those of ``equal_time`` with the plain order parameters (what the improved mode no longer computes), for
scale.
The machine is shared: compare two trees by running them alternately.  ``--case all`` runs the two
canonical S = 1/2 cases and the SU(3) J-Q2 case of the colour kind.
"""

from __future__ import annotations

import argparse
import json
import time

import numpy as np
from _cases import add_case_arguments, any_case_model, selected_cases
from numba import njit

from qmc.chain.simulation import Simulation
from qmc.engine.diagonal import diagonal_sweep
from qmc.engine.equal_time import equal_time
from qmc.engine.kinds import loop_update
from qmc.engine.loop_estimators import loop_estimators
from qmc.engine.rng import stream_seed

__all__ = ["pass_cost", "main"]


@njit
def _step(chain, terms, kind, vertices, probes, tallies):
    n, n_vert = diagonal_sweep(chain, terms, kind, vertices, probes, tallies)
    chain.counters[0] = n
    return n, n_vert, loop_update(kind, chain, vertices, n_vert)


@njit
def _passes(reps, kind, chain, terms, vertices, probes, tallies, n_vert, n_loops):
    for _ in range(reps):
        loop_estimators(kind, chain, terms, vertices, probes, tallies, n_vert, n_loops)


@njit
def _equal_times(reps, kind, chain, probes, tallies):
    for _ in range(reps):
        equal_time(kind, chain.spins, probes, tallies, True)


def _fastest(fn, args: tuple, repeats: int) -> float:
    """Seconds per call of fn(10, *args), the fastest of ``repeats`` rounds."""
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn(10, *args)
        best = min(best, (time.perf_counter() - t0) / 10)
    return best


def pass_cost(case: str, L: int, beta: float, warmup: int, configs: int, repeats: int) -> dict:
    """The JSON record of one case (module docstring)."""
    seed = stream_seed(1, f"loop-estimator-cost-{case}-{L}-{beta}")
    sim = Simulation(any_case_model(case, L), beta, warmup_steps=warmup, measure_steps=1, bins=1,
                     seed_words=seed, estimators="improved")
    sim.advance(warmup)
    chain, terms, kind, vertices, probes, tallies = (sim.chain, sim.terms, sim.kind, sim.vertices, sim.probes,
                                                     sim.tallies)
    passes, firsts, ets = [], [], []
    empty = (kind, chain, terms, vertices, probes, tallies, 0, 0)
    _passes(0, *empty)  # compiled before any timing
    calls = []
    for _ in range(200):  # the call alone (numba's dispatch on nine arguments), taken off the first calls
        t0 = time.perf_counter()
        _passes(0, *empty)
        calls.append(time.perf_counter() - t0)
    dispatch = float(np.median(calls))
    for _ in range(configs):
        n, n_vert, n_loops = _step(chain, terms, kind, vertices, probes, tallies)
        args = (kind, chain, terms, vertices, probes, tallies, n_vert, n_loops)
        t0 = time.perf_counter()
        _passes(1, *args)
        firsts.append(time.perf_counter() - t0)
        _equal_times(1, kind, chain, probes, tallies)
        passes.append(_fastest(_passes, args, repeats))
        ets.append(_fastest(_equal_times, (kind, chain, probes, tallies), repeats))
    return {"case": case, "L": L, "beta": beta, "n": int(n), "n_vertices": int(n_vert),
            "n_loops": int(n_loops), "configs": configs,
            "pass_us_first_median": 1e6 * (float(np.median(firsts)) - dispatch),
            "pass_us_first_min": 1e6 * (min(firsts) - dispatch), "dispatch_us": 1e6 * dispatch,
            "pass_us_median": 1e6 * float(np.median(passes)), "pass_us_min": 1e6 * min(passes),
            "equal_time_with_order_us_median": 1e6 * float(np.median(ets))}


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    add_case_arguments(p, colour_cases=True)
    p.add_argument("--configs", type=int, default=20)
    p.add_argument("--repeats", type=int, default=5)
    a = p.parse_args()
    cases = ["square", "jq2", "jq2_su3"] if a.case == "all" else selected_cases(a.case, colour_cases=True)
    for case in cases:
        print(json.dumps(pass_cost(case, a.L, a.beta, a.warmup, a.configs, a.repeats)), flush=True)


if __name__ == "__main__":
    main()
