"""Reduce a disagreement to a minimal expression and a minimal input row.

Greedy and deterministic. The state is an expression plus one input row; each step takes the
first candidate, in this order, that is strictly simpler and still disagrees:

1. the whole expression replaced by one of its subtrees;
2. a call replaced by one of its own arguments of the same kind;
3. one argument dropped from a variadic call (``and``, ``or``, ``in``, ``coalesce``, ``case``, ...);
4. a subtree or field folded to the literal the reference gives for it on this row;
5. a literal made simpler (null, 0, '', shorter text, a smaller integer);
6. a value of the input row made simpler in the same way.

"Simpler" is a strict order (nodes, then fields read, then literal and row weights), so the
loop ends. Every candidate is printed and compiled again, so the repro is exactly the tree its
text gives and the text can be pasted. When the loop ends before ``MAX_STEPS``, no single step
above still disagrees: the repro is minimal with respect to these steps (``minimal=True``).
Columns the expression no longer reads are dropped from the row.

Candidates go to the engine in chunks: the tree candidates of a step as many items of one
statement over the row, the row candidates as many rows of one statement, so a step costs a
statement or two however many candidates it has.
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass, field
import time
from typing import Callable, Iterator, Sequence

import pyarrow as pa

from rexpr.api import compile as compile_expression
from rexpr.catalogue import BY_ID, Form
from rexpr.compare import same_result
from rexpr.errors import RexprError
from rexpr.printing import to_text
from rexpr.reference.evaluator import evaluate_row
from rexpr.schema import Schema
from rexpr.typed import TCall, TField, TLiteral, Typed, fields_read, walk
from rexpr.types import Kind
from rexpr.values import RowError

MAX_STEPS = 1000  # candidates tried per disagreement
CHUNK = 16        # most candidates per statement
NOT_COMPARABLE = type("NotComparable", (), {"__repr__": lambda self: "NOT_COMPARABLE"})()
_CANNOT = type("Cannot", (), {"__repr__": lambda self: "CANNOT_RUN"})()  # the engine cannot run the tree

_SIMPLE: dict[Kind, tuple[object, ...]] = {
    Kind.INT64: (0, 1, -1), Kind.FLOAT64: (0.0, 1.0, -1.0), Kind.STRING: ("", "a", " "),
    Kind.BOOL: (False, True), Kind.DATE: (dt.date(1970, 1, 1),), Kind.TIMESTAMP: (dt.datetime(1970, 1, 1),),
}

# (trees, table) -> per tree, the engine's values for every row of the table, or None when it
# cannot run that tree; a row whose input the engine could not hold is NOT_COMPARABLE.
EngineProbe = Callable[[Sequence[Typed], pa.Table], "Sequence[list[object] | None]"]


@dataclass(frozen=True)
class Repro:
    tree: Typed = field(repr=False)
    text: str
    row: dict[str, object]   # the input row, only the columns the expression reads
    expected: object         # the reference's value
    observed: object         # the engine's value
    steps: int               # candidates tried
    minimal: bool            # no single shrinking step still disagrees


@dataclass(frozen=True)
class _State:
    tree: Typed
    row: tuple[tuple[str, object], ...]  # every column of the batch, in table order


def _same(a: object, b: object) -> bool:
    """Exact identity for literals: 0.0 is not -0.0, 1 is not True, NaN is NaN."""
    if type(a) is not type(b):
        return False
    if isinstance(a, float):
        return math.copysign(1.0, a) == math.copysign(1.0, b) and (a == b or (math.isnan(a) and math.isnan(b)))
    return a == b


def _weight(value: object, kind: Kind) -> int:
    if value is None:
        return 0
    for rank, simple in enumerate(_SIMPLE.get(kind, ()), 1):
        if _same(simple, value):
            return rank
    if isinstance(value, bool):
        return 1
    if isinstance(value, int):
        return 10 + value.bit_length()
    if isinstance(value, str):
        return 10 + len(value)
    return 10 + len(repr(value))


def _simpler_values(value: object, kind: Kind, nullable: bool) -> Iterator[object]:
    """Values simpler than ``value`` by ``_weight``, simplest first."""
    if nullable:
        yield None
    yield from _SIMPLE.get(kind, ())
    if isinstance(value, str):
        if len(value) > 3:  # halves first, so long text shrinks in a few steps
            yield value[:len(value) // 2]
            yield value[len(value) // 2:]
        for i in range(len(value)):  # then one code point shorter
            yield value[:i] + value[i + 1:]
    elif isinstance(value, int) and not isinstance(value, bool):
        yield int(value / 2) if abs(value) < 2**53 else value // 2
    elif isinstance(value, float) and math.isfinite(value) and value != int(value):
        yield float(int(value))


def _score(state: _State, kinds: dict[str, Kind]) -> tuple[int, int, int, int]:
    nodes = list(walk(state.tree))
    used = {p[0] for p in fields_read(state.tree)}
    return (len(nodes), sum(isinstance(n, TField) for n in nodes),
            sum(_weight(n.value, n.type.kind) for n in nodes if isinstance(n, TLiteral)),
            sum(_weight(v, kinds[name]) for name, v in state.row if name in used))


def _replace(tree: Typed, target: Typed, replacement: Typed) -> Typed:
    if tree is target:
        return replacement
    if isinstance(tree, TCall):
        args = tuple(_replace(a, target, replacement) for a in tree.args)
        if any(a is not b for a, b in zip(args, tree.args)):
            return TCall(tree.function, args, tree.type, tree.span)
    return tree


def _with_args(tree: Typed, target: TCall, args: tuple[Typed, ...]) -> Typed:
    return _replace(tree, target, TCall(target.function, args, target.type, target.span))


def _dropped_arguments(call: TCall) -> Iterator[tuple[Typed, ...]]:
    args = call.args
    if call.function == "case":  # (cond, value)* default: drop one pair
        for i in range(0, len(args) - 1, 2):
            if len(args) > 3:
                yield args[:i] + args[i + 2:]
        return
    spec = BY_ID.get(call.function)
    if spec is None or not any(s.variadic for s in spec.signatures):
        return
    least = 2 if spec.form is Form.CHAIN or call.function == "in" else 1
    for i in range(1 if call.function == "in" else 0, len(args)):
        if len(args) - 1 >= least:
            yield args[:i] + args[i + 1:]


def _row_values(state: _State) -> dict[tuple[str, ...], object]:
    row = dict(state.row)
    values: dict[tuple[str, ...], object] = {}
    for path in fields_read(state.tree):
        value = row.get(path[0])
        for part in path[1:]:
            value = None if value is None else value.get(part)  # type: ignore[union-attr]
        values[path] = value
    return values


def _trees(state: _State) -> Iterator[Typed]:
    tree = state.tree
    for node in walk(tree):  # 1. hoist a subtree
        if node is not tree and not isinstance(node, TLiteral):
            yield node
    for node in walk(tree):  # 2. a call replaced by one of its arguments of the same kind
        if isinstance(node, TCall):
            for arg in node.args:
                if arg.type.kind is node.type.kind:
                    yield _replace(tree, node, arg)
    for node in walk(tree):  # 3. drop an argument of a variadic call
        if isinstance(node, TCall):
            for args in _dropped_arguments(node):
                yield _with_args(tree, node, args)
    row = _row_values(state)
    for node in walk(tree):  # 4. fold to the reference's value on this row
        if isinstance(node, TLiteral) or node.type.kind is Kind.STRUCT:
            continue
        value = evaluate_row(node, row)
        if not isinstance(value, RowError):
            yield _replace(tree, node, TLiteral(value, node.type.with_nullable(value is None), node.span))
    for node in walk(tree):  # 5. simpler literals
        if isinstance(node, TLiteral):
            for simple in _simpler_values(node.value, node.type.kind, True):
                yield _replace(tree, node, TLiteral(simple, node.type.with_nullable(simple is None), node.span))


def _tree_candidates(state: _State) -> Iterator[_State]:
    for tree in _trees(state):
        yield _State(tree, state.row)


def _row_candidates(state: _State, schema: Schema) -> Iterator[_State]:
    used = {p[0] for p in fields_read(state.tree)}
    for index, (name, value) in enumerate(state.row):  # 6. simpler input values
        data_type = schema.get(name)
        if name not in used or data_type is None or data_type.kind is Kind.STRUCT:
            continue
        for simple in _simpler_values(value, data_type.kind, data_type.nullable):
            yield _State(state.tree, state.row[:index] + ((name, simple),) + state.row[index + 1:])


def _recompiled(tree: Typed, schema: Schema) -> Typed | None:
    """The tree the candidate's text compiles to, or None when the text does not compile."""
    try:
        return compile_expression(to_text(tree), schema).tree
    except RexprError:
        return None


