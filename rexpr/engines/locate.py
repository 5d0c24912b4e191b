"""Finding the failing (row, item) pairs of a failed statement by bisecting.

A statement over many items and rows fails as a whole at its first failing row. To give every
(row, item) a value or an error, as the reference does, a failed statement is split: first its
items in halves, then, for one item, its row range in halves, down to one row and one item,
whose failure is then classified: a row error, or an engine limit (a value the engine cannot
represent), both kept per (row, item). Each split halves the work, so the depth is at most
``ceil(log2(items)) + ceil(log2(rows))``; the statement budget bounds the total when many rows
fail (at least one statement per failing pair is unavoidable: a failure names no row).

Row-wise semantics decide: if a range fails but both halves succeed (an engine that fails on
a whole vector but not on its rows), the halves' values stand.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable, Sequence

from rexpr.engines.failures import EngineError, StatementFailed
from rexpr.values import EngineLimit, RowError

# run(item indexes, first row, end row) -> one engine-native column per item; raises StatementFailed.
Run = Callable[[Sequence[int], int, int], Sequence[object]]
# classify(failure) -> the row error or engine limit it stands for; raises EngineError when neither.
Classify = Callable[[StatementFailed], "RowError | EngineLimit"]

DEFAULT_MAX_STATEMENTS = 50_000


@dataclass
class ItemOutcome:
    pieces: list[tuple[int, object]] = field(default_factory=list)   # (first row, engine column)
    errors: dict[int, RowError | EngineLimit] = field(default_factory=dict)  # row -> what it raised


@dataclass
class Located:
    outcomes: list[ItemOutcome]
    statements: int


def locate(run: Run, classify: Classify, item_count: int, row_count: int, *, engine: str,
           max_statements: int = DEFAULT_MAX_STATEMENTS) -> Located:
    outcomes = [ItemOutcome() for _ in range(item_count)]
    statements = 0
    if item_count == 0:
        return Located(outcomes, 0)
    stack: list[tuple[tuple[int, ...], int, int]] = [(tuple(range(item_count)), 0, row_count)]
    while stack:
        items, lo, hi = stack.pop()
        if statements >= max_statements:
            raise EngineError(f"{engine}: locating the failing rows needed more than {max_statements} "
                              "statements; evaluate fewer rows or raise max_statements", engine=engine)
        statements += 1
        try:
            columns = run(items, lo, hi)
        except StatementFailed as failed:
            if row_count == 0:
                classify(failed)  # a row error or limit with no rows blames nobody; anything else raises
                for index in items:
                    outcomes[index].pieces.append((0, None))
                continue
            if len(items) > 1:
                middle = len(items) // 2
                stack.append((items[middle:], lo, hi))
                stack.append((items[:middle], lo, hi))
            elif hi - lo > 1:
                middle = (lo + hi) // 2
                stack.append((items, middle, hi))
                stack.append((items, lo, middle))
            else:
                outcomes[items[0]].errors[lo] = classify(failed)
            continue
        for index, column in zip(items, columns):
            outcomes[index].pieces.append((lo, column))
    for outcome in outcomes:
        outcome.pieces.sort(key=lambda piece: piece[0])
    return Located(outcomes, statements)
