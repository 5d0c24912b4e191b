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

An engine with a per-row probe (DuckDB's ``TRY``) is asked first: one statement gives every
item's values and the rows where it fails, and only those rows are then run one by one to
learn what they raise. That is ``2 + failing rows`` statements instead of about
``2 * log2(rows)`` per failing row. If the probe statement itself fails, bisecting proceeds.
An expression is a function of the columns it reads, so of the failing rows that hold the same
values there (``row_keys``), one is run and its outcome stands for the others; should that row
not fail alone, each of the others is run too.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable, Hashable, Sequence

from rexpr.engines.failures import EngineError, StatementFailed
from rexpr.values import EngineLimit, RowError

# run(item indexes, first row, end row) -> one engine-native column per item; raises StatementFailed.
Run = Callable[[Sequence[int], int, int], Sequence[object]]
# classify(failure) -> the row error or engine limit it stands for; raises EngineError when neither.
Classify = Callable[[StatementFailed], "RowError | EngineLimit"]
# probe(item indexes, first row, end row) -> per item (engine column with a value, or anything,
# at each row, the offsets from first row of the rows that fail); raises StatementFailed.
Probe = Callable[[Sequence[int], int, int], Sequence[tuple[object, Sequence[int]]]]
# row_keys(item index) -> per row, a key equal for rows with the same values in what the item reads.
RowKeys = Callable[[int], Sequence[Hashable]]

DEFAULT_MAX_STATEMENTS = 50_000


@dataclass
class ItemOutcome:
    pieces: list[tuple[int, object]] = field(default_factory=list)   # (first row, engine column)
    errors: dict[int, RowError | EngineLimit] = field(default_factory=dict)  # row -> what it raised


@dataclass
class Located:
    outcomes: list[ItemOutcome]
    statements: int


def _slices(column: object, lo: int, hi: int, failing: set[int]) -> list[tuple[int, object]]:
    """(first row, slice of ``column``) for each run of rows in [lo, hi) outside ``failing``."""
    pieces: list[tuple[int, object]] = []
    start = lo
    for row in [*sorted(failing), hi]:
        if row > start:
            pieces.append((start, column.slice(start - lo, row - start)))  # type: ignore[attr-defined]
        start = row + 1
    return pieces


def _representatives(failing: set[int], keys: Sequence[Hashable] | None) -> dict[int, list[int]]:
    """Each failing row that is run, with the failing rows holding the same values."""
    if keys is None:
        return {row: [] for row in failing}
    groups: dict[Hashable, list[int]] = {}
    for row in sorted(failing):
        groups.setdefault(keys[row], []).append(row)
    return {rows[0]: rows[1:] for rows in groups.values()}


def locate(run: Run, classify: Classify, item_count: int, row_count: int, *, engine: str,
           max_statements: int = DEFAULT_MAX_STATEMENTS, probe: Probe | None = None,
           row_keys: RowKeys | None = None) -> Located:
    outcomes = [ItemOutcome() for _ in range(item_count)]
    followers: dict[tuple[int, int], list[int]] = {}  # (item, row run) -> rows sharing its outcome
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
            if probe is not None and (len(items) > 1 or hi - lo > 1):
                statements += 1
                # Probed once: afterwards only single (row, item) pairs are left, or the engine
                # could not probe this statement and bisecting goes on.
                ask, probe = probe, None
                try:
                    probed = ask(items, lo, hi)
                except StatementFailed:
                    pass
                else:
                    for index, (column, offsets) in zip(items, probed):
                        failing = {lo + offset for offset in offsets}
                        outcomes[index].pieces += _slices(column, lo, hi, failing)
                        groups = _representatives(failing, None if row_keys is None else row_keys(index))
                        for row, others in sorted(groups.items(), reverse=True):
                            followers[(index, row)] = others
                            stack.append(((index,), row, row + 1))
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
                outcome = classify(failed)
                for row in [lo, *followers.pop((items[0], lo), [])]:
                    outcomes[items[0]].errors[row] = outcome
            continue
        if len(items) == 1 and hi - lo == 1:  # it did not fail alone: its followers are run alone too
            stack += [((items[0],), row, row + 1) for row in followers.pop((items[0], lo), [])]
        for index, column in zip(items, columns):
            outcomes[index].pieces.append((lo, column))
    for outcome in outcomes:
        outcome.pieces.sort(key=lambda piece: piece[0])
    return Located(outcomes, statements)
