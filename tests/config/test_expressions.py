"""The safe value parser of the configuration (qmc.config.expressions): accepted forms, values, rejections.

Expected values are plain arithmetic (Python number semantics, checked by hand).
"""

import builtins

import pytest

from qmc.config.expressions import format_number, parse_expression
from qmc.errors import UserError


@pytest.mark.parametrize("text, values, expected", [
    ("8", {}, 8),
    ("2.5", {}, 2.5),
    (".5", {}, 0.5),
    ("1e-3", {}, 1e-3),
    ("2.5E+2", {}, 250.0),
    ("L", {"L": 12}, 12),
    ("2*L", {"L": 12}, 24),
    ("L*2", {"L": 12}, 24),
    (" 2 * L ", {"L": 12}, 24),
    ("L/2", {"L": 12}, 6),
    ("L/8", {"L": 12}, 1.5),
    ("0.5*g", {"g": 3.0}, 1.5),
    ("0.5*g/L", {"g": 3.0, "L": 4}, 0.375),
    ("-g", {"g": 2.0}, -2.0),
    ("+g", {"g": 2.0}, 2.0),
    ("J_2", {"J_2": 0.25}, 0.25),
    ("L*L", {"L": 3}, 9),
])
def test_values(text, values, expected):
    e = parse_expression(text)
    result = e.evaluate(values)
    assert result == expected
    assert type(result) is type(expected)


def test_exact_integer_division_stays_integer():
    assert parse_expression("L/2").evaluate({"L": 8}) == 4
    assert isinstance(parse_expression("L/2").evaluate({"L": 8}), int)
    assert parse_expression("L/2").evaluate({"L": 9}) == 4.5


def test_numbers_from_toml():
    assert parse_expression(3).evaluate({}) == 3
    assert parse_expression(2.5).is_constant
    assert parse_expression(2.5).names == ()


def test_names_in_order_of_appearance_without_repeats():
    e = parse_expression("g*L/g*beta")
    assert e.names == ("g", "L", "beta")
    assert not e.is_constant


def test_canonical_form():
    assert parse_expression(" 2 * L ").canonical == "2*L"
    assert parse_expression("2.0*L").canonical == "2*L"
    assert parse_expression("-0.5*g").canonical == "-0.5*g"
    assert parse_expression(1.0).canonical == parse_expression(1).canonical == "1"


@pytest.mark.parametrize("bad", [
    "__import__('os')", "1+", "1+2", "2**L", "L//2", "(L)", "L L", "", "   ", "1e", "L/", "*L", "L*",
    "os.system", "L;", "a[0]", "lambda: 1", "1.5.2", "2*-L", "_L", "L^2", "L-1", "--L", "é",
    "x" * 201,
])
def test_rejected_texts(bad):
    with pytest.raises(UserError) as info:
        parse_expression(bad, "f.toml: scan.beta")
    err = info.value
    assert err.where == "f.toml: scan.beta"
    assert str(err).startswith("f.toml: scan.beta: ")
    if len(bad) <= 200:
        assert repr(bad) in err.message  # the message quotes the offending text


@pytest.mark.parametrize("bad", [True, False, None, [1], {"a": 1}, float("inf"), float("nan"), "1e999"])
def test_rejected_values(bad):
    with pytest.raises(UserError):
        parse_expression(bad, "here")


def test_unknown_name_at_evaluation_with_hint():
    e = parse_expression("2*Lx")
    with pytest.raises(UserError) as info:
        e.evaluate({"L": 4, "g": 1.0}, "c.toml: scan.beta")
    msg = str(info.value)
    assert "c.toml: scan.beta" in msg and "'Lx'" in msg and "not a scan name" in msg
    assert "did you mean 'L'" in msg


def test_division_by_zero():
    with pytest.raises(UserError, match="divides by zero"):
        parse_expression("g/L").evaluate({"g": 1.0, "L": 0})


def test_overflow_is_a_user_error():
    with pytest.raises(UserError, match="not a finite number"):
        parse_expression("1e300*1e300").evaluate({})
    with pytest.raises(UserError, match="not a finite number"):
        parse_expression("g*g").evaluate({"g": 1e200})


def test_never_uses_eval(monkeypatch):
    def forbidden(*args, **kwargs):
        raise AssertionError("eval/exec must not be used")

    monkeypatch.setattr(builtins, "eval", forbidden)
    monkeypatch.setattr(builtins, "exec", forbidden)
    assert parse_expression("0.5*g/L").evaluate({"g": 2.0, "L": 2}) == 0.5


@pytest.mark.parametrize("x, text", [
    (8, "8"), (2.45, "2.45"), (0.1 + 0.2, "0.3"), (-0.0, "0"), (0.0, "0"), (1e-5, "1e-05"),
    (2.4200000000000004, "2.42"), (-1.5, "-1.5"), (3.0, "3"),
])
def test_format_number(x, text):
    assert format_number(x) == text
