"""Typed tree: what the checker produces and every backend consumes.

Three node kinds only. Every operator, predicate, cast and case is a ``TCall`` to a
catalogue function, so a backend is a dispatch table keyed by function id.

Argument conventions for the special forms:
- ``cast``: ``(operand,)``; the target is the node's own type.
- ``case``: ``(cond1, value1, ..., condN, valueN, default)``; the checker supplies a typed null
  default when the text has no ``else``.
- ``in``: ``(operand, item1, ...)``; ``between``: ``(operand, low, high)``;
  ``like``: ``(operand, pattern[, escape])``. Negated forms are wrapped in ``not``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterator, Union

from rexpr.errors import Span
from rexpr.types import DataType


@dataclass(frozen=True)
class TLiteral:
    value: object
    type: DataType
    span: Span


@dataclass(frozen=True)
class TField:
    path: tuple[str, ...]
    type: DataType
    span: Span

    @property
    def dotted(self) -> str:
        return ".".join(self.path)


@dataclass(frozen=True)
class TCall:
    function: str
    args: tuple["Typed", ...]
    type: DataType
    span: Span


Typed = Union[TLiteral, TField, TCall]


def walk(node: Typed) -> Iterator[Typed]:
    """Every node, parents before children (iterative; trees are bounded in depth anyway)."""
    stack = [node]
    while stack:
        current = stack.pop()
        yield current
        if isinstance(current, TCall):
            stack.extend(reversed(current.args))


def fields_read(node: Typed) -> tuple[tuple[str, ...], ...]:
    """Distinct field paths the expression reads, in first-use order."""
    seen: dict[tuple[str, ...], None] = {}
    for item in walk(node):
        if isinstance(item, TField):
            seen.setdefault(item.path, None)
    return tuple(seen)


def functions_used(node: Typed) -> tuple[str, ...]:
    seen: dict[str, None] = {}
    for item in walk(node):
        if isinstance(item, TCall):
            seen.setdefault(item.function, None)
    return tuple(seen)


def to_json(node: Typed) -> dict:
    """A JSON-ready description of the typed tree."""
    base = {"type": node.type.name, "nullable": node.type.nullable,
            "span": [node.span.start, node.span.end]}
    if isinstance(node, TLiteral):
        from rexpr.values import to_json_value

        return {"node": "literal", "value": to_json_value(node.value), **base}
    if isinstance(node, TField):
        return {"node": "field", "path": list(node.path), **base}
    return {"node": "call", "function": node.function, "args": [to_json(a) for a in node.args], **base}
