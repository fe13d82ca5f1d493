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
of a term group non-uniform, which the swap rule assumes).
"""

from __future__ import annotations

from qmc.config.reader import TableReader
from qmc.config.schema import DOMAIN_WALL_KEYS, DomainWallSpec, LatticeSpec, Sampling
from qmc.errors import describe_value
from qmc.models import WALL_PATTERNS, WALLS

__all__ = ["parse_domain_wall", "STRIP"]

STRIP = ("open", "periodic")
"""The boundary that domain walls need: open along x, periodic along y."""
_ASKABLE = tuple(w for w in WALLS if not w.startswith("none"))


def parse_domain_wall(r: TableReader, lattice: LatticeSpec, sampling: Sampling) -> DomainWallSpec | None:
    """The ``[domain_wall]`` section (None when absent), checked against the lattice and [exchange]."""
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
    order = [w for w in _ASKABLE if w in chosen]
    return DomainWallSpec(walls=tuple(order), pattern=pattern, pin=pin)

