"""Lowering typed trees to SQL, through sqlglot trees (never by pasting strings).

    lower(node, engine, lowering="faithful") -> sqlglot expression (one SELECT-list item)
    to_sql(node, engine, lowering="faithful") -> that item printed in the engine's dialect
    select_sql([(alias, node), ...], engine, table_name, lowering) -> one SELECT statement

The driver walks the tree and asks the engine's dialect module (``rexpr.sql.dialects.<engine>``,
contract in :mod:`rexpr.sql.profile`) for each call. Field paths are columns named by the dotted
path (``ship.port`` is the column ``"ship.port"``), always quoted. sqlglot adds no parentheses
of its own, so after the dialect has built its tree every operator operand that is itself an
operator is wrapped in ``exp.Paren``: the printed SQL means exactly the tree.
"""

from __future__ import annotations

import difflib
import importlib
import pkgutil
import sys
import threading
from contextlib import contextmanager
from functools import lru_cache
from typing import Iterator, Sequence

import sqlglot
from sqlglot import exp

import rexpr.sql.dialects as dialects_package
from rexpr.catalogue import BY_ID
from rexpr.errors import InputProblem, NotPushable
from rexpr.sql.profile import DialectProfile, Lowering
from rexpr.sql.quoting import Quoting, column, identifier, string_literal
from rexpr.typed import TCall, TField, TLiteral, Typed
from rexpr.types import DataType, Kind

LOWERINGS: tuple[Lowering, ...] = ("faithful", "native")

# Guards repeat their operands, so a deep tree of guarded calls grows fast; past this many
# sqlglot nodes the SQL is refused rather than sent (engines parse megabytes slowly).
MAX_NODES = 60_000
# sqlglot prints a tree recursively, up to 5 Python frames per nesting level (measured on every
# dialect), and the runners print lowered trees themselves: 128 levels keep that within 640
# frames, well inside Python's default limit of 1000 whatever the caller. Deeper SQL is refused.
MAX_DEPTH = 128
# Reading SQL back (the single-SELECT check) takes up to 28 frames per level (measured).
_PARSE_FRAMES_PER_LEVEL = 32


# ------------------------------------------------------------------------------ dialect registry
@lru_cache(maxsize=None)
def engines() -> tuple[str, ...]:
    """Engines with a dialect module (private helper modules start with an underscore)."""
    return tuple(sorted(m.name for m in pkgutil.iter_modules(dialects_package.__path__)
                        if not m.name.startswith("_")))


@lru_cache(maxsize=None)
def dialect_of(engine: str) -> DialectProfile:
    """The dialect profile of ``engine``; an unknown name is an :class:`InputProblem`."""
    known = engines()
    if engine not in known:
        close = difflib.get_close_matches(str(engine), known, n=1)
        hint = f"; did you mean {close[0]!r}?" if close else f"; known engines: {', '.join(known)}"
        raise InputProblem(f"no SQL dialect for engine {engine!r}{hint}", code="unknown_engine")
    profile = importlib.import_module(f"{dialects_package.__name__}.{engine}").PROFILE
    if not isinstance(profile, DialectProfile):
        raise InputProblem(f"dialect module for {engine!r} has no DialectProfile", code="unknown_engine")
    return profile


def quoting_of(profile: DialectProfile) -> Quoting:
    return profile.quoting or Quoting(profile.sqlglot_dialect)


# ------------------------------------------------------------------------------ the driver
def describe(node: TCall) -> str:
    """``round(float64, int64)``: the function and the argument form, for refusal messages."""
    spec = BY_ID.get(node.function)
    name = spec.spelling if spec is not None else node.function
    if node.function == "cast":
        return f"cast({node.args[0].type.name} as {node.type.name})"
    kinds = ", ".join(a.type.name for a in node.args)
    return f"{name}({kinds})"


class _Driver:
    """Implements :class:`rexpr.sql.profile.LowerContext` for one lowering run."""

    def __init__(self, profile: DialectProfile, lowering: Lowering, root: Typed) -> None:
        self.profile = profile
        self.engine = profile.name
        self.lowering = lowering
        self.quoting = quoting_of(profile)
        self.root = root

    def lower(self, node: Typed) -> exp.Expression:
        tree = self._lower(node)
        size, depth = measure(tree)
        if size > MAX_NODES:
            raise NotPushable(f"{self.engine} {self.lowering} SQL would have more than {MAX_NODES} nodes after its "
                              "guards; evaluate this expression locally")
        if depth > MAX_DEPTH:
            raise NotPushable(f"expression nests {call_depth(self.root)} calls deep; {self.engine} SQL generation "
                              f"supports at most {MAX_DEPTH} levels of SQL nesting and this expression needs more, "
                              "so evaluate it locally (or split it into shallower conjuncts)")
        return tree

    def _lower(self, node: Typed) -> exp.Expression:
        if isinstance(node, TLiteral):
            return parenthesised(self.literal(node.value, node.type))
        if isinstance(node, TField):
            return column(node.dotted)
        if not isinstance(node, TCall):
            raise TypeError(f"not a typed tree node: {type(node).__name__}")
        table = self.profile.faithful if self.lowering == "faithful" else self.profile.native
        if self.lowering == "faithful":
            capability = self.profile.capabilities.get(node.function)
            if capability is not None and capability.status == "not_pushable":
                self.refuse(node, capability.reason or "declared not pushable")
        lowerer = table.get(node.function)
        if lowerer is None:
            self.refuse(node, f"the {self.lowering} lowering has no entry for {node.function!r}")
        args = [self.lower(a) for a in node.args]
        return parenthesised(lowerer(self, node, args))  # type: ignore[misc]

    def literal(self, value: object, data_type: DataType) -> exp.Expression:
        if self.profile.literal is not None:
            return self.profile.literal(value, data_type)
        return _generic_literal(value, data_type, self.quoting)

    def refuse(self, node: Typed, reason: str) -> None:
        what = describe(node) if isinstance(node, TCall) else type(node).__name__
        raise NotPushable(f"{self.engine} {self.lowering} SQL: {what}: {reason}")


