"""SQLite through the standard library's sqlite3, in memory.

Storage (a STRICT temporary table, so SQLite refuses a wrong type instead of coercing it):
int64 and bool as INTEGER (bool 0/1), float64 as REAL, string as TEXT, date as TEXT
'YYYY-MM-DD', timestamp as TEXT 'YYYY-MM-DD HH:MM:SS.ffffff' (always six fraction digits, so
text order is time order). Results are read with SQLite's dynamic typing: an INTEGER 0/1 for a
bool item, REAL for float64, ISO text for dates and timestamps.

Limits, not hidden: SQLite has no NaN (a NaN is stored as NULL) and stores -0.0 as 0.0; both
are listed per row in ``input_losses``. NUL inside TEXT is stored whole and read back whole
(though SQLite's own string functions stop at it).

Per-row errors: ``rexpr_raise(tag TEXT)`` is registered on the connection and raises. The
sqlite3 module replaces the text of a Python exception with "user-defined function raised
exception", so the tag goes to the runner on a side channel. A ``rexpr-limit:<reason>`` tag
(``nan``, ``nul``) is an engine limit, reported per row in ``limits``, not an error.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import sqlite3
from typing import Any, Sequence

from rexpr.engines.base import Losses, Runner
from rexpr.engines.failures import DriverFailure, StatementFailed, UnstorableInput, failure_from_exception
from rexpr.engines.layout import TABLE_NAME, InputLayout, float_rows
from rexpr.engines.mapping import ValueRules
from rexpr.engines.statement import create_table, drop_table, quoted
from rexpr.types import Kind

COLUMN_TYPES = {Kind.BOOL: "INTEGER", Kind.INT64: "INTEGER", Kind.FLOAT64: "REAL", Kind.STRING: "TEXT",
                Kind.DATE: "TEXT", Kind.TIMESTAMP: "TEXT"}
RAISE_FUNCTION = "rexpr_raise"


class _RaisedTag(Exception):
    pass


class SQLiteRunner(Runner):
    name = "sqlite"
    dialect = "sqlite"
    rules = ValueRules(bool_as_integer=True, temporal_as_text=True)
    max_items = 2000  # SQLITE_MAX_COLUMN, the default limit on result columns (SQLite "Limits", from memory)
    notes = (
        "NaN is stored as NULL and -0.0 as 0.0 (SQLite REAL); affected rows are listed in input_losses.",
        "Dates are TEXT 'YYYY-MM-DD'; timestamps TEXT 'YYYY-MM-DD HH:MM:SS.ffffff'; bools INTEGER 0/1.",
        "rexpr_raise(tag) raises a per-row error carrying the tag; 'rexpr-limit:nan' and 'rexpr-limit:nul' "
        "give engine-limit rows (no NaN in REAL; text functions stop at U+0000), not errors.",
        "LIKE is left at SQLite's default (ASCII case-insensitive); the lowering must not rely on it.",
    )

    def __init__(self) -> None:
        super().__init__()
        self._raised: str | None = None

    def _open(self) -> Any:
        return sqlite3.connect(":memory:", isolation_level=None, check_same_thread=False)

    def _configure(self) -> None:
        def rexpr_raise(tag: object) -> None:
            self._raised = str(tag)
            raise _RaisedTag(self._raised)

        # Not deterministic: SQLite may evaluate a deterministic constant call once, up front,
        # even inside a CASE branch that no row takes.
        self._connection.create_function(RAISE_FUNCTION, 1, rexpr_raise, deterministic=False)
        self._version_text = sqlite3.sqlite_version

    def _settings(self) -> dict[str, str]:
        encoding = self._connection.execute("PRAGMA encoding").fetchone()[0]
        return {"encoding": str(encoding), "time zone": "UTC (date functions use UTC unless 'localtime' is given)",
                "collation": "BINARY (code point order for UTF-8)", "functions": RAISE_FUNCTION}

    def _load(self, layout: InputLayout) -> Losses:
        connection = self._connection
        columns = [(c.name, COLUMN_TYPES[c.kind]) for c in layout.columns]
        columns.append((layout.row_number, "INTEGER PRIMARY KEY"))
        connection.execute(drop_table(TABLE_NAME, self.dialect))
        try:
            connection.execute(create_table(TABLE_NAME, columns, self.dialect, suffix=" STRICT"))
        except sqlite3.Error as exc:
            raise UnstorableInput(f"sqlite cannot create the input table: {exc}", engine=self.name,
                                  engine_message=str(exc)) from None
        data = [_stored_values(c.kind, c.values.to_pylist()) for c in layout.columns]
        data.append(range(layout.row_count))
        placeholders = ", ".join("?" for _ in columns)
        connection.execute("BEGIN")
        try:
            connection.executemany(f"INSERT INTO {quoted(TABLE_NAME, self.dialect)} VALUES ({placeholders})",
                                   zip(*data))
        except sqlite3.Error as exc:
            connection.execute("ROLLBACK")
            raise UnstorableInput(f"sqlite cannot store the input: {exc}", engine=self.name,
                                  engine_message=str(exc)) from None
        connection.execute("COMMIT")
        losses: Losses = {}
        for column in layout.columns:
            if column.kind is Kind.FLOAT64:
                found = float_rows(column.values, nan=True, negative_zero=True)
                if found:
                    losses[column.name] = {row: {"NaN": "NaN stored as NULL", "-0.0": "-0.0 stored as 0.0"}[label]
                                           for row, label in found.items()}
        return losses

    def _stored_names(self, sql: str) -> list[str]:
        return [d[0] for d in self._connection.execute(sql).description]

    def _fetch(self, sql: str, column_count: int) -> Sequence[object]:
        self._raised = None
        try:
            rows = self._connection.execute(sql).fetchall()
        except sqlite3.Error as exc:
            raise StatementFailed(self._failure(exc), sql) from None
        return list(zip(*rows)) if rows else [() for _ in range(column_count)]

    def _failure(self, exc: BaseException) -> DriverFailure:
        failure = failure_from_exception(self.name, exc, tag=self._raised)
        if self._raised is None:
            return failure
        return dataclasses.replace(failure, message=f"{failure.message}: {self._raised}")


def _stored_values(kind: Kind, values: list[object]) -> list[object]:
    if kind is Kind.BOOL:
        return [None if v is None else int(v) for v in values]  # type: ignore[call-overload]
    if kind is Kind.DATE:
        return [None if v is None else v.isoformat() for v in values]  # type: ignore[union-attr]
    if kind is Kind.TIMESTAMP:
        return [None if v is None else _timestamp_text(v) for v in values]  # type: ignore[arg-type]
    return values


def _timestamp_text(value: dt.datetime) -> str:
    return value.isoformat(sep=" ", timespec="microseconds")
