"""One numba cache directory shared by several processes (a cluster job's ranks): a tiny run fills it, a
later process finds every kernel there and compiles nothing.

``NUMBA_CACHE_DIR`` points numba's on-disk cache at a directory; the README advises a shared one warmed by
a tiny run before a big job.  The second process reports numba's own counters (``Dispatcher.stats``) of
every kernel in ``qmc.engine``: no cache misses, and hits for the step kernel and for the diagonal sweep
(loaded on its own before the step kernel, :func:`qmc.engine.steps.bound_run_steps`).

numba stamps a cached kernel with its own file only; the engine stamps all its kernels with one hash of all
its files (:mod:`qmc.engine.cache_stamp`), so that an edit of a callee recompiles the step driver, which
carries the callee's code: checked on the stamps themselves and end to end on a copy of the package.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import textwrap
from pathlib import Path

import qmc.models

import qmc.engine
import qmc.engine.diagonal
import qmc.engine.steps
from qmc.engine.cache_stamp import engine_source_stamp

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
    print(json.dumps({"hits": hits, "misses": misses, "engine": qmc.engine.steps.__file__}))
''')


def _run(cache: Path, path: Path | None = None) -> dict:
    env = {**os.environ, "NUMBA_CACHE_DIR": str(cache)}
    if path is not None:  # import the package from there
        env["PYTHONPATH"] = os.pathsep.join([str(path), env.get("PYTHONPATH", "")])
    out = subprocess.run([sys.executable, "-c", _RUN], capture_output=True, text=True, env=env, check=True,
                         cwd=path)  # not the repository's directory, which would come first on sys.path
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


def test_engine_kernels_share_one_stamp() -> None:
    """The step driver's cache entry is stamped with the whole engine's source, as the sweep's is (numba's
    own stamps, one hash per file, differ between steps.py and diagonal.py)."""
    stamps = {f.__name__: f._cache._impl._locator.get_source_stamp()
              for f in (qmc.engine.steps.run_steps, qmc.engine.diagonal.diagonal_sweep)}
    assert stamps["run_steps"] == stamps["diagonal_sweep"] == engine_source_stamp()


def test_stamp_follows_every_source_file(tmp_path: Path) -> None:
    (tmp_path / "a.py").write_text("x = 1\n")
    (tmp_path / "b.py").write_text("y = 2\n")
    (tmp_path / "notes.txt").write_text("not source\n")
    first = engine_source_stamp(str(tmp_path))
    os.utime(tmp_path / "b.py", ns=(1, 1))  # touched, same content
    assert engine_source_stamp(str(tmp_path)) == first
    (tmp_path / "notes.txt").write_text("changed\n")
    assert engine_source_stamp(str(tmp_path)) == first
    (tmp_path / "b.py").write_text("y = 3\n")
    edited = engine_source_stamp(str(tmp_path))
    assert edited != first
    (tmp_path / "c.py").write_text("")
    assert engine_source_stamp(str(tmp_path)) != edited


def test_callee_edit_recompiles_the_step_driver(tmp_path: Path) -> None:
    """On a copy of the package: a warm cache, then a comment added to the sweep's file (not to steps.py)
    makes the next process compile the step driver again instead of loading its stale machine code."""
    copy = tmp_path / "pkg"
    shutil.copytree(Path(qmc.engine.__file__).parents[1], copy / "qmc",
                    ignore=shutil.ignore_patterns("__pycache__"))
    shutil.rmtree(copy / "qmc" / "models", ignore_errors=True)
    shutil.copytree(Path(qmc.models.__file__).parent, copy / "qmc" / "models",
                    ignore=shutil.ignore_patterns("__pycache__"))
    cache = tmp_path / "numba-cache"
    assert Path(_run(cache, copy)["engine"]).is_relative_to(copy), "the copy must be the package imported"
    assert sum(_run(cache, copy)["misses"].values()) == 0, "the cache must be warm before the edit"
    with open(copy / "qmc" / "engine" / "diagonal.py", "a") as f:
        f.write("# edited\n")
    after = _run(cache, copy)
    assert after["misses"]["run_steps"] >= 1, "the step driver kept machine code compiled from the old sweep"
