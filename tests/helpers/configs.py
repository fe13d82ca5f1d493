"""Configuration files for small test runs, built from keyword arguments instead of copied TOML text.

``config_text(seed=5, scan={"L": [4, 6], "J": [0.5, 1.0], "beta": 1.0}, warmup_steps=50,
measure_steps=1000, bins=20)`` gives the text of a square-lattice run (``[run]``, ``[lattice]``,
``[[terms]]``, ``[scan]``, ``[sampling]`` and, if asked, ``[exchange]``); keys are written in the order
given, values as TOML (a Python ``str`` becomes a quoted string, i.e. an expression such as ``"L/4"``).
``write_config(directory, name, ...)`` writes it; the ``make_config`` fixture of tests/conftest.py does
the same in the test's ``tmp_path``.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

__all__ = ["HEISENBERG_NN", "JQ2_TERMS", "config_text", "heisenberg_nn", "plaquette_pairs", "toml_value",
           "write_config"]


def heisenberg_nn(coupling: Any = 1.0) -> dict[str, Any]:
    """The nearest-neighbour Heisenberg term with the given coupling (a number or an expression)."""
    return {"type": "heisenberg", "bonds": "nn", "coupling": coupling}


def plaquette_pairs(coupling: Any = "Q") -> dict[str, Any]:
    """The product of two singlet projectors on the plaquette pairs with the given coupling (the Q2 term)."""
    return {"type": "projector-product", "shape": "plaquette-pair", "coupling": coupling}


HEISENBERG_NN = (heisenberg_nn(1.0),)
# J = 1 on nearest neighbours and Q (the scanned parameter) on plaquette pairs: the J-Q2 model.
JQ2_TERMS = (heisenberg_nn(1.0), plaquette_pairs("Q"))


def toml_value(value: Any) -> str:
    """``value`` written as a TOML value: numbers, booleans, quoted strings, arrays and inline tables."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, Mapping):
        return "{" + ", ".join(f"{k} = {toml_value(v)}" for k, v in value.items()) + "}"
    if isinstance(value, Sequence):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    raise TypeError(f"no TOML form for {value!r}")


def _table(header: str, entries: Mapping[str, Any]) -> str:
    return "\n".join([header] + [f"{k} = {toml_value(v)}" for k, v in entries.items() if v is not None])


def config_text(*, seed: int = 1, output: str | None = "run", run_name: str | None = None,
                lattice: str = "square", size: Any = ("L", "L"),
                terms: Sequence[Mapping[str, Any]] = HEISENBERG_NN,
                scan: Mapping[str, Any] | None = None, exchange: Mapping[str, Any] | None = None,
                **sampling: Any) -> str:
    """The TOML text of one configuration; ``sampling`` holds the ``[sampling]`` keys in their order."""
    parts = [_table("[run]", {"name": run_name, "seed": seed, "output": output}),
             _table("[lattice]", {"kind": lattice, "size": size})]
    parts += [_table("[[terms]]", term) for term in terms]
    parts.append(_table("[scan]", dict(scan or {})))
    parts.append(_table("[sampling]", sampling))
    if exchange:
        parts.append(_table("[exchange]", exchange))
    return "\n".join(parts) + "\n"


def write_config(directory: Path, name: str = "config.toml", **kw: Any) -> Path:
    """Writes :func:`config_text` (``kw``) to ``directory / name`` and returns the path."""
    path = Path(directory) / name
    path.write_text(config_text(**kw))
    return path