def _generic_literal(value: object, data_type: DataType, quoting: Quoting) -> exp.Expression:
    if value is None:
        return exp.Null()
    if data_type.kind is Kind.BOOL:
        return exp.Boolean(this=bool(value))
    if data_type.kind in (Kind.INT64, Kind.FLOAT64):
        return exp.Literal.number(repr(value))
    if data_type.kind is Kind.STRING:
        return string_literal(str(value), quoting)
    raise NotPushable(f"{quoting.dialect}: no generic literal for {data_type.name}")


# ------------------------------------------------------------------------------ parentheses
_OPERATORS = (exp.Binary, exp.Not, exp.Neg, exp.Between, exp.In, exp.BitwiseNot)


def _is_operator(node: exp.Expression) -> bool:
    if isinstance(node, exp.Paren):
        return False
    if isinstance(node, exp.Literal) and not node.is_string and str(node.this).startswith("-"):
        return True  # "- -1" would print as a comment start "--1"
    return isinstance(node, _OPERATORS)


# Node metadata: the subtree below is parenthesised already (the driver calls parenthesised()
# once per typed node, and lowerers share argument subtrees, so without this mark the work
# would grow with the printed size, exponentially in the depth of guarded calls).
_DONE = "rexpr_parenthesised"
_MEASURE = "rexpr_size_depth"


def parenthesised(node: exp.Expression) -> exp.Expression:
    """``node`` with every operator operand that is an operator wrapped in parentheses.

    An ``ESCAPE`` clause's left side is the LIKE it belongs to and stays bare."""
    stack = [node]
    while stack:
        current = stack.pop()
        if current.meta.get(_DONE):
            continue
        current.meta[_DONE] = True  # its children are handled below, its descendants from the stack
        for key, value in list(current.args.items()):
            children = value if isinstance(value, list) else [value]
            for index, child in enumerate(children):
                if not isinstance(child, exp.Expression):
                    continue
                stack.append(child)
                if not isinstance(current, _OPERATORS) or not _is_operator(child):
                    continue
                if isinstance(current, exp.Escape) and key == "this":
                    continue
                if _same_chain(current, key, child):
                    continue  # (a AND b) AND c prints as a AND b AND c, the same tree read back
                wrapped = exp.Paren(this=child)
                wrapped.meta[_DONE] = True
                if isinstance(value, list):
                    value[index] = wrapped
                    wrapped.parent, wrapped.arg_key, wrapped.index = current, key, index
                else:
                    current.set(key, wrapped)
    return node


def _same_chain(parent: exp.Expression, key: str, child: exp.Expression) -> bool:
    """``child`` is the left operand of an AND (OR) and itself an AND (OR): sqlglot prints and
    reads such chains in a loop, so the chain is one level, however long."""
    return isinstance(parent, exp.Connector) and key == "this" and type(child) is type(parent)


def measure(node: exp.Expression) -> tuple[int, int]:
    """(nodes, nesting depth) of the tree as printed, counting shared subtrees every time
    they appear; linear in the distinct nodes (each node keeps its measure in its metadata;
    a measured subtree is never changed afterwards)."""
    stack: list[tuple[exp.Expression, bool]] = [(node, False)]
    while stack:
        current, children_done = stack.pop()
        if _MEASURE in current.meta:
            continue
        children = [(k, c) for k, v in current.args.items() for c in (v if isinstance(v, list) else [v])
                    if isinstance(c, exp.Expression)]
        if not children_done:
            stack.append((current, True))
            stack.extend((c, False) for _, c in children if _MEASURE not in c.meta)
            continue
        size = 1 + sum(c.meta[_MEASURE][0] for _, c in children)
        depth = max((c.meta[_MEASURE][1] + (0 if _same_chain(current, k, c) else 1) for k, c in children), default=1)
        current.meta[_MEASURE] = (size, max(depth, 1))
    return node.meta[_MEASURE]


def call_depth(node: Typed) -> int:
    """How many calls deep the typed tree nests (a field or literal is 0)."""
    deepest, stack = 0, [(node, 0)]
    while stack:
        current, depth = stack.pop()
        if isinstance(current, TCall):
            deepest = max(deepest, depth + 1)
            stack.extend((a, depth + 1) for a in current.args)
    return deepest


