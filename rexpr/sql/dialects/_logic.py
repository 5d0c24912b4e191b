"""Lowerings shared by the server dialects where the reference's error rules meet SQL's
evaluation order: and/or absorbing errors, in/between built from comparisons, constant
subtrees that raise, and the static question "can this subtree raise on this engine?".

SQL has no way to catch an error, so ``false and <error>`` can only give false if the
erroring operand is never evaluated. A chain is therefore faithful when at most one operand
may raise: the others are evaluated first, and the risky one only when they do not already
decide the result."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

from rexpr.catalogue.model import ErrorClass
from rexpr.sql.dialects import _trees as t
from rexpr.sql.profile import LowerContext
from rexpr.typed import TCall, TField, TLiteral, Typed, walk
from rexpr.types import Kind

Tree = t.Tree
Comparator = Callable[[Kind, Tree, Tree], Tree]
# bind(values, body, kinds): body over the values, each evaluated once; kinds are the values'
# types (a Kind, or "decimal" for an exact integer wider than int64), for engines that need them
Bind = Callable[..., Tree]


@dataclass(frozen=True)
class ServerSql:
    """What the shared lowerings need from one engine."""

    name: str
    raise_: Callable[[ErrorClass, Kind], Tree]           # a row-dependent construct that raises
    bind: Bind                                           # evaluate values once
    compare: Callable[[str, Kind, Tree, Tree], Tree]     # faithful eq/ne/lt/le/gt/ge
    call_may_raise: Callable[[TCall], bool]              # this call itself (not its children)
    # evaluate every value before the tree can short-circuit on a null (MariaDB's = skips its
    # right side when the left is null; the reference raises the right side's error first)
    strict: Callable[[list[Tree], Tree], Tree] = lambda values, tree: tree


def may_raise(node: Typed, sql: ServerSql) -> bool:
    """True when some call in the subtree can raise an error for some row."""
    return any(isinstance(n, TCall) and sql.call_may_raise(n) for n in walk(node))


def reads_fields(node: Typed) -> bool:
    return any(isinstance(n, TField) for n in walk(node))


def literal_value(node: Typed) -> tuple[bool, object]:
    """(True, value) when the node is a literal, else (False, None)."""
    return (True, node.value) if isinstance(node, TLiteral) else (False, None)


def chain(ctx: LowerContext, node: TCall, args: list[Tree], sql: ServerSql, conjunction: bool) -> Tree:
    """``and`` / ``or`` with the reference's absorption: a false (true) operand wins even over
    an error in another operand."""
    risky = [i for i, a in enumerate(node.args) if may_raise(a, sql)]
    join = t.and_ if conjunction else t.or_
    if not risky:
        return join(*args)
    if len(risky) > 1:
        word = "and" if conjunction else "or"
        ctx.refuse(node, f"{word} with {len(risky)} operands that can raise an error: SQL cannot "
                         f"evaluate one without risking the other's error, which the reference "
                         f"lets a {'false' if conjunction else 'true'} operand absorb")
    safe = [a for i, a in enumerate(args) if i not in risky]
    return _absorbing(safe, args[risky[0]], sql, conjunction)


def _absorbing(safe: list[Tree], risky: Tree, sql: ServerSql, conjunction: bool) -> Tree:
    join = t.and_ if conjunction else t.or_

    def body(refs: list[Tree]) -> Tree:
        decided = join(*refs)
        # NOT(decided) is true only when decided is false (null stays null), which is
        # exactly when the risky operand must not be evaluated.
        test = t.not_(decided) if conjunction else decided
        return t.case((test, t.boolean(not conjunction)), default=join(decided, risky))

    return sql.bind([join(*safe)], body, [Kind.BOOL])


def in_list(ctx: LowerContext, node: TCall, args: list[Tree], sql: ServerSql) -> Tree:
    """x in (a, b, ...) as the or of x = a, x = b, ... (the reference's definition)."""
    kind = node.args[0].type.kind
    items = list(range(1, len(node.args)))
    risky = [i for i in items if may_raise(node.args[i], sql)]
    if len(risky) > 1:
        ctx.refuse(node, f"in with {len(risky)} list items that can raise an error: SQL cannot "
                         "evaluate one without risking the other's error, which the reference "
                         "lets a matching item absorb")
    safe = [i for i in items if i not in risky]

    def body(refs: list[Tree]) -> Tree:
        x, safe_refs = refs[0], refs[1:]
        tests = [sql.compare("eq", kind, x, ref) for ref in safe_refs]
        if not risky:
            return t.or_(*tests)
        # bound only where it is evaluated, so an absorbed error is never raised
        late = sql.bind([x, args[risky[0]]], lambda r: sql.strict(r, sql.compare("eq", kind, r[0], r[1])),
                        [kind, kind])
        return _absorbing(tests, late, sql, conjunction=False) if tests else late

    return sql.bind([args[0]] + [args[i] for i in safe], body, [kind] * (1 + len(safe)))


def between(ctx: LowerContext, node: TCall, args: list[Tree], sql: ServerSql) -> Tree:
    """x between lo and hi as x >= lo and x <= hi, with the and's absorption."""
    kind = node.args[0].type.kind
    low_risky, high_risky = (may_raise(node.args[i], sql) for i in (1, 2))
    if low_risky and high_risky:
        ctx.refuse(node, "between whose two bounds can both raise an error: SQL cannot evaluate "
                         "one without risking the other's error, which the reference lets the "
                         "other comparison absorb when it is false")
    if not (low_risky or high_risky):
        # an error in x makes both comparisons raise, as in the reference
        return sql.bind(args, lambda r: t.and_(sql.compare("ge", kind, r[0], r[1]),
                                               sql.compare("le", kind, r[0], r[2])), [kind] * 3)
    op_safe, op_risky = ("le", "ge") if low_risky else ("ge", "le")
    bound_safe, risky_arg = (args[2], args[1]) if low_risky else (args[1], args[2])

    def body(refs: list[Tree]) -> Tree:
        x, bound_ref = refs
        late = sql.bind([x, risky_arg], lambda r: sql.strict(r, sql.compare(op_risky, kind, r[0], r[1])),
                        [kind, kind])
        return _absorbing([sql.compare(op_safe, kind, x, bound_ref)], late, sql, conjunction=True)

    return sql.bind([args[0], bound_safe], body, [kind, kind])
