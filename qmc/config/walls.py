"""The ``[domain_wall]`` section: pinned edges that turn one scan point into a set of tasks.

::

    [domain_wall]
    walls = ["pi/2", "pi"]     # the walls run beside the reference
    pattern = "columnar"       # the valence-bond pattern carried by the edges
    pin = 2.0                  # factor on the couplings of the edge terms that carry it

Every scan point (and copy) becomes one task per entry of :attr:`~qmc.config.schema.DomainWallSpec.tasks`:
the reference ``none``, each wall, and the second reference ``none-x`` when ``pi/2`` is asked for (the
edges of each are described in :mod:`qmc.models.walls`).  A task records its wall in ``params["wall"]``; its
id gains ``_wall-<tag>`` and its random stream is keyed by the wall, the pattern and the factor as well as
by the scan values (:mod:`qmc.config.tasks`).  Only the square lattice with ``boundary = ["open",
"periodic"]`` is supported, and not together with ``[exchange]`` (the pinned edge terms make the couplings
of a term group non-uniform, which the swap rule assumes).  The edges pin S = 1/2 models: ``xxz`` and
``field`` terms (directed loops; the per-column energies would miss the field) are refused here, and
``colors`` > 2 (SU(N)) per task (:mod:`qmc.config.tasks`), as neither the pinned edges nor the profiles of
those models have been checked against exact results.
"""

from __future__ import annotations

from qmc.config.reader import TableReader
from qmc.config.schema import DOMAIN_WALL_KEYS, DomainWallSpec, LatticeSpec, Sampling, TermSpec
from qmc.errors import UserError, describe_value
from qmc.models import WALL_PATTERNS, WALLS

__all__ = ["parse_domain_wall", "check_wall_colors", "STRIP", "UNPINNED_TERMS"]

STRIP = ("open", "periodic")
"""The boundary that domain walls need: open along x, periodic along y."""
UNPINNED_TERMS = ("xxz", "field")
"""Term types refused with [domain_wall] (directed loops)."""
_ASKABLE = tuple(w for w in WALLS if not w.startswith("none"))


def parse_domain_wall(r: TableReader, lattice: LatticeSpec, sampling: Sampling,
                      terms: tuple[TermSpec, ...]) -> DomainWallSpec | None:
    """The ``[domain_wall]`` section (None when absent), checked against the lattice, the terms and
    [exchange] (the colours are checked per task, :func:`check_wall_colors`)."""
    if "domain_wall" not in r.data:
        return None
    t = r.table("domain_wall")
    r.check_keys("domain_wall", t, DOMAIN_WALL_KEYS, ("walls",), "[domain_wall]")
    walls = t["walls"]
    if not isinstance(walls, list) or not walls:
        known = ", ".join(map(repr, _ASKABLE))
        raise r.fail("domain_wall.walls", f"must be a non-empty list of walls ({known}), got "
                                          f"{describe_value(walls)}")
    chosen = [r.choice(f"domain_wall.walls[{i}]", w, _ASKABLE, "wall") for i, w in enumerate(walls)]
    for i, w in enumerate(chosen):
        if w in chosen[:i]:
            raise r.fail(f"domain_wall.walls[{i}]", f"the wall {w!r} is listed twice")
    pattern = r.choice("domain_wall.pattern", t.get("pattern", "columnar"), WALL_PATTERNS, "wall pattern")
    pin = float(r.number("domain_wall.pin", t.get("pin", 2.0)))
    if not pin > 0:
        raise r.fail("domain_wall.pin", f"must be positive (it multiplies couplings), got {pin:g}")
    if lattice.kind != "square" or lattice.boundary != STRIP:
        raise r.fail("lattice.boundary" if lattice.kind == "square" else "lattice.kind",
                     "[domain_wall] needs kind = \"square\" with boundary = [\"open\", \"periodic\"]: the "
                     "walls run along y, between pinned edges at the two open ends along x")
    if sampling.exchange is not None:
        raise r.fail("exchange.along", "[exchange] cannot be combined with [domain_wall]: the pinned edge "
                                       "terms have other couplings than the rest of their term, and replica "
                                       "exchange needs one coupling per term")
    for i, term in enumerate(terms):
        if term.type in UNPINNED_TERMS:
            raise r.fail(f"terms[{i}].type", f"[domain_wall] cannot be combined with {term.type} terms: the "
                                             "walls are pinned on S = 1/2 models of heisenberg, projector "
                                             "and projector-product terms (an xxz or field term runs by "
                                             "directed loops, whose per-column energies leave out the field)")
    order = [w for w in _ASKABLE if w in chosen]
    return DomainWallSpec(walls=tuple(order), pattern=pattern, pin=pin)



def check_wall_colors(colors: int, where: str, context: str) -> None:
    """UserError for domain walls on a model with more than two colours per site (SU(N))."""
    if colors > 2:
        raise UserError(f"[domain_wall] needs colors = 2 (S = 1/2 spins), not {colors}{context}: the pinned "
                        "edges and the profiles along x are made and checked for S = 1/2 models only; remove "
                        "[domain_wall] or [model] colors", where)
