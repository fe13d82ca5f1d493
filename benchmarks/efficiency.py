"""Statistical efficiency: CPU seconds to reach a given error bar, per observable, case and estimator variant.

Usage:  python benchmarks/efficiency.py [--case square|jq2|all] [--L 16] [--beta 16] [--steps 16384]
                                        [--bins 128] [--warmup 2000] [--variant plain ...]
                                        [--target energy=1e-4 --target m_stag2=1% ...]

For every case (the canonical square-lattice Heisenberg and J-Q2 models of ``_cases.py``) and every
estimator variant the chain is built exactly as ``qmc run`` builds it (from a configuration text with the
variant's ``[sampling]`` keys) and, after the warm-up, measured for ``--steps`` Monte Carlo steps in
``--bins`` bins.  For each observable -- ``energy``, ``m_stag2``, ``chi_stag``, ``chi_uniform``,
``stiffness`` and the VBS order ``vbs_d2`` = D_x^2 + D_y^2 (``vbs_x2 + vbs_y2``, summed per bin) -- the
binning error sigma (plateau rule, qmc.chain.binning) after CPU time T gives the cost of a target error e as

    cpu_seconds_to_target = T (sigma / e)^2            (the error falls as 1 / sqrt(steps))

and the variant-independent figure of merit ``cpu_seconds_x_variance`` = T sigma^2 (smaller is better).
T is the CPU time of the measured steps at the fastest rate seen over ``--chunks`` equal parts of the
measurement (the minimum resists other processes on a shared machine); ``cpu_seconds_measured`` is the
plain total.  Targets: absolute (``energy=1e-4``) or relative to |mean| (``m_stag2=1%``), as in
``[sampling] target``.  Prints one JSON object per (case, variant).

Estimator variants: :data:`VARIANTS` maps a name to the ``[sampling]`` keys that select it: ``plain`` and
``improved`` (``[sampling] estimators``; the loop estimators change m_stag2, chi_stag and chi_uniform, not
energy, stiffness or the VBS order, whose figures then differ only by the cost of a step).
"""

from __future__ import annotations

import argparse
import json
import tempfile
import time
from typing import Any

import numpy as np
from _cases import CASES, selected_cases

from qmc.chain.binning import error_estimate
from qmc.chain.simulation import Simulation
from qmc.config.parser import load_config
from qmc.run.single import SingleRun
from qmc.run.task_run import RunContext

__all__ = ["VARIANTS", "OBSERVABLES", "config_text", "build_chain", "measure", "main"]

VARIANTS: dict[str, dict[str, Any]] = {
    "plain": {"estimators": "plain"},
    "improved": {"estimators": "improved"},
}
"""Estimator variant -> the ``[sampling]`` keys that select it (TOML values)."""

OBSERVABLES = ("energy", "m_stag2", "chi_stag", "chi_uniform", "stiffness", "vbs_d2")
DEFAULT_TARGETS = ("energy=1e-4", "m_stag2=1%", "chi_stag=1%", "chi_uniform=1%", "stiffness=1%", "vbs_d2=1%")

_CONFIG = """
[run]
seed = 2024
output = "unused"
[lattice]
kind = "square"
size = [{L}, {L}]
[[terms]]
type = "heisenberg"
bonds = "nn"
coupling = {J}
{q_term}
[scan]
beta = {beta}
[sampling]
warmup_steps = {warmup}
measure_steps = {steps}
bins = {bins}
{extra}
"""


def config_text(case: str, L: int, beta: float, warmup: int, steps: int, bins: int,
                sampling: dict[str, Any]) -> str:
    """The configuration of one case with the ``[sampling]`` keys of a variant."""
    J, Q = CASES[case]
    q_term = (f'[[terms]]\ntype = "projector-product"\nshape = "plaquette-pair"\ncoupling = {Q!r}'
              if Q > 0 else "")
    extra = "\n".join(f"{k} = {json.dumps(v)}" for k, v in sampling.items())
    return _CONFIG.format(L=L, J=repr(J), q_term=q_term, beta=repr(beta), warmup=warmup, steps=steps,
                          bins=bins, extra=extra)