_ROOM = threading.Lock()
_DEFAULT_LIMIT = sys.getrecursionlimit()


def _frames_in_use() -> int:
    frame, count = sys._getframe(), 0
    while frame is not None:
        frame, count = frame.f_back, count + 1
    return count


@contextmanager
def _room_to_read_back(depth: int) -> Iterator[None]:
    """Enough recursion for sqlglot's parser on SQL ``depth`` levels deep. The limit is
    process-wide, so it is raised under a lock and put back; code that never asks for more
    than the default limit is unaffected."""
    need = _frames_in_use() + _PARSE_FRAMES_PER_LEVEL * depth + 200
    if need <= min(sys.getrecursionlimit(), _DEFAULT_LIMIT):
        yield
        return
    with _ROOM:
        before = sys.getrecursionlimit()
        sys.setrecursionlimit(max(before, need))
        try:
            yield
        finally:
            sys.setrecursionlimit(before)


# ------------------------------------------------------------------------------ the API
def _check_lowering(lowering: str) -> Lowering:
    if lowering not in LOWERINGS:
        close = difflib.get_close_matches(str(lowering), LOWERINGS, n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise InputProblem(f"unknown lowering {lowering!r}: use faithful or native{hint}", code="invalid_input")
    return lowering  # type: ignore[return-value]


def lower(node: Typed, engine: str, lowering: Lowering = "faithful") -> exp.Expression:
    """The sqlglot tree of one SELECT-list expression computing ``node`` on ``engine``.

    Raises :class:`NotPushable` when the dialect refuses a function or argument form, and
    :class:`InputProblem` for an unknown engine or lowering."""
    profile = dialect_of(engine)
    driver = _Driver(profile, _check_lowering(lowering), node)
    try:
        return parenthesised(driver.lower(node))
    except RecursionError:  # a safety net: every limit above should refuse first
        raise NotPushable(f"expression nests {call_depth(node)} calls deep, too deep for {engine} SQL "
                          "generation; evaluate it locally") from None


def to_sql(node: Typed, engine: str, lowering: Lowering = "faithful") -> str:
    """One SELECT-list expression as SQL text in the engine's dialect."""
    profile = dialect_of(engine)
    tree = lower(node, engine, lowering)
    text = tree.sql(dialect=profile.sqlglot_dialect)
    _check_single_select(f"SELECT {text}", profile, measure(tree)[1], node)
    return text


def select_sql(items: Sequence[tuple[str, Typed]], engine: str, table_name: str,
               lowering: Lowering = "faithful") -> str:
    """``SELECT <expr> AS <alias>, ... FROM <table>``: one statement, every name quoted."""
    if not items:
        raise InputProblem("select_sql needs at least one (alias, expression) item")
    profile = dialect_of(engine)
    aliases = [alias for alias, _ in items]
    if len(set(aliases)) != len(aliases):
        raise InputProblem(f"duplicate aliases in select_sql: {sorted({a for a in aliases if aliases.count(a) > 1})}")
    lowered = [(alias, node, lower(node, engine, lowering)) for alias, node in items]
    query = exp.select(*[exp.Alias(this=tree, alias=identifier(alias)) for alias, _, tree in lowered])
    query = query.from_(exp.Table(this=identifier(table_name)))
    text = query.sql(dialect=profile.sqlglot_dialect)
    deepest = max(lowered, key=lambda item: measure(item[2])[1])
    _check_single_select(text, profile, measure(deepest[2])[1] + 2, deepest[1])
    return text


def _check_single_select(text: str, profile: DialectProfile, depth: int, node: Typed) -> None:
    """The text must read back as exactly one SELECT: a literal or name that ended its quotes
    early would show up here as extra statements or a different statement kind. An engine
    whose parser has a limit no depth expresses checks the text itself."""
    dialect = profile.sqlglot_dialect
    try:
        with _room_to_read_back(depth):
            statements = [s for s in sqlglot.parse(text, read=dialect) if s is not None]
    except sqlglot.errors.ParseError as exc:
        raise NotPushable(f"generated {dialect} SQL does not parse back: {exc}") from None
    if len(statements) != 1 or not isinstance(statements[0], exp.Select):
        raise NotPushable(f"generated {dialect} SQL is not exactly one SELECT statement")
    check_engine_parser(text, profile.name, node, depth)


def check_engine_parser(text: str, engine: str, node: Typed, depth: int | None = None) -> None:
    """Raises NotPushable when the engine's own parser refuses ``text`` for a limit of its own
    (SQLite's fixed parser stack), which no nesting depth predicts; a no-op for other engines."""
    profile = dialect_of(engine)
    problem = profile.parse_problem(text) if profile.parse_problem is not None else None
    if problem:
        levels = f" ({depth} levels)" if depth is not None else ""
        raise NotPushable(f"expression nests {call_depth(node)} calls deep and {profile.name}'s own SQL parser "
                          f"refuses its SQL{levels}: {problem}; evaluate it locally")
