"""The reference evaluator: pure Python, one row at a time, written to be obviously right.

It is the executable form of docs/semantics.md and the oracle every backend and engine is
compared with. Errors are :class:`~rexpr.values.RowError` values, never exceptions.
"""

from __future__ import annotations

import math
from typing import Callable, Mapping, Sequence

from rexpr.reference.casts import cast_value
from rexpr.reference.functions import PLAIN
from rexpr.typed import TCall, TField, TLiteral, Typed
from rexpr.values import RowError

Row = Mapping[tuple[str, ...], object]


def _first_error(values: Sequence[object]) -> RowError | None:
    for v in values:
        if isinstance(v, RowError):
            return v
    return None


def combine_and(values: Sequence[object]) -> object:
    if any(v is False for v in values):
        return False
    return _first_error(values) or (None if any(v is None for v in values) else True)


def combine_or(values: Sequence[object]) -> object:
    if any(v is True for v in values):
        return True
    return _first_error(values) or (None if any(v is None for v in values) else False)


def _same_value(a: object, b: object) -> bool:
    """Identity for ``is distinct from``: nulls and NaNs equal themselves."""
    if a is None or b is None:
        return a is None and b is None
    if isinstance(a, float) and isinstance(b, float) and math.isnan(a) and math.isnan(b):
        return True
    return a == b


class _Evaluator:
    def __init__(self, row: Row) -> None:
        self.row = row

    def eval(self, node: Typed) -> object:
        if isinstance(node, TLiteral):
            return node.value
        if isinstance(node, TField):
            return self.row[node.path]
        special = _SPECIAL.get(node.function)
        if special is not None:
            return special(self, node)
        args = [self.eval(a) for a in node.args]
        error = _first_error(args)
        if error is not None:
            return error
        if any(a is None for a in args):
            return None
        return PLAIN[node.function](*args)


def _and(ev: _Evaluator, node: TCall) -> object:
    return combine_and([ev.eval(a) for a in node.args])


def _or(ev: _Evaluator, node: TCall) -> object:
    return combine_or([ev.eval(a) for a in node.args])


def _in(ev: _Evaluator, node: TCall) -> object:
    operand = ev.eval(node.args[0])
    items = [ev.eval(a) for a in node.args[1:]]
    return combine_or([_eq(operand, item) for item in items])


def _eq(a: object, b: object) -> object:
    if isinstance(a, RowError):
        return a
    if isinstance(b, RowError):
        return b
    if a is None or b is None:
        return None
    return a == b


def _between(ev: _Evaluator, node: TCall) -> object:
    x, lo, hi = (ev.eval(a) for a in node.args)

    def cmp(a: object, b: object, op: Callable[[object, object], bool]) -> object:
        if isinstance(a, RowError):
            return a
        if isinstance(b, RowError):
            return b
        return None if a is None or b is None else op(a, b)

    return combine_and([cmp(x, lo, lambda a, b: a >= b), cmp(x, hi, lambda a, b: a <= b)])


def _case(ev: _Evaluator, node: TCall) -> object:
    args = node.args
    for i in range(0, len(args) - 1, 2):
        condition = ev.eval(args[i])
        if isinstance(condition, RowError):
            return condition
        if condition is True:
            return ev.eval(args[i + 1])
    return ev.eval(args[-1])


def _coalesce(ev: _Evaluator, node: TCall) -> object:
    for arg in node.args:
        value = ev.eval(arg)
        if value is not None:
            return value
    return None


def _nullif(ev: _Evaluator, node: TCall) -> object:
    a, b = ev.eval(node.args[0]), ev.eval(node.args[1])
    error = _first_error([a, b])
    if error is not None:
        return error
    if a is not None and b is not None and a == b:
        return None
    return a


def _is_null(ev: _Evaluator, node: TCall) -> object:
    value = ev.eval(node.args[0])
    return value if isinstance(value, RowError) else value is None


def _is_distinct(ev: _Evaluator, node: TCall) -> object:
    a, b = ev.eval(node.args[0]), ev.eval(node.args[1])
    return _first_error([a, b]) or not _same_value(a, b)


def _concat(ev: _Evaluator, node: TCall) -> object:
    values = [ev.eval(a) for a in node.args]
    return _first_error(values) or "".join(v for v in values if v is not None)  # type: ignore[misc]


def _cast(ev: _Evaluator, node: TCall) -> object:
    operand = node.args[0]
    return cast_value(ev.eval(operand), operand.type.kind, node.type.kind)


_SPECIAL: dict[str, Callable[[_Evaluator, TCall], object]] = {
    "and": _and, "or": _or, "in": _in, "between": _between, "case": _case, "coalesce": _coalesce,
    "nullif": _nullif, "is_null": _is_null, "is_distinct_from": _is_distinct, "concat": _concat,
    "cast": _cast,
}

IMPLEMENTED = frozenset(PLAIN) | frozenset(_SPECIAL)


def evaluate_row(node: Typed, row: Row) -> object:
    return _Evaluator(row).eval(node)


def evaluate_columns(node: Typed, columns: Mapping[tuple[str, ...], Sequence[object]], num_rows: int) -> list[object]:
    """Evaluate over column-wise Python values (one list per field path)."""
    out = []
    paths = list(columns)
    for i in range(num_rows):
        row = {path: columns[path][i] for path in paths}
        out.append(evaluate_row(node, row))
    return out
