"""seriesloop: stochastic series expansion quantum Monte Carlo for sign-free S=1/2 spin Hamiltonians.

The command line is ``qmc`` (:mod:`qmc.cli`).  From Python (a notebook, a script)::

    import qmc
    run_dir = qmc.run_config("configs/quickstart.toml")   # run (or resume) serially, with progress
    df = qmc.load_run(run_dir)                            # tidy DataFrame: one row per task and observable
    bins = qmc.load_bins(run_dir, "L8_c0")                # raw bins of one task as numpy arrays

The names below are defined in :mod:`qmc.api` and imported on first use, so ``import qmc`` stays fast and
loads neither numba nor the engine.  ``qmc.__version__`` is the installed distribution's version.
"""

from __future__ import annotations

from typing import Any

__all__ = ["__version__", "load_config", "run_config", "load_run", "load_task", "load_bins", "analyze",
           "report"]

_API = frozenset(__all__) - {"__version__"}


def __getattr__(name: str) -> Any:
    if name == "__version__":
        from importlib.metadata import PackageNotFoundError, version

        try:
            value = version("seriesloop")
        except PackageNotFoundError:  # a source tree that was never installed
            value = "0+unknown"
        globals()[name] = value
        return value
    if name in _API:
        from qmc import api

        return getattr(api, name)
    raise AttributeError(f"module 'qmc' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
