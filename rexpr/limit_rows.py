"""Which engine-limit rows the reference accounts for (rule 8 of :mod:`rexpr.compare`).

An engine reports a limit when it cannot represent a value a row reaches, which may be the
result or a value on the way (``cast('-inf' as float64) < x`` is a bool). So the reference's
values at every node of the tree, inputs and literals included, are computed for just the
rows that hit a limit, and each limit is checked against them.
"""

from __future__ import annotations

from typing import Mapping

import pyarrow as pa

from rexpr.backends import get_backend
from rexpr.compare import limit_covered
from rexpr.errors import RexprError
from rexpr.typed import Typed, walk
from rexpr.values import EngineLimit


def reached_values(tree: Typed, table: pa.Table, rows: list[int]) -> dict[int, list[object]]:
    """row -> the reference's values at every distinct node of ``tree`` on that row."""
    taken = table.take(pa.array(rows, pa.int64()))
    prepare = get_backend("reference")
    out: dict[int, list[object]] = {row: [] for row in rows}
    for node in dict.fromkeys(walk(tree)):  # nodes are frozen dataclasses: equal subtrees once
        try:
            values = prepare(node)(taken).to_pylist()
        except RexprError:  # a node the reference cannot run alone explains nothing
            continue
        for row, value in zip(rows, values):
            out[row].append(value)
    return out


def split_limits(tree: Typed, table: pa.Table,
                 limits: Mapping[int, EngineLimit]) -> tuple[dict[int, EngineLimit], dict[int, EngineLimit]]:
    """(covered, unexplained): limits the reference's values explain, and those it does not."""
    if not limits:
        return {}, {}
    reached = reached_values(tree, table, sorted(limits))
    covered = {row: limit for row, limit in limits.items() if limit_covered(limit, reached[row])}
    return covered, {row: limit for row, limit in limits.items() if row not in covered}


def describe(engine: str, covered: Mapping[int, EngineLimit], shown: int = 5) -> str:
    """One line for a report: how many rows, which reasons, the first few rows."""
    reasons = ", ".join(sorted({limit.reason for limit in covered.values()}))
    rows = ", ".join(str(row) for row in list(sorted(covered))[:shown])
    more = ", ..." if len(covered) > shown else ""
    return (f"{len(covered)} row(s) not compared, {engine} cannot represent the result "
            f"(engine limit: {reasons}; rows {rows}{more})")
