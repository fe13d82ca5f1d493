"""The layout of a chain's checkpoint (:meth:`qmc.chain.simulation.Simulation.state`) and its version.

A checkpoint is a dict of numpy arrays: ``STATE_KEYS`` plus ``layout``, the number of its layout.  What the
arrays mean (operator encoding, :mod:`qmc.engine.vertices`; accumulator slots, :mod:`qmc.engine.slots`) is
fixed by that number.  Whoever changes one of them raises ``CHECKPOINT_LAYOUT`` and either adds a migration
from the previous layout to ``_MIGRATIONS`` or lets :func:`current_layout` refuse the old checkpoints (the
message names both layouts and the release that can continue them).

Layouts:

1. checkpoints without a ``layout`` entry (seriesloop 0.1.0): spins, ops, counters, rng, acc, hist, steps;
2. the same arrays with the same meaning, plus ``layout``.  Layout 1 is migrated by adding the number;
3. layout 2 plus ``above`` (int32, the per-slot colours of the SU(N) colour kind, ``Chain.above``; empty for
   S = 1/2 models).  Layout 2 is migrated by adding an empty ``above`` (it only held S = 1/2 models).
4. layout 3, and ``counters`` has four entries (n, directed loops per step, frozen flag, unused; see
   :mod:`qmc.chain.simulation`); models with directed loops have accumulator slots after the groups
   (:mod:`qmc.engine.slots`).  Layout 3 (no directed-loop models) is migrated by padding ``counters`` with
   zeros (a layout-3 state without ``above``, as the directed-loop development branch wrote it, also gets
   the empty ``above``).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping

import numpy as np

from qmc.errors import UserError

__all__ = ["CHECKPOINT_LAYOUT", "STATE_KEYS", "LAYOUT_KEY", "current_layout"]

CHECKPOINT_LAYOUT = 4
STATE_KEYS = ("spins", "ops", "counters", "rng", "acc", "hist", "steps", "above")
LAYOUT_KEY = "layout"

_RELEASES = {1: "seriesloop 0.1.0", 2: "the releases after seriesloop 0.1.0 without SU(N) models",
             3: "the releases with SU(N) models but without directed loops",
             4: "the releases with directed loops"}
"""The releases that write each layout (named in the refusal message)."""


def _from_layout_1(state: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    return {**state, LAYOUT_KEY: np.asarray(2, dtype=np.int64)}


def _from_layout_2(state: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    return {**state, "above": np.zeros(0, dtype=np.int32), LAYOUT_KEY: np.asarray(3, dtype=np.int64)}


def _from_layout_3(state: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    counters = np.zeros(4, dtype=np.int64)
    old = np.asarray(state["counters"], dtype=np.int64).reshape(-1)
    counters[:old.size] = old
    out = {**state, "counters": counters, LAYOUT_KEY: np.asarray(4, dtype=np.int64)}
    out.setdefault("above", np.zeros(0, dtype=np.int32))
    return out


_MIGRATIONS: dict[int, Callable[[dict[str, np.ndarray]], dict[str, np.ndarray]]] = {1: _from_layout_1,
                                                                                     2: _from_layout_2,
                                                                                     3: _from_layout_3}
"""layout n -> function turning a layout-n state into a layout-(n+1) state."""


def layout_of(state: Mapping[str, np.ndarray]) -> int:
    """The layout number of a checkpoint (1 when it carries none: written before layouts were numbered)."""
    if LAYOUT_KEY not in state:
        return 1
    value = np.asarray(state[LAYOUT_KEY])
    if value.size != 1 or not np.issubdtype(value.dtype, np.integer):
        raise UserError(f"the checkpoint's layout entry is not a whole number ({value!r})", "checkpoint")
    return int(value.reshape(-1)[0])


def current_layout(state: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
    """``state`` in layout ``CHECKPOINT_LAYOUT``, migrated step by step from an older layout if there is a
    migration; otherwise UserError saying which layout it has, which this program reads, and what to do."""
    out = dict(state)
    found = layout = layout_of(out)
    while layout < CHECKPOINT_LAYOUT and layout in _MIGRATIONS:
        out = _MIGRATIONS[layout](out)
        layout += 1
    if layout != CHECKPOINT_LAYOUT:
        age = "old" if found < CHECKPOINT_LAYOUT else "newer"
        other = _RELEASES.get(found, f"{'a newer' if age == 'newer' else 'an older'} release of seriesloop")
        raise UserError(f"{age} layout {found}, this program reads layout "
                        f"{CHECKPOINT_LAYOUT}; rerun the task from the start (move its task file away, or "
                        f"run with --force) or continue it with {other}", "checkpoint")
    missing = [k for k in STATE_KEYS if k not in out]
    if missing:
        raise UserError(f"the checkpoint (layout {found}) lacks {', '.join(missing)}", "checkpoint")
    return out
