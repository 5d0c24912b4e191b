"""Parser and checker: precedence, literals, spans, limits and the typed errors users see."""

from __future__ import annotations

import datetime as dt
import time

import pyarrow as pa
import pytest

import rexpr
from rexpr.errors import LimitExceeded, SyntaxProblem, TypeProblem
from rexpr.printing import to_text
from rexpr.schema import Schema
from rexpr.typed import to_json

SCHEMA = Schema.from_mapping({"a": "int64", "b": "int64", "x": "float64", "s": "string", "flag": "bool",
                              "d": "date", "ship": {"port": "string", "berth": "int64 not null"},
                              "unit price": "float64"})


def typed(text: str):
    return rexpr.compile(text, SCHEMA).tree


def value(text: str):
    table = pa.table({"_row": [0]})
    return rexpr.compile(text, {}).evaluate(table, backend="reference").to_pylist()[0]


@pytest.mark.parametrize("text, expected", [
    # SQL precedence, ISO/IEC 9075-2 6.27 (multiplicative binds tighter than additive).
    ("1 + 2 * 3", 7),
    ("(1 + 2) * 3", 9),
    ("10 - 4 - 3", 3),          # left-associative (common practice, no source)
    ("- 2 * 3", -6),
    ("7 % 4 * 2", 6),
    ("'a' || 'b' = 'ab'", True),  # || binds tighter than comparison
    ("not 1 = 2", True),        # NOT binds looser than comparison (ISO/IEC 9075-2 6.39)
    ("true or false and false", True),  # AND binds tighter than OR
    ("1 between 0 and 2 and 3 = 3", True),
    ("NULL IS NULL", True),     # keywords are case-insensitive
    ("1.5e1", 15.0),
    (".5", 0.5),
    ("'it''s'", "it's"),
])
def test_precedence_and_literals(text, expected):
    assert value(text) == expected


def test_typed_literals_and_fields():
    assert value("date '2024-05-01'") == dt.date(2024, 5, 1)
    assert value("timestamp '2024-05-01 10:00:00'") == dt.datetime(2024, 5, 1, 10)
    tree = typed('"unit price" * 2 > 1 and ship.port = \'Oslo\'')
    assert rexpr.compile('"unit price" * 2 > 1 and ship.port = \'Oslo\'', SCHEMA).fields == ("unit price", "ship.port")
    assert tree.type.kind is rexpr.Kind.BOOL


def test_quoted_name_escaping():
    schema = Schema.from_mapping({'say "hi"': "int64"})
    assert rexpr.compile('"say ""hi""" + 1', schema).fields == ('say "hi"',)


def test_int64_literal_bounds():
    # Two's-complement int64 bounds (common practice, no source).
    assert value("-9223372036854775808") == -(2**63)
    with pytest.raises(TypeProblem) as info:
        rexpr.compile("9223372036854775808", {})
    assert info.value.code == "invalid_literal"


def test_widening_is_explicit_and_nullability_inferred():
    tree = typed("a + x")
    assert tree.function == "add" and tree.args[0].function == "cast"
    assert typed("ship.berth").type.nullable  # a nullable struct makes its fields nullable
    assert not typed("a is null").type.nullable
    assert not typed("concat(s, s)").type.nullable
    assert typed("coalesce(a, 1)").type.nullable is False


@pytest.mark.parametrize("text, code, hint_part", [
    ("aa + 1", "unknown_field", "'a'"),
    ("ship.prot = 'x'", "unknown_field", "'port'"),
    ("trimm(s)", "unknown_function", "'trim'"),
    ("s + 1", "type_mismatch", "cast"),
    ("a = s", "type_mismatch", "cast"),
    ("substring(s)", "wrong_arity", None),
    ("cast(d as int64)", "type_mismatch", None),
    ("cast(a as decimal)", "unknown_type", None),
    ("ship = 1", "type_mismatch", "ship.port"),
    ("case when a then 1 end", "type_mismatch", None),
])
def test_type_errors(text, code, hint_part):
    with pytest.raises(TypeProblem) as info:
        rexpr.compile(text, SCHEMA)
    assert info.value.code == code
    if hint_part:
        assert hint_part in (info.value.hint or "")
    assert "^" in info.value.render()


@pytest.mark.parametrize("text, column", [("a +", 4), ("a = = 1", 5), ("(a", 3), ("a 'x'", 1), ("$", 1)])
def test_syntax_errors_have_position(text, column):
    with pytest.raises(SyntaxProblem) as info:
        rexpr.compile(text, SCHEMA)
    assert info.value.to_dict()["span"]["column"] == column
    assert "^" in info.value.render()


def test_deep_nesting_is_refused_quickly():
    text = "(" * 30000 + "1" + ")" * 30000
    start = time.perf_counter()
    with pytest.raises(LimitExceeded) as info:
        rexpr.compile(text, {})
    assert info.value.code == "too_deep"
    with pytest.raises(LimitExceeded) as info:
        rexpr.compile("(" * 100000 + "1" + ")" * 100000, {})
    assert time.perf_counter() - start < 5  # generous: the point is "no recursion blow-up"


def test_long_and_chains_are_flat():
    text = " or ".join(f"a = {i}" for i in range(2000))
    assert rexpr.compile(text, SCHEMA).tree.function == "or"


@pytest.mark.parametrize("text", [
    "a + b * 2 - 3 > x or not flag and s like 'a%' escape '!'",
    "case when a > 1 then 'x' when a is null then null else s end = 'x'",
    "- (-a) + -3 = 0", "a not in (1, 2, null)", "x not between -1.5 and 2e10",
    "s || 'it''s' is not distinct from 'x'", '"unit price" / 2 >= 1',
    "cast(a as string) = '1' and cast('NaN' as float64) <> x",
])
def test_printing_round_trips(text):
    tree = typed(text)
    assert _shape(typed(to_text(tree))) == _shape(tree)


def _shape(node):
    """The typed tree as JSON without spans, so trees from different texts compare."""
    data = to_json(node)

    def strip(item):
        item.pop("span", None)
        for arg in item.get("args", []):
            strip(arg)
        return item

    return strip(data)