def _differs(expected: object, observed: object) -> bool:
    return observed is not NOT_COMPARABLE and not same_result(expected, observed)


Cache = dict[tuple[str, str], object]  # (tree text, repr of the row) -> the engine's value


class _Shrinker:
    def __init__(self, probe: EngineProbe, schema: Schema, arrow_schema: pa.Schema, cache: Cache) -> None:
        self.probe = probe
        self.schema = schema
        self.arrow_schema = arrow_schema
        self.kinds = {name: (schema.get(name).kind if schema.get(name) else Kind.NULL)  # type: ignore[union-attr]
                      for name in arrow_schema.names}
        self.steps = 0
        self.cache = cache

    def table(self, states: Sequence[_State]) -> pa.Table:
        return pa.Table.from_pylist([dict(s.row) for s in states], schema=self.arrow_schema)

    def _run(self, trees: Sequence[Typed], table: pa.Table) -> Sequence[list[object] | None]:
        try:
            out = list(self.probe(trees, table))
        except Exception:  # noqa: BLE001 - a chunk the engine cannot run is no repro
            return [None] * len(trees)
        return out if len(out) == len(trees) else [None] * len(trees)

    def observed(self, chunk: list[_State], by_rows: bool) -> list[object]:
        """The engine's value for each candidate (_CANNOT when it cannot run it), from the cache
        where an earlier shrink already asked: disagreements of one kind meet the same candidates."""
        keys = [(to_text(c.tree), repr(c.row)) for c in chunk]
        todo = [i for i, key in enumerate(keys) if key not in self.cache]
        if todo and by_rows:
            [values] = self._run([chunk[0].tree], self.table([chunk[i] for i in todo]))
            for n, i in enumerate(todo):
                self.cache[keys[i]] = values[n] if values is not None and len(values) == len(todo) else _CANNOT
        elif todo:
            results = self._run([chunk[i].tree for i in todo], self.table(chunk[:1]))
            for i, values in zip(todo, results):
                self.cache[keys[i]] = values[0] if values is not None and len(values) == 1 else _CANNOT
        return [self.cache[key] for key in keys]

    def first(self, chunk: list[_State], by_rows: bool) -> tuple[_State, object, object] | None:
        """The first candidate that still disagrees. Tree candidates share one row (one statement
        with many items); row candidates share one tree (one statement over many rows)."""
        for candidate, value in zip(chunk, self.observed(chunk, by_rows)):
            expected = evaluate_row(candidate.tree, _row_values(candidate))
            if value is not _CANNOT and _differs(expected, value):
                return candidate, expected, value
        return None

    def improve(self, candidates: Iterator[_State], score: tuple, by_rows: bool,
                deadline: float | None) -> tuple[tuple[_State, object, object] | None, bool]:
        """(the first simpler candidate that disagrees, whether every candidate was tried).
        Chunks grow 1, 2, 4, ... up to CHUNK: the first candidates are the likeliest to win."""
        chunk: list[_State] = []
        size = 1
        for candidate in candidates:
            if not by_rows:
                recompiled = _recompiled(candidate.tree, self.schema)
                if recompiled is None:
                    continue
                candidate = _State(recompiled, candidate.row)
            if _score(candidate, self.kinds) >= score:
                continue
            chunk.append(candidate)
            if len(chunk) == size:
                found, chunk, size = self._try(chunk, by_rows), [], min(size * 2, CHUNK)
                if found is not None:
                    return found, False
                if self.steps >= MAX_STEPS or (deadline is not None and time.monotonic() > deadline):
                    return None, False
        return (self._try(chunk, by_rows) if chunk else None), True

    def _try(self, chunk: list[_State], by_rows: bool) -> tuple[_State, object, object] | None:
        self.steps += len(chunk)
        return self.first(chunk, by_rows)


