"""Work per operator slot of the engine and of the C yardstick, counted by valgrind instead of timed.

Usage:  python benchmarks/instruction_counts.py [--case square|jq2|all] [--L 32] [--beta 32] [--warmup 300]
                                                [--steps 20] [--cc cc]

Timings on a shared machine move by several percent with the load of other tenants; instruction counts do
not.  This script runs both programs on the canonical cases under valgrind and prints, per case, one JSON
object with what the diagonal sweep, the loop update and the loop-estimator pass (``qmc run``'s default
measurement, :mod:`qmc.engine.loop_estimators`) of one Monte Carlo step execute, divided by the cutoff
(operator slots) of each program (both run with the loop estimators):

- ``*_instructions_per_slot``: instructions executed (valgrind's Ir);
- ``*_branches_per_slot``, ``*_mispredicts_per_slot``: conditional branches and those a simple simulated
  predictor gets wrong (``--branch-sim=yes``; a model of a predictor, not the machine's own);
- ``*_l1_read_misses_per_slot``, ``*_l1_write_misses_per_slot``: simulated first-level data-cache misses
  (valgrind's cache model with the host's cache sizes);
- ``ratio_*``: engine over C.

Both programs are built for the same instruction set (valgrind does not run AVX-512): the C program with
``-O3 -march=haswell -DSSE_COUNTING`` (its loop-estimator pass out of line, so that it is counted by name),
the engine with ``NUMBA_CPU_NAME=haswell`` and the same features fixed (``NUMBA_CPU_FEATURES``) and a numba
cache of its own in a temporary directory, compiled outside valgrind first. The C program is counted by
function (cachegrind, the difference of two runs of ``--steps`` and 3 x ``--steps`` measured steps, so
set-up and warm-up cancel); the engine by callgrind with collection switched on only around the kernel calls
(client requests through a small shared library built here from valgrind's ``callgrind.h``), the sweeps, the
loop updates and the passes of ``--steps`` steps from the same warmed chain counted separately. The other
per-step measurements are not counted (a few microseconds). Without valgrind, its header or a C compiler the
script prints a JSON note and exits with status 0.

What it is for: the engine and the C program take the same time per step on an idle machine, but when
other work shares the host the program that executes more instructions per slot loses more (the cores'
issue slots are shared); this script shows where the two programs differ in work, independent of the load.
"""

from __future__ import annotations

import argparse
import ctypes
import glob
import json
import os
import re
import shutil
import subprocess
import sys
import tempfile

from _cases import CASES, add_case_arguments, case_model, selected_cases
from c_compare import compile_reference

from qmc.chain.simulation import Simulation
from qmc.chain.tracer_choice import SINGLE
from qmc.engine.diagonal import diagonal_sweep
from qmc.engine.loop_estimators import loop_estimators
from qmc.engine.projector import loop_update
from qmc.engine.rng import stream_seed

__all__ = ["count_c", "count_engine", "main"]

HEADER = "/usr/include/valgrind/callgrind.h"
CONTROL = """#include <valgrind/callgrind.h>
void counting_zero(void) { CALLGRIND_ZERO_STATS; }
void counting_toggle(void) { CALLGRIND_TOGGLE_COLLECT; }
void counting_dump(void) { CALLGRIND_DUMP_STATS_AT("kernels"); }
"""
EVENTS = {"Ir": "instructions", "Bc": "branches", "Bcm": "mispredicts", "D1mr": "l1_read_misses",
          "D1mw": "l1_write_misses"}
"""valgrind's event names and the names used in the output."""
TOOL_FLAGS = ["--branch-sim=yes", "--cache-sim=yes"]
HASWELL = ("+64bit,+avx,+avx2,+bmi,+bmi2,+cmov,+cx16,+f16c,+fma,+fsgsbase,+fxsr,+lzcnt,+mmx,+movbe,+pclmul,"
           "+popcnt,+rdrnd,+sahf,+sse,+sse2,+sse3,+sse4.1,+sse4.2,+ssse3,+xsave,+xsaveopt")
"""numba's target features for the engine, fixed: inside valgrind the host reports fewer features than
outside, and numba's cache key includes them, so without this the kernels would be compiled again under
valgrind."""


