"""Identifiers and string literals that no input can break out of, per dialect.

sqlglot prints a quoted identifier with the dialect's quote character doubled inside it, and a
string literal with the dialect's own escaping (a quote doubled; for MySQL/MariaDB, whose
default sql_mode reads backslash as an escape, backslashes escaped too). What sqlglot cannot
fix is a character the SQL text itself cannot carry: SQLite's and DuckDB's drivers stop at NUL
(U+0000), so a NUL becomes a call of the engine's character function, joined with the other
pieces. Every value is checked to print as exactly one literal (or one such join) of itself.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import sqlglot
from sqlglot import exp

from rexpr.errors import NotPushable

# Characters the SQL text cannot carry on any engine here (common practice, no source: C
# string APIs end at NUL).
UNSAYABLE = frozenset("\x00")


@dataclass(frozen=True)
class Quoting:
    """Per-dialect facts about spelling names and text in SQL."""

    dialect: str                                   # sqlglot dialect that prints the literal
    char_function: str | None = None               # code point -> one-character string; None: refuse NUL
    join: Literal["pipes", "concat"] = "pipes"     # how literal pieces are joined: a || b, or concat(a, b)
    backslash_escapes: bool = False                # the engine reads backslash in literals as an escape


def identifier(name: str) -> exp.Identifier:
    """A column name, always quoted (reserved words, spaces, dots and quotes stay part of it)."""
    if any(ch in UNSAYABLE for ch in name):
        raise NotPushable(f"a column name containing U+0000 cannot be written in SQL: {name!r}")
    return exp.Identifier(this=name, quoted=True)


def column(name: str) -> exp.Column:
    return exp.Column(this=identifier(name))


def _checked(text: str, quoting: Quoting) -> exp.Literal:
    """A string literal that reads back, in its dialect, as exactly ``text``."""
    literal = exp.Literal.string(text)
    printed = literal.sql(dialect=quoting.dialect)
    try:
        back = sqlglot.parse_one(printed, read=quoting.dialect)
    except sqlglot.errors.ParseError:
        back = None
    if not (isinstance(back, exp.Literal) and back.is_string and back.this == text):
        raise NotPushable(f"{quoting.dialect}: the string {text[:40]!r} does not print as a literal of itself")
    return literal


def string_literal(text: str, quoting: Quoting) -> exp.Expression:
    """``text`` as a literal; NUL characters become ``char_function(0)`` joined to the rest."""
    if not any(ch in UNSAYABLE for ch in text):
        return _checked(text, quoting)
    if quoting.char_function is None:
        raise NotPushable(f"{quoting.dialect} text cannot contain U+0000 (NUL)")
    pieces: list[exp.Expression] = []
    current: list[str] = []
    for ch in text:
        if ch in UNSAYABLE:
            if current:
                pieces.append(_checked("".join(current), quoting))
                current = []
            pieces.append(exp.Anonymous(this=quoting.char_function, expressions=[exp.Literal.number(ord(ch))]))
        else:
            current.append(ch)
    if current:
        pieces.append(_checked("".join(current), quoting))
    if len(pieces) == 1:
        return pieces[0]
    if quoting.join == "concat":
        return exp.Anonymous(this="concat", expressions=pieces)
    out = pieces[0]
    for piece in pieces[1:]:
        out = exp.DPipe(this=out, expression=piece, safe=False)
    return exp.Paren(this=out)
