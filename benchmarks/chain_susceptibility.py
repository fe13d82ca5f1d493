"""The uniform susceptibility of the 128-site Heisenberg chain at T = 0.6408 J: plain versus loop estimators.

Usage:  python benchmarks/chain_susceptibility.py [--steps 100000] [--bins 1000] [--warmup 10000]
                                                  [--variant plain --variant improved] [--seed-key bar]

H = J sum_i S_i.S_{i+1} (J = 1, periodic, 128 sites), beta = 1/0.6408, ``chi_uniform`` = beta <M_z^2>/N.
For each estimator variant (``[sampling] estimators``) one chain of ``--steps`` measured Monte Carlo steps
after ``--warmup`` prints one JSON object: the mean, its binning error (plateau rule, qmc.chain.binning)
and relative error, the CPU seconds of the measured steps, ``cpu_seconds_to_0.1%`` = T (sigma / (0.001
chi))^2 (the error falls as 1/sqrt(steps)), and the deviation in error bars from

- ``CHI_LITERATURE`` = 0.146926: the maximum of the infinite chain's susceptibility, at T_max = 0.640851 J,
  from the Bethe ansatz (Johnston et al., Phys. Rev. B 61, 9558 (2000); value from memory).  T = 0.6408 is
  that maximum, where chi(T) is flat to ~1e-8, and at this temperature the correlation length is about one
  lattice spacing, so 128 sites are the infinite chain far beyond these error bars;
- ``CHI_LONG_PLAIN``: a long run of this script with the plain estimators (``--variant plain --steps
  100000000 --seed-key reference``), measured on this machine (see CHANGELOG).

tests/engine/test_loop_estimators.py (slow) holds the loop estimators to the bar: relative error below
0.25% after 1e5 steps and within 4 error bars of both references.
"""

from __future__ import annotations

import argparse
import json
import time

import numpy as np
from qmc.models import HeisenbergTerm, build_lattice, compile_model

from qmc.chain.binning import error_estimate
from qmc.chain.simulation import Simulation
from qmc.engine.rng import stream_seed

__all__ = ["CHI_LITERATURE", "CHI_LONG_PLAIN", "T", "L", "run", "main"]

L = 128
T = 0.6408
CHI_LITERATURE = 0.146926
"""Bethe ansatz, infinite chain, at its maximum T = 0.640851 J (Johnston et al., PRB 61, 9558 (2000); from
memory)."""
CHI_LONG_PLAIN = (0.1469176, 0.0000210)
"""(mean, error) of a plain-estimator run of 1e8 steps of this script (``--variant plain --steps 100000000
--seed-key reference``, 591 CPU seconds); it agrees with CHI_LITERATURE within 0.4 error bars."""


def run(estimators: str, steps: int, bins: int = 1000, warmup: int = 10_000, seed_key: str = "bar") -> dict:
    """One chain; the JSON record of the module docstring."""
    model = compile_model(build_lattice("chain", (L,)), [HeisenbergTerm("nn", 1.0)])
    sim = Simulation(model, 1.0 / T, warmup_steps=warmup, measure_steps=steps, bins=bins,
                     seed_words=stream_seed(12, seed_key), estimators=estimators)
    sim.advance(warmup)
    c0 = time.process_time()
    rows = sim.advance(steps)
    cpu = time.process_time() - c0
    est = error_estimate(rows[:, sim.bin_names.index("chi_uniform")])
    out = {"estimators": estimators, "L": L, "T": T, "steps": steps, "bins": bins, "mean": est.mean,
           "error": est.error, "relative_error": est.error / est.mean, "plateau": est.plateau_ok,
           "cpu_seconds": cpu, "cpu_seconds_to_0.1%": cpu * (est.error / (1e-3 * est.mean)) ** 2,
           "sigmas_from_literature": (est.mean - CHI_LITERATURE) / est.error}
    ref, ref_err = CHI_LONG_PLAIN
    if np.isfinite(ref):
        out["sigmas_from_long_plain"] = (est.mean - ref) / float(np.hypot(est.error, ref_err))
    return out


def main(argv: list[str] | None = None) -> None:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--steps", type=int, default=100_000)
    p.add_argument("--bins", type=int, default=1000)
    p.add_argument("--warmup", type=int, default=10_000)
    p.add_argument("--variant", action="append", choices=["plain", "improved"])
    p.add_argument("--seed-key", default="bar")
    a = p.parse_args(argv)
    for variant in a.variant or ["plain", "improved"]:
        print(json.dumps(run(variant, a.steps, a.bins, a.warmup, a.seed_key)), flush=True)


if __name__ == "__main__":
    main()