def _totals(annotate_output: str, select: tuple[str, ...] | None = None) -> dict[str, float]:
    """Event totals of a ``cg_annotate`` / ``callgrind_annotate`` report: the program totals, or with
    ``select`` the sum of the function lines whose name contains one of its strings."""
    lines = annotate_output.splitlines()
    header = next(line for line in lines if line.startswith("Ir"))
    names = header.split()
    out = dict.fromkeys(names, 0.0)
    for line in lines:
        if select is None and "PROGRAM TOTALS" not in line:
            continue
        if select is not None and (not line.strip() or not any(x in line.split()[-1] for x in select)):
            continue
        values = re.sub(r"\([^)]*\)", "", line).split()[:len(names)]
        if len(values) < len(names):
            continue
        for name, value in zip(names, values, strict=True):
            out[name] += float(value.replace(",", "")) if value != "." else 0.0
        if select is None:
            break
    return out


def _per_slot(events: dict[str, float], steps: int, slots: int) -> dict[str, float]:
    return {EVENTS[k]: events.get(k, 0.0) / steps / slots for k in EVENTS}


PARTS = (("sweep", ("diagonal_sweep",)), ("loop", ("loop_update", "loops_")), ("pass", ("loop_estimators",)))
"""The counted parts and the C program's functions that do them (out of line in the C program)."""


def count_c(exe: str, case: str, L: int, beta: float, warmup: int, steps: int, workdir: str) -> dict:
    """Sweep, loop update and loop-estimator pass of the C program per slot and step (difference of two
    cachegrind runs; one tracer, the loop estimators)."""
    J, Q = CASES[case]
    runs = []
    for n in (steps, 3 * steps):
        out = os.path.join(workdir, f"c-{case}-{n}.out")
        res = subprocess.run(["valgrind", "--tool=cachegrind", *TOOL_FLAGS, f"--cachegrind-out-file={out}",
                              exe, str(L), repr(beta), repr(J), repr(Q), str(warmup), str(n), "5", "1", "1",
                              "improved"],
                             check=True, capture_output=True, text=True)
        report = subprocess.run(["cg_annotate", out], check=True, capture_output=True, text=True).stdout
        runs.append((json.loads(res.stdout), {part: _totals(report, name) for part, name in PARTS}))
    (first, a), (last, b) = runs
    if first["cutoff"] != last["cutoff"]:
        raise RuntimeError("the C program's cutoff changed between the two runs")
    return {part: _per_slot({k: b[part][k] - a[part][k] for k in a[part]}, 2 * steps, first["cutoff"])
            for part, _ in PARTS} | {"cutoff": first["cutoff"]}


def _engine_child(case: str, L: int, beta: float, warmup: int, steps: int, control: str) -> None:
    """Inside valgrind (or once outside, to compile): warm a chain up, then count ``steps`` sweeps and,
    from the same state, ``steps`` loop updates and ``steps`` loop-estimator passes (collection on only
    around those calls)."""
    lib = ctypes.CDLL(control) if control else None
    sim = Simulation(case_model(L, *CASES[case]), beta, warmup_steps=warmup, measure_steps=1, bins=1,
                     seed_words=stream_seed(3, f"counts-{case}"), estimators="improved")
    sim.fix_loop_tracing(SINGLE)  # the C program's one-tracer variant (-march=haswell build, variant 1)
    sim.advance(warmup)
    records = (sim.chain, sim.terms, sim.kind, sim.vertices, sim.probes, sim.tallies)
    state = [a.copy() for a in (*sim.chain, *sim.vertices)]
    n, n_vert = diagonal_sweep(*records)  # load the three kernels from the cache before counting
    sim.counters[0] = n
    n_loops = loop_update(sim.kind, sim.chain, sim.vertices, n_vert)
    loop_estimators(sim.kind, sim.chain, sim.terms, sim.vertices, sim.probes, sim.tallies, n_vert, n_loops)

    def nothing() -> None:
        pass

    for part, _ in PARTS:
        for a, saved in zip((*sim.chain, *sim.vertices), state, strict=True):
            a[...] = saved
        (lib.counting_zero if lib else nothing)()
        around = {name: lib.counting_toggle if lib and name == part else nothing for name, _ in PARTS}
        for _ in range(steps):
            around["sweep"]()
            n, n_vert = diagonal_sweep(*records)
            around["sweep"]()
            sim.counters[0] = n
            around["loop"]()
            n_loops = loop_update(sim.kind, sim.chain, sim.vertices, n_vert)
            around["loop"]()
            around["pass"]()
            loop_estimators(sim.kind, sim.chain, sim.terms, sim.vertices, sim.probes, sim.tallies, n_vert,
                            n_loops)
            around["pass"]()
        (lib.counting_dump if lib else nothing)()
    print(json.dumps({"cutoff": sim.cutoff}))