def build_chain(text: str) -> Simulation:
    """The fresh chain ``qmc run`` would start for the one task of configuration ``text``."""
    with tempfile.TemporaryDirectory() as tmp:
        path = f"{tmp}/bench.toml"
        with open(path, "w", encoding="utf-8") as f:
            f.write(text)
        (task,) = load_config(path).tasks()
        run = SingleRun(task, RunContext.of(tmp, config_text=text))
        run._load()  # builds the chain as the runner does; nothing is written
        return run._chains()[0]


def _targets(items: list[str]) -> dict[str, tuple[float, bool]]:
    out = {}
    for item in items:
        name, _, value = item.partition("=")
        rel = value.strip().endswith("%")
        out[name.strip()] = (float(value.strip().rstrip("%")) / (100.0 if rel else 1.0), rel)
    return out


def measure(case: str, variant: str, L: int, beta: float, warmup: int, steps: int, bins: int, chunks: int,
            targets: dict[str, tuple[float, bool]]) -> dict[str, Any]:
    """One (case, variant): the JSON record described in the module docstring."""
    sim = build_chain(config_text(case, L, beta, warmup, steps, bins, VARIANTS[variant]))
    sim.advance(warmup)
    rows, rates = [], []
    per_chunk = steps // chunks
    total_cpu = 0.0
    for k in range(chunks):
        n = per_chunk if k < chunks - 1 else steps - per_chunk * (chunks - 1)
        c0 = time.process_time()
        rows.append(sim.advance(n))
        cpu = time.process_time() - c0
        total_cpu += cpu
        rates.append(cpu / n)
    table = np.concatenate(rows)
    names = list(sim.bin_names)
    cols = {name: table[:, names.index(name)] for name in names}
    if "vbs_x2" in cols and "vbs_y2" in cols:
        cols["vbs_d2"] = cols["vbs_x2"] + cols["vbs_y2"]
    cpu = min(rates) * steps
    obs = {}
    for name in OBSERVABLES:
        if name not in cols:
            continue
        est = error_estimate(cols[name])
        value, rel = targets.get(name, (0.01, True))
        goal = value * abs(est.mean) if rel else value
        obs[name] = {"mean": est.mean, "error": est.error, "relative_error": est.error / abs(est.mean),
                     "plateau": est.plateau_ok, "tau_int_steps": est.tau_int * sim.steps_per_bin,
                     "tau_int_steps_upper_bound": bool(est.tau_int < 1.0),
                     "target_error": goal, "target": f"{value * 100:g}%" if rel else f"{value:g}",
                     "cpu_seconds_to_target": cpu * (est.error / goal) ** 2,
                     "cpu_seconds_x_variance": cpu * est.error ** 2}
    return {"case": case, "variant": variant, "L": L, "N": sim.model.n_sites, "beta": beta,
            "warmup": warmup, "steps": steps, "bins": bins, "steps_per_bin": sim.steps_per_bin,
            "cpu_seconds": cpu, "cpu_seconds_measured": total_cpu, "cpu_seconds_per_step": cpu / steps,
            "observables": obs}


def main(argv: list[str] | None = None) -> None:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--case", default="all", choices=[*CASES, "all"])
    p.add_argument("--L", type=int, default=16)
    p.add_argument("--beta", type=float, default=16.0)
    p.add_argument("--warmup", type=int, default=2000)
    p.add_argument("--steps", type=int, default=16384)
    p.add_argument("--bins", type=int, default=128)
    p.add_argument("--chunks", type=int, default=8, help="parts of the measurement timed separately")
    p.add_argument("--variant", action="append", choices=list(VARIANTS),
                   help="estimator variant (repeat; default: all)")
    p.add_argument("--target", action="append", default=None, metavar="OBS=ERROR",
                   help=f"target error, absolute or relative with %% (default: {' '.join(DEFAULT_TARGETS)})")
    a = p.parse_args(argv)
    if a.steps % a.bins:
        raise SystemExit("--bins must divide --steps")
    targets = _targets(list(DEFAULT_TARGETS) + (a.target or []))
    for case in selected_cases(a.case):
        for variant in a.variant or list(VARIANTS):
            print(json.dumps(measure(case, variant, a.L, a.beta, a.warmup, a.steps, a.bins, a.chunks,
                                     targets)), flush=True)


if __name__ == "__main__":
    main()
