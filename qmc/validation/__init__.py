"""Reference checks of the simulation (``qmc validate``): short runs compared with exact and published values.

Modules: ``references`` (published and exact reference values with their sources), ``checks`` (one
compared quantity and the pass rule), ``jobs`` (simulation and exact-diagonalization work items, run in
worker processes), ``cases`` (the checks of each mode: which runs, how they are analysed; their finite-size
fits are :mod:`qmc.analysis.powerfit`), ``progress`` (ETA on standard error), ``runner`` (plan, run,
evaluate), ``table`` (the printed table), ``exact`` (the independent exact reference, numpy/scipy only).
Entry point: :func:`qmc.validation.suite.run_validation`.

This ``__init__`` deliberately imports nothing, so that ``qmc.validation.exact`` can be imported without
the engine.
"""

__all__: list[str] = []