def count_engine(case: str, L: int, beta: float, warmup: int, steps: int, workdir: str, control: str) -> dict:
    """Sweep, loop update and loop-estimator pass of the engine per slot and step (callgrind, collection
    around the calls)."""
    env = dict(os.environ, NUMBA_CPU_NAME="haswell", NUMBA_CPU_FEATURES=HASWELL,
               NUMBA_CACHE_DIR=os.path.join(workdir, "numba-cache"))
    child = [sys.executable, os.path.abspath(__file__), "--engine-child", "--case", case, "--L", str(L),
             "--beta", repr(beta), "--warmup", str(warmup), "--steps", str(steps)]
    subprocess.run([*child[:-1], "1"], check=True, capture_output=True, text=True, env=env, cwd=workdir)
    res = subprocess.run(["valgrind", "--tool=callgrind", "--collect-atstart=no", *TOOL_FLAGS,
                          f"--callgrind-out-file={workdir}/engine-{case}.out", *child, "--control", control],
                         check=True, capture_output=True, text=True, env=env, cwd=workdir)
    info = json.loads(res.stdout.strip().splitlines()[-1])
    dumps = sorted(glob.glob(f"{workdir}/engine-{case}.out.*"), key=lambda f: int(f.rsplit(".", 1)[1]))
    out = {"cutoff": info["cutoff"]}
    for (part, _), dump in zip(PARTS, dumps[:len(PARTS)], strict=True):
        report = subprocess.run(["callgrind_annotate", dump], check=True, capture_output=True,
                                text=True).stdout
        out[part] = _per_slot(_totals(report), steps, info["cutoff"])
    return out


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    add_case_arguments(p)
    p.set_defaults(steps=20)
    p.add_argument("--cc", default="cc")
    p.add_argument("--engine-child", action="store_true", help=argparse.SUPPRESS)
    p.add_argument("--control", default="", help=argparse.SUPPRESS)
    a = p.parse_args()
    if a.engine_child:
        _engine_child(a.case, a.L, a.beta, a.warmup, a.steps, a.control)
        return
    tools = ("valgrind", "cg_annotate", "callgrind_annotate", a.cc)
    missing = [tool for tool in tools if not shutil.which(tool)]
    if missing or not os.path.exists(HEADER):
        print(json.dumps({"note": "needs valgrind (with its callgrind.h header) and a C compiler",
                          "missing": missing + ([] if os.path.exists(HEADER) else [HEADER])}))
        return
    with tempfile.TemporaryDirectory() as workdir:
        exe = compile_reference(a.cc, workdir, march="haswell", defines=("SSE_COUNTING",))
        control = os.path.join(workdir, "libcounting.so")
        with open(os.path.join(workdir, "counting.c"), "w") as f:
            f.write(CONTROL)
        subprocess.run([a.cc, "-O2", "-shared", "-fPIC", "-o", control, os.path.join(workdir, "counting.c")],
                       check=True)
        for case in selected_cases(a.case):
            c = count_c(exe, case, a.L, a.beta, a.warmup, a.steps, workdir)
            e = count_engine(case, a.L, a.beta, a.warmup, a.steps, workdir, control)
            row = {"case": case, "L": a.L, "beta": a.beta, "steps": a.steps,
                   "c_cutoff": c["cutoff"], "engine_cutoff": e["cutoff"]}
            for part, _ in PARTS:
                for name in EVENTS.values():
                    row[f"c_{part}_{name}_per_slot"] = c[part][name]
                    row[f"engine_{part}_{name}_per_slot"] = e[part][name]
                    row[f"ratio_{part}_{name}"] = e[part][name] / c[part][name] if c[part][name] else None
            print(json.dumps(row), flush=True)


if __name__ == "__main__":
    main()
