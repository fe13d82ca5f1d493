"""A run's model, lattice, scan and beta rule in words, read from the configuration text a task file keeps.

:func:`run_text` parses the TOML text (``tomllib``; the configuration was checked when the run was made) and
returns a :class:`RunText` for plot titles, coupling labels and the HTML report.  Conventions as in the
configuration: a Heisenberg term adds ``+J S_i.S_j`` per bond of its class, a projector-product term adds
``-Q prod_a P_(i_a j_a)`` with ``P_ij = 1/4 - S_i.S_j`` over the bonds of its shape.  Unreadable text gives
a RunText that says so instead of failing: the analysis must not depend on it.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, field
from typing import Any

__all__ = ["RunText", "run_text", "scan_value_text"]


@dataclass(frozen=True)
class RunText:
    """``name``, ``description`` ([run]), ``lattice`` and ``terms`` in words, ``hamiltonian`` (one line),
    ``beta_rule`` (e.g. ``beta = 2*L``), ``couplings`` (scan name -> what it multiplies), ``scan``
    (name -> values as written)."""

    name: str = ""
    description: str = ""
    lattice: str = "lattice unknown"
    terms: tuple[str, ...] = ()
    hamiltonian: str = "H unknown"
    beta_rule: str = "beta unknown"
    couplings: dict[str, str] = field(default_factory=dict)
    scan: dict[str, str] = field(default_factory=dict)

    def title(self) -> str:
        """One line for a plot title: Hamiltonian, lattice and beta rule."""
        return f"{self.hamiltonian};  {self.lattice};  {self.beta_rule}"


def _number(v: Any) -> str:
    return f"{v:g}" if isinstance(v, float) else str(v)


def scan_value_text(v: Any) -> str:
    """A [scan] value as written: ``8``, ``[4, 8, 16]``, ``2*L``, ``11 values from 2.4 to 2.6``."""
    if isinstance(v, list):
        return "[" + ", ".join(_number(x) for x in v) + "]"
    if isinstance(v, dict):
        start, stop = _number(v.get("start", "?")), _number(v.get("stop", "?"))
        return f"{v.get('num', '?')} values from {start} to {stop}"
    return _number(v)


def _lattice(t: dict) -> str:
    kind = t.get("kind", "?")
    if kind == "explicit":
        return f"explicit bond list on {t.get('sites', '?')} sites"
    size = t.get("size", "?")
    size_text = " x ".join(_number(s) for s in size) if isinstance(size, list) else _number(size)
    return f"{kind} lattice of {size_text} unit cells, {t.get('boundary', 'periodic')} boundaries"


def _shape(term: dict) -> str:
    shape = term.get("shape", "?")
    text = shape if isinstance(shape, str) else f"shape {shape}"
    return text + (" (both orientations)" if term.get("symmetrize", True) else "")


_FACTORS = {"plaquette-pair": 2, "column-of-three": 3}


def _term(term: dict) -> tuple[str, str, str]:
    """(words, signed formula piece, what the coupling multiplies)."""
    c = _number(term.get("coupling", "?"))
    if term.get("type") == "heisenberg":
        bonds = term.get("bonds", "?")
        return (f"+{c} S_i.S_j on the {bonds} bonds", f"+ {c} sum_{bonds} S_i.S_j",
                f"Heisenberg coupling on the {bonds} bonds")
    shape = term.get("shape", "?")
    k = _FACTORS.get(shape, len(shape) if isinstance(shape, list) else 1)
    name = shape if isinstance(shape, str) else "shape"
    words = _shape(term)
    return (f"-{c} prod P_ij over the {words}, P_ij = 1/4 - S_i.S_j", f"- {c} sum_{name} {'P' * k}",
            f"projector-product coupling, {words}")


def run_text(config_text: str) -> RunText:
    """The :class:`RunText` of a configuration's TOML text (see the module docstring)."""
    try:
        data = tomllib.loads(config_text or "")
    except tomllib.TOMLDecodeError:
        return RunText(description="the configuration text could not be read")
    run = data.get("run", {}) if isinstance(data.get("run"), dict) else {}
    terms = [t for t in data.get("terms", []) if isinstance(t, dict)]
    scan = data.get("scan", {}) if isinstance(data.get("scan"), dict) else {}
    words, pieces, couplings = [], [], {}
    for term in terms:
        w, piece, where = _term(term)
        words.append(w)
        pieces.append(piece)
        c = term.get("coupling")
        if isinstance(c, str) and c in scan:
            couplings[c] = where
    hamiltonian = "H = " + " ".join(pieces).removeprefix("+ ") if pieces else "H unknown"
    beta = scan.get("beta")
    if isinstance(beta, list):
        beta_rule = "beta in " + scan_value_text(beta)
    elif beta is not None:
        beta_rule = "beta = " + scan_value_text(beta)
    else:
        beta_rule = "beta unknown"
    return RunText(
        name=str(run.get("name", "")), description=str(run.get("description", "")),
        lattice=_lattice(data.get("lattice", {}) if isinstance(data.get("lattice"), dict) else {}),
        terms=tuple(words), hamiltonian=hamiltonian, beta_rule=beta_rule, couplings=couplings,
        scan={k: scan_value_text(v) for k, v in scan.items()},
    )
