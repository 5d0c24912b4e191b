"""Terse constructors for the sqlglot trees the server dialects build.

sqlglot prints the trees it is given and adds no parentheses of its own, so every operand
that is not an atom is wrapped in ``exp.Paren`` here: the printed SQL then means exactly the
tree, whatever the precedence rules of the engine."""

from __future__ import annotations

import contextvars
from typing import Callable

from sqlglot import exp

Tree = exp.Expression

_ATOMS = (exp.Column, exp.Literal, exp.Null, exp.Boolean, exp.Paren, exp.Anonymous, exp.Cast,
          exp.Case, exp.Subquery, exp.Identifier)


def paren(node: Tree) -> Tree:
    """The node itself when it is an atom, else the node in parentheses."""
    return node if isinstance(node, _ATOMS) else exp.Paren(this=node)


def call(name: str, *args: Tree) -> Tree:
    """A function call printed exactly as named (sqlglot does not rewrite anonymous calls)."""
    return exp.Anonymous(this=name, expressions=list(args))


def cast(node: Tree, type_sql: str, dialect: str) -> Tree:
    return exp.Cast(this=node, to=exp.DataType.build(type_sql, dialect=dialect))


def string(text: str) -> Tree:
    return exp.Literal.string(text)


def number(value: int | str) -> Tree:
    """A numeric literal spelled exactly as given (``Literal.number`` would re-read '-0.13e0' as
    a float and drop the exponent that makes it a MariaDB DOUBLE); negative numbers are
    parenthesised so ``a - -1`` cannot become ``a --1``."""
    text = str(value)
    if text.startswith("-"):
        return exp.Paren(this=exp.Neg(this=exp.Literal(this=text[1:], is_string=False)))
    return exp.Literal(this=text, is_string=False)


def null() -> Tree:
    return exp.Null()


def boolean(value: bool) -> Tree:
    return exp.Boolean(this=value)


def case(*pairs: tuple[Tree, Tree], default: Tree | None = None) -> Tree:
    """``CASE WHEN c1 THEN v1 ... ELSE default END`` (no ELSE when ``default`` is None)."""
    return exp.Case(ifs=[exp.If(this=c, true=v) for c, v in pairs], default=default)


def _binary(kind: type[exp.Binary], left: Tree, right: Tree) -> Tree:
    return kind(this=paren(left), expression=paren(right))


def add(a: Tree, b: Tree) -> Tree:
    return _binary(exp.Add, a, b)


def sub(a: Tree, b: Tree) -> Tree:
    return _binary(exp.Sub, a, b)


def mul(a: Tree, b: Tree) -> Tree:
    return _binary(exp.Mul, a, b)


def div(a: Tree, b: Tree) -> Tree:
    # typed=True: print a plain "/", the operand types already say what division it is.
    return exp.Div(this=paren(a), expression=paren(b), typed=True, safe=False)


def mod(a: Tree, b: Tree) -> Tree:
    return _binary(exp.Mod, a, b)


def neg(a: Tree) -> Tree:
    return exp.Neg(this=paren(a))


def eq(a: Tree, b: Tree) -> Tree:
    return _binary(exp.EQ, a, b)


def ne(a: Tree, b: Tree) -> Tree:
    return _binary(exp.NEQ, a, b)


def lt(a: Tree, b: Tree) -> Tree:
    return _binary(exp.LT, a, b)


def le(a: Tree, b: Tree) -> Tree:
    return _binary(exp.LTE, a, b)


def gt(a: Tree, b: Tree) -> Tree:
    return _binary(exp.GT, a, b)


def ge(a: Tree, b: Tree) -> Tree:
    return _binary(exp.GTE, a, b)


COMPARE = {"eq": eq, "ne": ne, "lt": lt, "le": le, "gt": gt, "ge": ge}


def and_(*items: Tree) -> Tree:
    out = paren(items[0])
    for item in items[1:]:
        out = exp.And(this=out, expression=paren(item))
    return out


def or_(*items: Tree) -> Tree:
    out = paren(items[0])
    for item in items[1:]:
        out = exp.Or(this=out, expression=paren(item))
    return out


def not_(a: Tree) -> Tree:
    return exp.Not(this=exp.Paren(this=a))


def is_null(a: Tree) -> Tree:
    return exp.Is(this=paren(a), expression=exp.Null())


def is_not_null(a: Tree) -> Tree:
    return exp.Not(this=exp.Paren(this=is_null(a)))


def is_false(a: Tree) -> Tree:
    return exp.Is(this=paren(a), expression=exp.Boolean(this=False))


def is_true(a: Tree) -> Tree:
    return exp.Is(this=paren(a), expression=exp.Boolean(this=True))


def collate(a: Tree, collation: exp.Expression) -> Tree:
    return exp.Collate(this=paren(a), expression=collation)


def like(subject: Tree, pattern: Tree, escape: Tree) -> Tree:
    return exp.Escape(this=exp.Like(this=paren(subject), expression=paren(pattern)), expression=escape)


def in_list(a: Tree, items: list[Tree]) -> Tree:
    return exp.In(this=paren(a), expressions=[paren(i) for i in items])


def is_simple(node: Tree) -> bool:
    """Cheap to repeat and cannot raise: a column, a literal, or a cast or negation of a
    literal. A negated or cast column is not: ``-i`` raises for -2^63, and a body that puts a
    value in an ``OR`` of null tests would skip it once another value is null (PostgreSQL,
    ``round(y / month(ts), -i)``, generated seed 16, case 2232)."""
    while isinstance(node, exp.Paren):
        node = node.this
    if isinstance(node, exp.Column):
        return True
    while isinstance(node, (exp.Paren, exp.Cast, exp.Neg)):
        node = node.this
    return isinstance(node, (exp.Literal, exp.Null, exp.Boolean))




# How many bound scopes enclose the tree being built. A bound value is named after its depth:
# every reference a scope can see to an enclosing scope names a smaller depth, so a name never
# captures an outer one, and the same expression always prints the same SQL.
_DEPTH: contextvars.ContextVar[int] = contextvars.ContextVar("rexpr_bind_depth", default=0)


def scope_alias() -> str:
    return f"rx_{_DEPTH.get()}"


def in_scope(body: Callable[[list[Tree]], Tree], refs: list[Tree]) -> Tree:
    """``body(refs)``, built one scope deeper."""
    token = _DEPTH.set(_DEPTH.get() + 1)
    try:
        return body(refs)
    finally:
        _DEPTH.reset(token)