def shrink(tree: Typed, table: pa.Table, row: int, probe: EngineProbe, schema: Schema,
           seconds: float | None = None, cache: Cache | None = None) -> Repro | None:
    """The minimal disagreement reachable from ``tree`` on ``row`` of ``table``, or None when it
    does not reproduce on that row alone. ``schema`` is the batch's schema (to recompile);
    ``seconds`` bounds the time spent (the repro then says it is not minimal); ``cache`` may be
    shared by the shrinks of one engine and lowering over the same schema."""
    deadline = None if seconds is None else time.monotonic() + seconds
    one = table.slice(row, 1)
    shrinker = _Shrinker(probe, schema, one.schema, {} if cache is None else cache)
    state = _State(tree, tuple(one.to_pylist()[0].items()))
    first = shrinker.first([state], False)
    if first is None:
        return None
    _, expected, observed = first
    minimal = False
    while shrinker.steps < MAX_STEPS and (deadline is None or time.monotonic() <= deadline):
        score = _score(state, shrinker.kinds)
        found, complete = shrinker.improve(_tree_candidates(state), score, False, deadline)
        if found is None and complete:
            found, complete = shrinker.improve(_row_candidates(state, schema), score, True, deadline)
        if found is None:
            minimal = complete
            break
        state, expected, observed = found
    used = {p[0] for p in fields_read(state.tree)}
    return Repro(state.tree, to_text(state.tree), {k: v for k, v in state.row if k in used},
                 expected, observed, shrinker.steps, minimal)
