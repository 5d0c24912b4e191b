"""Subtrees whose value a SQL planner knows without reading a row.

Planners fold constant subexpressions while planning, even in CASE branches no row takes, so a
constant that raises there fails every row. A subtree that reads no field is one such constant;
so is a ``coalesce`` whose first non-null argument is one (PostgreSQL simplifies
``COALESCE(0.0, x)`` to ``0.0`` and then folds ``ln(0.0)``: generated seed 13, case 640), a
``case`` whose constant conditions decide the branch, an ``and`` with a constant false operand
and an ``or`` with a constant true one. The dialects lower such a subtree to its value, computed
by the reference, or to their raise construct, so nothing is left for the planner to fold.
"""

from __future__ import annotations

from rexpr.reference.evaluator import evaluate_row
from rexpr.sql.dialects._null_operands import STRICT
from rexpr.typed import TCall, TField, TLiteral, Typed
from rexpr.values import RowError

UNKNOWN: tuple[bool, object] = (False, None)


def planner_value(node: Typed) -> tuple[bool, object]:
    """(True, value) when ``node``'s value is fixed without a row (the value may be a
    :class:`RowError`); (False, None) otherwise. Conservative: unknown unless a rule shows it."""
    if isinstance(node, TLiteral):
        return True, node.value
    if isinstance(node, TField) or not isinstance(node, TCall):
        return UNKNOWN
    fid = node.function
    if fid == "coalesce":
        for arg in node.args:
            known, value = planner_value(arg)
            if not known:
                return UNKNOWN
            if value is not None:  # a value or an error: later arguments are never evaluated
                return True, value
        return True, None
    if fid == "case":
        args = node.args
        for i in range(0, len(args) - 1, 2):
            known, condition = planner_value(args[i])
            if not known:
                return UNKNOWN
            if isinstance(condition, RowError):
                return True, condition
            if condition is True:
                return planner_value(args[i + 1])
        return planner_value(args[-1])
    values = [planner_value(a) for a in node.args]
    if fid in ("and", "or"):
        decisive = fid == "or"  # false decides and, true decides or, whatever the others are
        if any(known and value is decisive for known, value in values):
            return True, decisive
    if not all(known for known, _ in values):
        return UNKNOWN
    errors = [value for _, value in values if isinstance(value, RowError)]
    if errors:
        # A strict call raises its leftmost argument's error; the others (and/or absorption,
        # in, between) are left to the engine.
        return (True, errors[0]) if fid in STRICT else UNKNOWN
    literals = tuple(TLiteral(value, a.type.with_nullable(value is None), a.span)
                     for a, (_, value) in zip(node.args, values))
    return True, evaluate_row(TCall(fid, literals, node.type, node.span), {})
