"""One numba cache directory shared by several processes (a cluster job's ranks): a tiny run fills it, a
later process finds every kernel there and compiles nothing.

``NUMBA_CACHE_DIR`` points numba's on-disk cache at a directory; the README advises a shared one warmed by
a tiny run before a big job.  The second process reports numba's own counters (``Dispatcher.stats``) of
every kernel in ``qmc.engine``: no cache misses, and hits for the step kernel and for the diagonal sweep
(loaded on its own before the step kernel, :func:`qmc.engine.steps.bound_run_steps`).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap
from pathlib import Path

_RUN = textwrap.dedent('''
    import json, sys
    from numba.core.registry import CPUDispatcher
    import qmc.engine.diagonal, qmc.engine.interleaved, qmc.engine.projector, qmc.engine.steps
    from qmc.chain.simulation import Simulation
    from qmc.engine.rng import stream_seed
    from qmc.models import HeisenbergTerm, ProjectorProductTerm, build_lattice, compile_model

    model = compile_model(build_lattice("square", (4, 4)),
                          [HeisenbergTerm("nn", 0.5), ProjectorProductTerm("plaquette-pair", 1.0)])
    sim = Simulation(model, 1.0, warmup_steps=5, measure_steps=5, bins=1, seed_words=stream_seed(3, "cache"))
    sim.advance(10)
    hits, misses = {}, {}
    for mod in (qmc.engine.diagonal, qmc.engine.interleaved, qmc.engine.projector, qmc.engine.steps):
        for name, obj in vars(mod).items():
            if isinstance(obj, CPUDispatcher) and obj.__module__ == mod.__name__:
                hits[name] = sum(obj.stats.cache_hits.values())
                misses[name] = sum(obj.stats.cache_misses.values())
    print(json.dumps({"hits": hits, "misses": misses}))
''')


def _run(cache: Path) -> dict:
    env = {**os.environ, "NUMBA_CACHE_DIR": str(cache)}
    out = subprocess.run([sys.executable, "-c", _RUN], capture_output=True, text=True, env=env, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def test_shared_cache_warmed_by_a_tiny_run(tmp_path: Path) -> None:
    cache = tmp_path / "shared-numba-cache"
    first = _run(cache)
    assert first["misses"]["run_steps"] >= 1, "an empty cache directory must make the first run compile"
    assert any(cache.rglob("*.nbi")), "the first run must write the cache into NUMBA_CACHE_DIR"
    second = _run(cache)
    assert second["hits"]["run_steps"] >= 1
    assert sum(second["misses"].values()) == 0, f"kernels compiled again: {second['misses']}"
    # the step driver must call the sweep's own compilation, as a process that compiled everything does,
    # not the copy inside its cached machine code (qmc.engine.steps, module notes): loaded on its own
    assert second["hits"]["diagonal_sweep"] >= 1, "the cached start did not load the sweep on its own"
