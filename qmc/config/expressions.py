"""A tiny, safe parser for numeric values in a run configuration (never ``eval``).

Accepted forms (whitespace is ignored)::

    value   := [sign] factor (op factor)*        sign := "+" | "-"      op := "*" | "/"
    factor  := number | name
    number  := 12 | 2.5 | .5 | 1e-3 | 2.5E+2
    name    := a letter followed by letters, digits or "_"   (a scan parameter, e.g. L, g, J_2)

so ``8``, ``g``, ``2*L``, ``L*2``, ``L/2``, ``0.5*g/L`` and ``-g`` are values, while ``1+``, ``2**L``,
``(L)``, ``__import__('os')`` and ``L L`` are rejected with a :class:`~qmc.errors.UserError` that quotes
the text.  Products are evaluated left to right with Python number semantics, except that a division of
two integers that divides evenly stays an integer (``L/2`` with ``L = 8`` is the integer 4).
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass

from qmc.errors import UserError, describe_value, did_you_mean

__all__ = ["Expression", "parse_expression", "format_number"]

Number = int | float

_NUMBER = re.compile(r"(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")
_NAME = re.compile(r"[A-Za-z][A-Za-z0-9_]*")
_MAX_LENGTH = 200
_FORMS = "a value must be a number, a scan name, or a product such as 2*L, L*2 or L/2"


def format_number(x: Number) -> str:
    """Shortest readable form of a number: integers as such, floats with 12 significant digits."""
    if isinstance(x, bool):
        raise TypeError("booleans are not numbers here")
    if isinstance(x, int):
        return str(x)
    if x == 0:
        return "0"
    return format(x, ".12g")


@dataclass(frozen=True)
class Expression:
    """A parsed value: ``sign * f0 op1 f1 op2 f2 ...`` with factors that are numbers or scan names."""

    text: str
    sign: int
    factors: tuple[Number | str, ...]
    ops: tuple[str, ...]

    @property
    def names(self) -> tuple[str, ...]:
        """Scan names the value needs, in order of first appearance."""
        seen: dict[str, None] = {}
        for f in self.factors:
            if isinstance(f, str):
                seen.setdefault(f, None)
        return tuple(seen)

    @property
    def is_constant(self) -> bool:
        return not self.names

    @property
    def canonical(self) -> str:
        """Normalised text: no spaces, exact numbers without a trailing ".0", e.g. ``"2*L"``, ``"0.5*g"``."""
        parts = ["-" if self.sign < 0 else ""]
        for i, f in enumerate(self.factors):
            if i:
                parts.append(self.ops[i - 1])
            parts.append(f if isinstance(f, str) else _exact(f))
        return "".join(parts)

    def unknown_name_message(self, name: str) -> str:
        """``"'h' is not a scan name"`` or ``"'2*h' uses 'h', which is not a scan name"``."""
        if self.text.strip() == name:
            return f"'{name}' is not a scan name"
        return f"{self.text!r} uses '{name}', which is not a scan name"

    def evaluate(self, values: Mapping[str, Number], where: str = "") -> Number:
        """Value for the given scan values; a missing name or a division by zero raises UserError."""
        try:
            result = self._apply(values, where)
        except OverflowError:
            raise UserError(f"{self.text!r} is too large", where) from None
        if isinstance(result, float) and not math.isfinite(result):
            raise UserError(f"{self.text!r} is not a finite number", where)
        return result

    def _apply(self, values: Mapping[str, Number], where: str) -> Number:
        result = self._factor(self.factors[0], values, where)
        for op, f in zip(self.ops, self.factors[1:], strict=True):
            x = self._factor(f, values, where)
            if op == "*":
                result = result * x
            elif x == 0:
                context = ", ".join(f"{n}={format_number(values[n])}" for n in self.names)
                raise UserError(f"{self.text!r} divides by zero" + (f" (with {context})" if context else ""),
                                where)
            elif isinstance(result, int) and isinstance(x, int) and result % x == 0:
                result = result // x
            else:
                result = result / x
        return -result if self.sign < 0 else result

    def _factor(self, f: Number | str, values: Mapping[str, Number], where: str) -> Number:
        if not isinstance(f, str):
            return f
        if f not in values:
            raise UserError(self.unknown_name_message(f) + did_you_mean(f, values), where)
        return values[f]


def parse_expression(value: object, where: str = "") -> Expression:
    """Parse a configuration value (a TOML number or string) into an :class:`Expression`.

    ``where`` (e.g. ``"configs/x.toml: scan.beta"``) is attached to any :class:`UserError`.
    """
    if isinstance(value, bool) or not isinstance(value, int | float | str):
        raise UserError(f"expected a number or a text such as \"2*L\", got {describe_value(value)}", where)
    if isinstance(value, int | float):
        if isinstance(value, float) and not math.isfinite(value):
            raise UserError(f"{value!r} is not a finite number", where)
        return Expression(text=repr(value), sign=1, factors=(value,), ops=())
    text = value
    if len(text) > _MAX_LENGTH:
        raise UserError(f"value text is longer than {_MAX_LENGTH} characters; {_FORMS}", where)
    if not text.strip():
        raise UserError(f"empty value {text!r}; {_FORMS}", where)
    pos = _skip(text, 0)
    sign = 1
    if text[pos] in "+-":
        sign = -1 if text[pos] == "-" else 1
        pos = _skip(text, pos + 1)
    factors: list[Number | str] = []
    ops: list[str] = []
    while True:
        if pos >= len(text):
            after = f" after {text[:pos].strip()!r}" if text[:pos].strip() else ""
            raise UserError(f"cannot read {text!r}: a number or scan name is missing{after}; {_FORMS}", where)
        m = _NUMBER.match(text, pos)
        if m:
            literal = m.group()
            factors.append(int(literal) if literal.isdigit() else float(literal))
            if not math.isfinite(factors[-1]):
                raise UserError(f"cannot read {text!r}: {literal} is not a finite number", where)
        else:
            m = _NAME.match(text, pos)
            if not m:
                raise UserError(f"cannot read {text!r}: unexpected {text[pos]!r} at position {pos}; {_FORMS}",
                                where)
            factors.append(m.group())
        pos = _skip(text, m.end())
        if pos >= len(text):
            break
        if text[pos] not in "*/":
            raise UserError(f"cannot read {text!r}: expected '*' or '/' at position {pos}, "
                            f"found {text[pos]!r}; {_FORMS}", where)
        if text.startswith("**", pos) or text.startswith("//", pos):
            raise UserError(f"cannot read {text!r}: {text[pos:pos + 2]!r} at position {pos} is not "
                            f"supported; {_FORMS}", where)
        ops.append(text[pos])
        pos = _skip(text, pos + 1)
    return Expression(text=text, sign=sign, factors=tuple(factors), ops=tuple(ops))


def _exact(x: Number) -> str:
    if isinstance(x, float) and x.is_integer() and abs(x) < 2**53:
        return str(int(x))
    return repr(x)


def _skip(text: str, pos: int) -> int:
    while pos < len(text) and text[pos].isspace():
        pos += 1
    return pos

