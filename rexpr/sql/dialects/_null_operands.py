"""Arguments that are null on every row, and engines that stop evaluating beside them.

The reference evaluates every argument of a function, left to right, and an argument's error
is the result even when another argument is null: an error beats a null (docs/semantics.md,
"Errors are values"). Two engines skip the other arguments once one is known to be null:

* PostgreSQL's planner replaces a strict function or operator that has a NULL constant
  among its arguments by a NULL constant, whatever the other arguments are (measured on 15:
  ``NULL::bigint >= abs(i)`` plans as ``NULL::boolean``; ``abs(-2^63)`` is never evaluated).
* DuckDB's optimizer does the same for comparisons, arithmetic, ``||``, ``LIKE`` and scalar
  functions with a NULL constant or an all-null ``CASE`` argument; and at run time it skips
  the later arguments of such a function when an earlier argument's vector is a constant
  NULL (a ``CASE`` whose rows all take a NULL branch, as on a statement over one row).
  Measured on v2.0.1.

Both evaluate every argument of ``greatest(a IS NULL, b IS NULL, ...)``, in order, and
neither folds a ``CASE`` whose condition reads such a ``greatest``; the dialects put the
arguments there first where an argument can raise. :func:`always_null` is the static half
of that decision: which typed subtrees can only be null (when they do not raise).
"""

from __future__ import annotations

import operator
from typing import Callable

from rexpr.reference.evaluator import evaluate_row
from rexpr.reference.functions import PLAIN
from rexpr.sql.dialects._logic import reads_fields
from rexpr.typed import TCall, TField, TLiteral, Typed
from rexpr.values import RowError

# Null if any argument is null (the reference evaluates these through one generic path).
STRICT = frozenset(PLAIN) | {"cast"}
# Arguments not taken are never evaluated, by design: no null may force them.
LAZY = frozenset({"and", "or", "case", "coalesce"})


def _case_is_null(node: TCall, nulls: list[bool], constant: list[bool]) -> bool:
    """Every branch a row can take is null. A constant condition decides for every row, as
    the engines' planners also see (``CASE WHEN true THEN NULL ELSE x END`` folds to NULL),
    and so does a condition that is null on every row: PostgreSQL folds ``CASE WHEN NULL AND
    (NULL <= a) THEN a END`` to NULL (generated seed 6, case 6703)."""
    args = node.args
    for i in range(0, len(args) - 1, 2):
        if constant[i]:
            taken = evaluate_row(args[i], {})
            if isinstance(taken, RowError):
                return False  # the case raises on every row: not a null
            if taken is not True:
                continue
            return nulls[i + 1]
        if nulls[i] or never_true(args[i]):
            continue  # a condition never true is never taken
        if not nulls[i + 1]:
            return False
    return nulls[-1]


def _constant_not_true(a: Typed, b: Typed, holds: Callable[[object, object], bool]) -> bool:
    """``a`` and ``b`` read no field and ``holds(a, b)`` is false or null (neither raises)."""
    if reads_fields(a) or reads_fields(b):
        return False
    x, y = evaluate_row(a, {}), evaluate_row(b, {})
    if isinstance(x, RowError) or isinstance(y, RowError):
        return False
    return x is None or y is None or not holds(x, y)


def never_true(node: Typed) -> bool:
    """True when the bool ``node`` is false or null on every row where it does not raise. A
    CASE never takes a branch with such a condition, and PostgreSQL's planner drops it: ``0
    between 9223372036854775807 and i`` is ``false AND (0 <= i)``, folded to false (generated
    seed 6, case 6703). Conservative: False unless one of the forms below shows it."""
    if not reads_fields(node):
        value = evaluate_row(node, {})
        return value is not True and not isinstance(value, RowError)
    if always_null(node):
        return True
    if not isinstance(node, TCall):
        return False
    if node.function == "and":
        return any(never_true(a) for a in node.args)  # false absorbs the other operands
    if node.function == "or":
        return all(never_true(a) for a in node.args)
    if node.function == "between":
        x, lo, hi = node.args
        return _constant_not_true(x, lo, operator.ge) or _constant_not_true(x, hi, operator.le)
    return False


def _null_given(node: TCall, nulls: list[bool], constant: list[bool]) -> bool:
    fid = node.function
    if fid in STRICT:
        return any(nulls)
    if fid == "nullif":
        return nulls[0]
    if fid == "in":
        return nulls[0] or all(nulls[1:])
    if fid == "between":
        return nulls[0] or (nulls[1] and nulls[2])
    if fid in ("coalesce", "and", "or"):
        return all(nulls)
    if fid == "case":
        return _case_is_null(node, nulls, constant)
    return False  # is_null, is_distinct_from and concat are never null


def always_null(node: Typed) -> bool:
    """True when ``node`` is null on every row where it does not raise.

    Iterative (no recursion on deep trees); a largest subtree that reads no field is
    evaluated once by the reference."""
    from rexpr.sql.dialects._planner_constants import planner_value  # it imports this module

    done: dict[int, tuple[bool, bool]] = {}  # id -> (reads a field, always null)
    stack: list[tuple[Typed, bool]] = [(node, False)]
    while stack:
        current, children_done = stack.pop()
        if id(current) in done:
            continue
        if isinstance(current, TLiteral):
            done[id(current)] = (False, current.value is None)
        elif isinstance(current, TField):
            done[id(current)] = (True, False)
        elif not isinstance(current, TCall):
            done[id(current)] = (True, False)
        elif not children_done:
            stack.append((current, True))
            stack.extend((a, False) for a in current.args)
        else:
            flags = [done[id(a)] for a in current.args]
            reads = any(r for r, _ in flags)
            nulls = [n for _, n in flags]
            constant = [not r for r, _ in flags]
            if reads:  # each constant argument is a largest constant subtree: its value decides
                nulls = [n or (c and evaluate_row(a, {}) is None) for a, n, c in zip(current.args, nulls, constant)]
                # and so does an argument the planner knows without a row: PostgreSQL simplifies
                # nullif(t, coalesce(t, x)) and null or (false and b) to NULL (generated seed 15,
                # cases 1173 and 3848)
                nulls = [n or (not c and planner_value(a) == (True, None)) for a, n, c in zip(current.args, nulls, constant)]
            done[id(current)] = (reads, _null_given(current, nulls, constant))
    reads, null = done[id(node)]
    if not reads and not null:
        return evaluate_row(node, {}) is None
    return null
