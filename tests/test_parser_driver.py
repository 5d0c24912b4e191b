"""The lean LALR driver (rexpr/language/lalr.py) against lark's own parser of the same grammar.

Oracle: lark's LALR parser and contextual lexer, run over grammar.lark with the same node
builder (``parse_with_lark``). The driver is only a faster way to run lark's tables, so on
every text both must give the same syntax tree (spans included) or the same error (class,
code, message, span, hint).
"""

from __future__ import annotations

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rexpr.differential.generator import typed_expressions
from rexpr.errors import RexprError
from rexpr.language.parser import parse, parse_with_lark
from rexpr.printing import to_text
from rexpr.schema import Schema

SCHEMA = Schema.from_mapping({"i": "int64", "x": "float64", "s": "string", "b": "bool", "d": "date",
                              "ts": "timestamp", "unit price": "float64", "ship": {"port": "string"}})


def _outcome(parser, text: str) -> object:
    try:
        return ("tree", parser(text))
    except RexprError as exc:
        return ("error", type(exc).__name__, exc.to_dict(), str(exc))


def _agree(text: str) -> None:
    assert _outcome(parse, text) == _outcome(parse_with_lark, text), text


# Keywords where the contextual lexer lets them be names, every construct of the grammar, the
# two spellings of '-', numbers on both sides of INT/FLOAT, and errors raised while building.
@pytest.mark.parametrize("text", [
    "and = 1", "end + 1", "a and and", "a + from", "escape", "x like y escape escape", "as",
    "cast(as as int64)", "case when when then 1 end", "not not", "nota", "NOT a", "a - -1", "a--1",
    "1e5", "1.e5", "1.5.5", ".5e-3", "5.", "0007", "1 .5", "date '2024-01-01'", "DATE", "interval 'x'",
    "timestamp '2024-05-01 10:00:00.5'", "date '2024-02-30'", "a not in (1, 2)", "a in ()", "a in (1,)",
    "x is not distinct from y", "x is distinct from null", "a is not null", "a is null is null",
    "case a when 1 then 2 else 3 end", "case when a then b end", "case end", "f()", "f(,)", "f(1, 2, 3)",
    "ship.port.x", '"a b".c', '"say ""hi"""', "cast(a as double precision)", "cast(a as)", "cast(a)",
    "s like 'a' escape 'b'", "s not like 'a%'", "a not between 1 and 2", "a between 1 and 2 and b",
    "a or b or c and d", "a || b || c", "- - - 1", "-9223372036854775808", "9" * 30, "'it''s'",
    "'unterminated", '"unterminated', "a = = 1", "(a", "a)", "a 'x'", "$", "", " ", "a\n+\tb",
    "1 + 2 * 3 - 4 / 5 % 6", "a <> b != c", "((((1))))", "abs(abs(abs(1)))", "a.", ".a", "a..b",
    "(" * 250 + "1" + ")" * 250, "-" * 250 + "1", "not " * 250 + "true", "(" * 300,
])
def test_driver_agrees_on_chosen_texts(text):
    _agree(text)


_PIECES = ("(", ")", ",", ".", "+", "-", "*", "/", "%", "||", "=", "<>", "!=", "<", "<=", ">", ">=",
           "and", "or", "not", "is", "null", "in", "between", "like", "escape", "distinct", "from",
           "true", "false", "cast", "as", "case", "when", "then", "else", "end", "AND", "Case", "int64",
           "date", "timestamp", "i", "x", "s", "ship", "port", '"unit price"', '""', "'", "''", "'a'",
           "date '2024-05-01'", "0", "1", "1e5", ".5", "5.", "9223372036854775808", "trim", "coalesce")
_CHARS = st.sampled_from("()'\",.+-*/%|=<>!_ \t\nabcdeinstx019eE") | st.characters(codec="utf-8")
_SETTINGS = settings(max_examples=300, deadline=None, derandomize=True,
                     suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])


@_SETTINGS
@given(st.lists(st.sampled_from(_PIECES), max_size=20), st.sampled_from([" ", ""]))
def test_driver_agrees_on_token_soup(pieces, glue):
    _agree(glue.join(pieces))


@_SETTINGS
@given(st.text(_CHARS, max_size=40))
def test_driver_agrees_on_random_text(text):
    _agree(text)


@_SETTINGS
@given(typed_expressions(SCHEMA, max_depth=4))
def test_driver_agrees_on_generated_expressions(tree):
    text = to_text(tree)
    assert _outcome(parse, text)[0] == "tree"
    _agree(text)
