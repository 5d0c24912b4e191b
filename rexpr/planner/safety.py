"""Argument-aware facts about a typed subtree that decide whether pushing it can change the answer.

A conjunct that may raise a per-row error must not run at the source on rows another conjunct
would have dropped locally: ``false and error`` is false in our semantics, while an engine
evaluating the pushed conjunct alone would fail the whole query. So the planner asks whether a
subtree can raise at all, looking at the actual argument forms.
"""

from __future__ import annotations

from rexpr.catalogue import BY_ID, cast_rule
from rexpr.typed import TCall, TLiteral, Typed
from rexpr.types import Kind

_INT_OVERFLOW = {"add", "subtract", "multiply", "negate", "abs", "round"}


def _literal(node: Typed) -> object:
    return node.value if isinstance(node, TLiteral) else _NOT_LITERAL


_NOT_LITERAL = object()


def raise_reason(node: Typed) -> str | None:
    """Why this subtree may raise a per-row error, or None when it provably cannot."""
    if not isinstance(node, TCall):
        return None
    for arg in node.args:
        reason = raise_reason(arg)
        if reason:
            return reason
    fid = node.function
    spec = BY_ID[fid]
    if not spec.errors:
        return None
    if fid in _INT_OVERFLOW:
        return f"{spec.spelling} on int64 may overflow" if node.type.kind is Kind.INT64 else None
    if fid in ("divide", "modulo", "div"):
        divisor = _literal(node.args[1])
        if divisor is _NOT_LITERAL or divisor is None:
            return f"{spec.spelling} by a column may divide by zero"
        if divisor == 0:
            return f"{spec.spelling} by zero"
        if fid == "div" and divisor == -1:
            return "div by -1 may overflow"
        return None
    if fid == "substring":
        if len(node.args) < 3:
            return None
        length = _literal(node.args[2])
        return None if isinstance(length, int) and length >= 0 else "substring with a length that may be negative"
    if fid == "like":
        if len(node.args) < 3:
            return None
        escape = _literal(node.args[2])
        pattern = _literal(node.args[1])
        if isinstance(escape, str) and isinstance(pattern, str):
            from rexpr.reference.functions import like_regex
            from rexpr.values import RowError

            return "invalid like escape" if isinstance(like_regex(pattern, escape), RowError) else None
        return "like with an escape that is not a literal may raise"
    if fid == "cast":
        rule = cast_rule(node.args[0].type.kind, node.type.kind)
        return f"cast from {node.args[0].type.kind.value} to {node.type.kind.value} may fail" if rule and rule.errors else None
    return f"{spec.spelling} may raise {', '.join(e.error.value for e in spec.errors)}"
