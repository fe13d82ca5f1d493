"""numba kernels of the SSE engine (struct-of-arrays, no Python objects in hot loops).

- :mod:`qmc.engine.records`     the kernels' arguments: named tuples Chain, Vertices, Terms, Probes, Tallies
- :mod:`qmc.engine.slots`       named slots of the per-sweep outputs and of the accumulator
- :mod:`qmc.engine.vertices`    operator encoding, leg numbering, the per-term table (k | kind | group, bonds)
- :mod:`qmc.engine.kinds`       the vertex-kind seam: hooks, registry, the choice of a model's kind
- :mod:`qmc.engine.projector`   the singlet-projector kind (deterministic loops; the fast path)
- :mod:`qmc.engine.interleaved` the projector's loops on vertex lists larger than the caches, traced by
  several tracers at once to keep several memory loads in flight (the same chain bit for bit)
- :mod:`qmc.engine.colour`      the SU(N) colour kind (the same loops, each given one of N colours)
- :mod:`qmc.engine.directed`    the directed-loop kind (xxz bonds with folded fields, and projectors);
  its exit probabilities in :mod:`qmc.engine.directed_tables`
- :mod:`qmc.engine.diagonal`    the diagonal-update sweep, fused with building the linked vertex list
- :mod:`qmc.engine.equal_time`  estimators of a single propagated state
- :mod:`qmc.engine.loop_estimators`  the order-parameter estimators averaged over the loop update's choices
- :mod:`qmc.engine.steps`       Monte Carlo steps (sweep + the kind's loop update) with accumulation
- :mod:`qmc.engine.rng`         xoshiro256** with its state in a plain array
- :mod:`qmc.engine.cache_stamp` numba's on-disk cache of these kernels keyed by the whole engine's source

Design note: adding a vertex kind
---------------------------------
Every term group has a vertex kind (``CompiledModel.group_kind``): how its operators are weighted and
updated.  The sweep and the step driver are written once and ask the kind through hooks
(:mod:`qmc.engine.kinds`): ``insertion_allowed`` (may the drawn term be inserted in this state, i.e. its
weight W_t(state) / w_t) and ``loop_update`` (the off-diagonal update).  numba picks a hook's code from the
class of the kind's *record*, the kernels' ``kind`` argument, when it compiles them: no run-time branch, the
projector path compiles to the same code as before, and each kind has its own cached specialisation.
tests/engine/test_engine_kinds.py runs a second, test-only kind through the unchanged kernels as a worked
example.

A new kind adds, next to the existing one:

1. ``models/compiled.py``: its name in ``VERTEX_KINDS`` (the code is the position; 8 fit the term table) and
   its operator weight w_t in ``CompiledModel.term_weights`` (the largest weight of one operator of term t;
   the alias table draws t with probability w_t / W_tot).  ``models/compile.py`` gives its groups the code.
2. ``qmc/engine/<kind>.py`` beside ``projector.py``: a NamedTuple record class with the kind's own tables,
   ``record(model)`` building it, and the hooks with the stubs' arguments: ``insertion_allowed``
   (``@njit(inline="always")``; may draw random numbers; a kind covering several codes reads the term's
   with ``meta_kind(table[t, TT_META])``), ``loop_update`` and the other hooks of ``kinds.HOOKS``
   (``@njit(inline="always")``), plus ``initial_spins``, ``SLOT_COLOURS``, ``VERTEX_STATE`` and ``acc_slots``
   (Python level); a hook or attribute the module does not define is the projector's.
3. ``qmc/engine/kinds.py``: one ``register_kind(Record, module, covers)`` line, ``covers`` being the codes its
   update handles.  The first registered kind covering all of a model's codes runs it, so a kind that also
   handles projector vertices is registered after the projector and pure projector models keep the fast path.
4. Where the kind differs in a part of the sweep that is not a hook yet, a new hook: a stub and overload in
   ``kinds.py`` whose projector implementation is today's code moved unchanged into ``projector.py`` (bins
   bit-identical: tests/chain/test_stored_bins.py; speed: benchmarks/c_compare.py), then the new kind's
   version.

The two kinds added after the projector, in these terms:

- SU(N) colours (:mod:`qmc.engine.colour`, code ``"colour"``, every group of a model with N > 2 colours;
  N = 2 stays ``projector``): the site state is a colour 0..N-1 in ``Chain.spins`` (A / conjugate-B basis);
  insertion allowed when every bond's two colours agree (w_t = C_t / N^k); loops as the projector's, each
  given one of N colours.  Hooks added for it, with the projector's code moved unchanged into
  ``projector.py``: ``apply_changes`` (the loop update's changes to an operator: the ``vflip`` xor, or the
  new colours), ``hop`` (propagation through an off-diagonal bond: a spin flip, or the colour above it from
  ``Chain.above``, per slot, ``ops`` keeping ``(t << 3) | offmask``), ``site_value`` and ``bond_value`` (what
  the order parameters and the equal-time estimators are built from), and at Python level
  ``initial_spins`` and ``slot_colours``.  :func:`qmc.engine.diagonal.fold_pending` applies pending changes
  for any kind (checkpoints, configuration swaps).
- Directed loops (done, :mod:`qmc.engine.directed`): one code for xxz bonds and field groups; the record
  holds per-type diagonal weights and the exit-leg probability tables (fewest bounces); insertion accepts
  with probability W_t(s_i, s_j) / w_t; the kind covers the projector code too (projector vertices inside
  directed loops always leave at ``l ^ 1``).  New hooks: ``vertex_added`` (leg states in
  ``Vertices.state``, allocated with the vertex list when the kind module sets ``VERTEX_STATE``) and
  ``measure`` (the kind's own accumulator slots after the groups, ``acc_slots(G)`` of them).
"""

from qmc.engine.cache_stamp import use_engine_stamp

use_engine_stamp()  # before any kernel is defined: numba picks a kernel's cache locator then

__all__: list[str] = []
