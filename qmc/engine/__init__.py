"""numba kernels of the SSE engine (struct-of-arrays, no Python objects in hot loops).

- :mod:`qmc.engine.vertices`     operator encoding and the multi-bond vertex / leg numbering
- :mod:`qmc.engine.diagonal`     the diagonal-update sweep, fused with building the linked vertex list
- :mod:`qmc.engine.loops`        the operator-loop update (all loops, each flipped with probability 1/2)
- :mod:`qmc.engine.equal_time`   estimators of a single propagated state
- :mod:`qmc.engine.steps`        Monte Carlo steps (diagonal sweep + loop update) with accumulation
"""

__all__: list[str] = []
