"""Typed reading of TOML values with located errors: every problem names the file and the key.

:class:`TableReader` holds the file ``path``, its ``text`` and the parsed TOML ``data``; its methods
check one value each (a table, an integer, a number, a text, a choice, an expression) and raise
:class:`~qmc.errors.UserError` with ``where = "<file>: <key>"``.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

from qmc.config.expressions import Expression, Number, parse_expression
from qmc.config.schema import HOME, RENAMED_KEYS
from qmc.errors import UserError, describe_value, did_you_mean

__all__ = ["TableReader"]


class TableReader:
    """Reads the values of one configuration file; see the module docstring."""

    def __init__(self, path: Path, text: str, data: dict[str, Any]) -> None:
        self.path, self.text, self.data = path, text, data

    def where(self, key: str) -> str:
        return f"{self.path}: {key}"

    def fail(self, key: str, message: str) -> UserError:
        return UserError(message, self.where(key))

    def table(self, key: str, required: bool = True) -> dict[str, Any]:
        """The section ``[key]`` (``{}`` when optional and absent)."""
        value = self.data.get(key)
        if value is None:
            if required:
                raise self.fail(key, f"missing section [{key}]")
            return {}
        if not isinstance(value, dict):
            raise self.fail(key, f"[{key}] must be a section (a table), got {describe_value(value)}")
        return value

    def check_keys(self, key: str, table: dict, allowed: dict[str, str], required: tuple[str, ...],
                   label: str) -> None:
        """Refuse unknown keys of ``table`` (with a hint: a close spelling, the key's section, or the new
        name of a renamed key) and report the first missing required key with its meaning."""
        for k in table:
            if (key, k) in RENAMED_KEYS:
                raise self.fail(f"{key}.{k}", f"'{k}' in {label} was renamed: use {RENAMED_KEYS[key, k]} "
                                              "instead")
            if k not in allowed:
                hint = did_you_mean(k, allowed)
                if not hint and k in HOME and HOME[k] != label:
                    hint = f" ('{k}' belongs in {HOME[k]})"
                raise self.fail(f"{key}.{k}", f"unknown key '{k}' in {label}{hint}; "
                                              f"allowed keys: {', '.join(allowed)}")
        for k in required:
            if k not in table:
                raise self.fail(f"{key}.{k}", f"missing required key '{k}' in {label} ({allowed[k]})")

    def integer(self, key: str, value: Any, minimum: int | None = None) -> int:
        if isinstance(value, float) and value.is_integer():
            value = int(value)
        if isinstance(value, bool) or not isinstance(value, int):
            raise self.fail(key, f"must be an integer, got {describe_value(value)}")
        if minimum is not None and value < minimum:
            raise self.fail(key, f"must be at least {minimum}, got {value}")
        return value

    def number(self, key: str, value: Any) -> Number:
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.fail(key, f"must be a number, got {describe_value(value)}")
        if not math.isfinite(value):
            raise self.fail(key, f"must be a finite number, got {value}")
        return value

    def string(self, key: str, value: Any) -> str:
        if not isinstance(value, str):
            raise self.fail(key, f"must be a text in quotes, got {describe_value(value)}")
        return value

    def choice(self, key: str, value: Any, choices: tuple[str, ...], what: str) -> str:
        value = self.string(key, value)
        if value not in choices:
            raise self.fail(key, f"unknown {what} {value!r}{did_you_mean(value, choices)}; "
                                 f"choose one of: {', '.join(choices)}")
        return value

    def expression(self, key: str, value: Any) -> Expression:
        return parse_expression(value, self.where(key))
