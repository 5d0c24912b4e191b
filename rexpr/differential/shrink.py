"""Reduce a disagreement to a minimal expression and a minimal input row.

Greedy and deterministic: keep applying the first simplification that still disagrees, in order
(1) replace the whole expression by one of its subtrees, (2) replace a subtree by the literal
the reference gives for it on this row, (3) replace a literal by a simpler one of its type, and
(4) drop columns the expression no longer reads. The result is small enough to read, and it
still disagrees on the engine, which is checked at every step.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable, Iterator

import pyarrow as pa

from rexpr.compare import same_result
from rexpr.reference.evaluator import evaluate_row
from rexpr.reference.tables import field_values
from rexpr.typed import TCall, TField, TLiteral, Typed, fields_read, walk
from rexpr.types import Kind
from rexpr.values import RowError

MAX_STEPS = 200

_SIMPLE: dict[Kind, tuple[object, ...]] = {
    Kind.INT64: (0, 1, -1), Kind.FLOAT64: (0.0, 1.0, -1.0), Kind.STRING: ("", "a", " "),
    Kind.BOOL: (False, True),
}

# (tree, one-row table) -> the engine's value for that row, or None if the engine cannot run it.
EngineProbe = Callable[[Typed, pa.Table], "list[object] | None"]


@dataclass(frozen=True)
class Repro:
    tree: Typed = field(repr=False)
    row: dict[str, object]
    expected: object
    observed: object
    steps: int


def _row_table(table: pa.Table, row: int) -> pa.Table:
    return table.slice(row, 1)


def _disagrees(probe: EngineProbe, tree: Typed, table: pa.Table) -> tuple[bool, object, object]:
    expected = evaluate_row(tree, {p: field_values(table, p)[0] for p in fields_read(tree)})
    try:
        observed = probe(tree, table)
    except Exception:  # noqa: BLE001 - a candidate the engine cannot run is just not a repro
        return False, expected, None
    if observed is None:
        return False, expected, None
    return not same_result(expected, observed[0]), expected, observed[0]


def _subtrees(tree: Typed) -> Iterator[Typed]:
    for node in walk(tree):
        if node is not tree and (isinstance(node, TCall) or isinstance(node, TField)):
            yield node


def _replace(tree: Typed, target: Typed, replacement: Typed) -> Typed:
    if tree is target:
        return replacement
    if isinstance(tree, TCall):
        args = tuple(_replace(a, target, replacement) for a in tree.args)
        if args != tree.args:
            return TCall(tree.function, args, tree.type, tree.span)
    return tree


def _candidates(tree: Typed, table: pa.Table) -> Iterator[Typed]:
    # 1. a smaller expression
    yield from _subtrees(tree)
    # 2. a subtree (or a field) folded to its value on this row
    for node in walk(tree):
        if node is tree or isinstance(node, TLiteral):
            continue
        value = evaluate_row(node, {p: field_values(table, p)[0] for p in fields_read(node)})
        if isinstance(value, RowError) or node.type.kind is Kind.STRUCT:
            continue
        yield _replace(tree, node, TLiteral(value, node.type.with_nullable(value is None), node.span))
    # 3. simpler literals
    for node in walk(tree):
        if isinstance(node, TLiteral) and node.value is not None:
            for simple in _SIMPLE.get(node.type.kind, ()):
                if simple != node.value or type(simple) is not type(node.value):
                    yield _replace(tree, node, TLiteral(simple, node.type, node.span))


def _literal_weight(node: TLiteral) -> int:
    simple = _SIMPLE.get(node.type.kind, ())
    for rank, value in enumerate(simple):
        if value == node.value and type(value) is type(node.value):
            return rank
    return 0 if node.value is None else 10 + len(repr(node.value))


def _score(tree: Typed) -> tuple[int, int, int]:
    """Strictly smaller means simpler: nodes, then fields read, then literal complexity."""
    nodes = list(walk(tree))
    return (len(nodes), sum(isinstance(n, TField) for n in nodes),
            sum(_literal_weight(n) for n in nodes if isinstance(n, TLiteral)))


def shrink(tree: Typed, table: pa.Table, row: int, probe: EngineProbe) -> Repro | None:
    """The minimal disagreement reachable from ``tree`` on ``row``, or None if it does not
    reproduce on that row alone."""
    one = _row_table(table, row)
    ok, expected, observed = _disagrees(probe, tree, one)
    if not ok:
        return None
    steps = 0
    improved = True
    while improved and steps < MAX_STEPS:
        improved = False
        for candidate in _candidates(tree, one):
            if _score(candidate) >= _score(tree):
                continue
            steps += 1
            ok, e, o = _disagrees(probe, candidate, one)
            if ok:
                tree, expected, observed, improved = candidate, e, o, True
                break
            if steps >= MAX_STEPS:
                break
    used = {p[0] for p in fields_read(tree)}
    values = {name: one.column(name)[0].as_py() for name in one.column_names if name in used}
    return Repro(tree, values, expected, observed, steps)
