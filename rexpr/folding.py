"""Constant folding on typed trees: a subtree that reads no field is replaced by its value,
computed by the reference evaluator, so every backend sees the same constants. A constant
that raises an error is left in place: the error must surface when the expression runs."""

from __future__ import annotations

from rexpr.reference.evaluator import evaluate_row
from rexpr.typed import TCall, TField, TLiteral, Typed
from rexpr.values import RowError


def _reads_fields(node: Typed) -> bool:
    if isinstance(node, TField):
        return True
    if isinstance(node, TCall):
        return any(_reads_fields(a) for a in node.args)
    return False


def fold_constants(node: Typed) -> Typed:
    if not isinstance(node, TCall):
        return node
    args = tuple(fold_constants(a) for a in node.args)
    rebuilt = node if args == node.args else TCall(node.function, args, node.type, node.span)
    if _reads_fields(rebuilt):
        return rebuilt
    value = evaluate_row(rebuilt, {})
    if isinstance(value, RowError):
        return rebuilt
    return TLiteral(value, rebuilt.type.with_nullable(value is None), node.span)
