"""Syntax tree: immutable nodes, each with the source span it was parsed from.

Operators are kept as written (``op``) so the tree can be printed back; the checker maps
each to a catalogue function.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Union

from rexpr.errors import Span


@dataclass(frozen=True)
class Literal:
    """``kind`` is one of int, float, string, bool, null, date, timestamp."""

    kind: str
    value: object
    span: Span
    text: str  # the literal as written, for messages and printing


@dataclass(frozen=True)
class FieldRef:
    path: tuple[str, ...]
    span: Span


@dataclass(frozen=True)
class Call:
    name: str  # as written; resolved case-insensitively
    args: tuple["Node", ...]
    span: Span
    name_span: Span


@dataclass(frozen=True)
class Unary:
    op: str  # "-" or "not"
    operand: "Node"
    span: Span


@dataclass(frozen=True)
class Binary:
    op: str  # "+ - * / % || = <> != < <= > >="
    left: "Node"
    right: "Node"
    span: Span
    op_span: Span


@dataclass(frozen=True)
class Chain:
    """``a and b and c`` / ``a or b or c`` kept flat so long chains stay shallow."""

    op: str  # "and" | "or"
    items: tuple["Node", ...]
    span: Span


@dataclass(frozen=True)
class IsNull:
    operand: "Node"
    negated: bool
    span: Span


@dataclass(frozen=True)
class IsDistinct:
    left: "Node"
    right: "Node"
    negated: bool
    span: Span


@dataclass(frozen=True)
class InList:
    operand: "Node"
    items: tuple["Node", ...]
    negated: bool
    span: Span


@dataclass(frozen=True)
class Between:
    operand: "Node"
    low: "Node"
    high: "Node"
    negated: bool
    span: Span


@dataclass(frozen=True)
class Like:
    operand: "Node"
    pattern: "Node"
    escape: "Node | None"
    negated: bool
    span: Span


@dataclass(frozen=True)
class Cast:
    operand: "Node"
    type_name: str
    span: Span
    type_span: Span


@dataclass(frozen=True)
class Case:
    """Searched form; a simple ``case x when v`` is parsed into ``subject`` plus whens."""

    subject: "Node | None"
    whens: tuple[tuple["Node", "Node"], ...]
    default: "Node | None"
    span: Span


@dataclass(frozen=True)
class Parens:
    inner: "Node"
    span: Span


Node = Union[Literal, FieldRef, Call, Unary, Binary, Chain, IsNull, IsDistinct, InList, Between,
             Like, Cast, Case, Parens]
