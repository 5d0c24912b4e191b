"""The one interface every engine runner offers, and the evaluation flow they share.

    runner.availability() -> Availability(available, reason, version)
    runner.evaluate(table, items) -> [EngineEvaluation, ...]   one per SqlItem, in order
    runner.session_info() -> SessionInfo(engine, version, settings, notes)
    runner.close()

``evaluate`` loads the Arrow table as a temporary table (see :mod:`rexpr.engines.layout`), runs
every item over every row in ONE statement, and, when that fails, bisects
(:mod:`rexpr.engines.locate`) so each (row, item) gets a value or a classified row error, the
shape the reference evaluator gives, or an :class:`~rexpr.values.EngineLimit` when the engine
cannot represent a value the row reaches (kept apart in ``limits``; null in the values). Engine values are mapped back to the item's canonical
type (:mod:`rexpr.engines.mapping`); what does not map losslessly is kept visible in
``type_mismatches``. Input values the engine cannot hold are either refused
(:class:`~rexpr.engines.failures.UnstorableInput`) or, where the engine turns them into
something else on storage, listed per row in ``input_losses``.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass, field
from typing import Any, ClassVar, Mapping, Sequence

import pyarrow as pa
from sqlglot import exp

from rexpr.engines.failures import (DriverFailure, EngineError, StatementFailed, UnstorableInput,
                                    classify_failure, failure_from_exception, row_outcome)
from rexpr.engines.layout import TABLE_NAME, InputLayout, layout_of, row_keys
from rexpr.engines.locate import DEFAULT_MAX_STATEMENTS, ItemOutcome, locate
from rexpr.engines.mapping import TypeMismatch, ValueRules, map_values
from rexpr.engines.statement import SelectBuilder, probe_names
from rexpr.errors import EngineUnavailable
from rexpr.evaluation import Evaluation
from rexpr.schema import to_arrow_type
from rexpr.types import DataType
from rexpr.values import EngineLimit, RowError

__all__ = ["Availability", "EngineEvaluation", "Runner", "SessionInfo", "SqlItem", "classify_failure"]

# Column losses: column name -> row -> what the engine stored instead, e.g. "NaN stored as NULL".
Losses = dict[str, dict[int, str]]


@dataclass(frozen=True)
class SqlItem:
    alias: str                   # the caller's name for the result; not sent to the engine
    expression: exp.Expression   # a SELECT-list expression over columns named by dotted field path
    type: DataType               # the canonical type the result must map to
    # Printing a large faithful tree costs milliseconds, and the caller, the statement builder
    # and the result all want the text: printed once per dialect.
    _printed: dict[str, str] = field(default_factory=dict, compare=False, repr=False)

    def text(self, dialect: str) -> str:
        """The expression as the dialect's SQL text (printed once, then remembered)."""
        printed = self._printed.get(dialect)
        if printed is None:
            printed = self._printed[dialect] = self.expression.sql(dialect=dialect)
        return printed


@dataclass(frozen=True)
class Availability:
    available: bool
    reason: str = ""
    version: str | None = None


@dataclass(frozen=True)
class SessionInfo:
    engine: str
    version: str
    settings: Mapping[str, str]  # read back from the engine, not what we asked for
    notes: tuple[str, ...] = ()  # engine limits and how they are handled


@dataclass(frozen=True)
class EngineEvaluation:
    alias: str
    evaluation: Evaluation                                                # values and row errors
    type_mismatches: dict[int, TypeMismatch] = field(default_factory=dict)  # null in values
    input_losses: dict[int, str] = field(default_factory=dict)             # rows read altered input
    sql: str = ""                                                         # the item in the engine's SQL
    statements: int = 1                                                   # statements the batch took
    limits: dict[int, EngineLimit] = field(default_factory=dict)           # null in values

    def to_pylist(self) -> list[object]:
        """Values with :class:`RowError`, :class:`EngineLimit` and :class:`TypeMismatch` in
        place, so neither a limit nor a mismatch can pass for a null when compared."""
        out = self.evaluation.to_pylist()
        for row, limit in self.limits.items():
            out[row] = limit
        for row, mismatch in self.type_mismatches.items():
            out[row] = mismatch
        return out


class Runner(ABC):
    """A connection to one engine plus the shared evaluate flow. Subclasses supply the hooks."""

    name: ClassVar[str]
    dialect: ClassVar[str]                 # sqlglot dialect the SQL is printed in
    rules: ClassVar[ValueRules] = ValueRules()
    max_items: ClassVar[int] = 1000          # select-list entries per statement the engine accepts
    notes: ClassVar[tuple[str, ...]] = ()

    def __init__(self) -> None:
        self._connection: Any = None
        self._owned = True
        self._version_text = ""

    # ------------------------------------------------------------------ the interface
    def availability(self) -> Availability:
        try:
            self._ensure_open()
        except EngineUnavailable as exc:
            return Availability(False, exc.message, None)
        return Availability(True, "", self._version_text)

    def evaluate(self, table: pa.Table | pa.RecordBatch, items: Sequence[SqlItem], *,
                 items_per_statement: int | None = None,
                 max_statements: int = DEFAULT_MAX_STATEMENTS) -> list[EngineEvaluation]:
        """Every item over every row; items go in statements of at most ``items_per_statement``
        (default and cap: the engine's select-list limit, ``max_items``)."""
        self._ensure_open()
        layout = layout_of(table)
        losses = self._load(layout)
        self._verify_names(layout)
        _check_columns(self.name, items, layout)
        builder = SelectBuilder([item.text(self.dialect) for item in items], TABLE_NAME, layout.row_number,
                                self.dialect)
        row_count = layout.row_count
        per_statement = max(1, min(items_per_statement or self.max_items, self.max_items))
        results: list[EngineEvaluation] = []
        budget = max_statements
        for first in range(0, len(items), per_statement):
            group = range(first, min(first + per_statement, len(items)))

            def run(indexes: Sequence[int], lo: int, hi: int, group: range = group) -> Sequence[object]:
                sql = builder.sql([group[i] for i in indexes], None if (lo, hi) == (0, row_count) else (lo, hi))
                columns = self._fetch(sql, len(indexes))
                for column in columns:
                    if len(column) != hi - lo:  # type: ignore[arg-type]
                        raise EngineError(f"{self.name} returned {len(column)} rows for {hi - lo}",  # type: ignore[arg-type]
                                          engine=self.name, sql=sql)
                return columns

            def probe(indexes: Sequence[int], lo: int, hi: int,
                      group: range = group) -> Sequence[tuple[object, Sequence[int]]]:
                # Called at most once per group, after a failed statement: printed only then.
                builder = SelectBuilder([self._probe_text(items[group[i]].text(self.dialect)) for i in indexes],
                                        TABLE_NAME, layout.row_number, self.dialect)
                sql = builder.sql(range(len(indexes)), None if (lo, hi) == (0, row_count) else (lo, hi))
                columns = self._fetch(sql, len(indexes))
                if any(len(column) != hi - lo for column in columns):  # type: ignore[arg-type]
                    raise EngineError(f"{self.name} returned the wrong number of rows for a probe",
                                      engine=self.name, sql=sql)
                return [self._probed(column) for column in columns]

            def keys(index: int, group: range = group) -> list[tuple]:
                expression = items[group[index]].expression
                return row_keys(layout, {c.name for c in expression.find_all(exp.Column) if not c.table})

            located = locate(run, self._row_error, len(group), row_count, engine=self.name, max_statements=budget,
                             probe=probe if self.probes_rows else None, row_keys=keys)
            budget -= located.statements
            results += [self._assemble(items[i], outcome, row_count, losses, located.statements)
                        for i, outcome in zip(group, located.outcomes)]
        return results

    def session_info(self) -> SessionInfo:
        self._ensure_open()
        return SessionInfo(self.name, self._version_text, self._settings(), self.notes)

    def close(self) -> None:
        connection, self._connection = self._connection, None
        if connection is not None and self._owned:
            try:
                connection.close()
            except Exception:  # noqa: BLE001 - a connection that is already gone is closed
                pass

    def __enter__(self) -> "Runner":
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()

    def connect(self) -> Any:
        """A new connection of the caller's own (to close), opened as the runner opens its own:
        same timeouts, driver options and error text. No session settings are applied."""
        return self._open()

    def adopt(self, connection: Any) -> "Runner":
        """Run on a connection the caller opened (and will close); applies the session settings."""
        self.close()
        self._connection, self._owned = connection, False
        self._configure()
        return self

    # ------------------------------------------------------------------ hooks
    @abstractmethod
    def _open(self) -> Any:
        """A new connection; raises EngineUnavailable with the reason when there is none."""

    @abstractmethod
    def _configure(self) -> None:
        """Apply the session settings the SQL assumes to ``self._connection``; set ``_version_text``."""

    @abstractmethod
    def _settings(self) -> dict[str, str]:
        """The session settings in force, read back from the engine."""

    @abstractmethod
    def _load(self, layout: InputLayout) -> Losses:
        """(Re)create the input table from the layout; return the values stored altered."""

    @abstractmethod
    def _fetch(self, sql: str, column_count: int) -> Sequence[object]:
        """Run one SELECT; one engine-native column per result column. Raises StatementFailed."""

    def _map(self, column: object, data_type: DataType) -> tuple[pa.Array, dict[int, TypeMismatch]]:
        return map_values(column, data_type, self.rules)  # type: ignore[arg-type]

    # An engine that can evaluate an expression per row without failing the statement sets
    # ``probes_rows`` and implements the two hooks below (see rexpr.engines.locate).
    probes_rows = False

    def _probe_text(self, text: str) -> str:
        """SQL whose value marks the rows where the expression ``text`` (as printed) fails."""
        raise NotImplementedError

    def _probed(self, column: object) -> tuple[object, Sequence[int]]:
        """The values column of a probe's result column, and the rows where it failed."""
        raise NotImplementedError

    def _failure(self, exc: BaseException) -> DriverFailure:
        return failure_from_exception(self.name, exc)

    # ------------------------------------------------------------------ shared steps
    def _ensure_open(self) -> None:
        if self._connection is None:
            self._connection, self._owned = self._open(), True
            try:
                self._configure()
            except Exception:
                self.close()
                raise

    def _verify_names(self, layout: InputLayout) -> None:
        """Engines rename (DuckDB adds '_1' to a name that differs only in case) or truncate
        (PostgreSQL at 63 bytes) without failing; a renamed column would read the wrong data."""
        stored = self._stored_names(probe_names(TABLE_NAME, self.dialect))
        if tuple(stored) != layout.names:
            wanted = next((w for w, s in zip(layout.names, stored) if w != s), None)
            got = next((s for w, s in zip(layout.names, stored) if w != s), None)
            raise UnstorableInput(f"{self.name} stored column {wanted!r} as {got!r} (names that differ only in "
                                  "case, or longer than the engine allows, cannot be told apart there)",
                                  engine=self.name)

    @abstractmethod
    def _stored_names(self, sql: str) -> list[str]:
        """Column names of the result of ``sql``, as the engine reports them."""

    def _row_error(self, failed: StatementFailed) -> RowError | EngineLimit:
        outcome = row_outcome(failed.failure)
        if outcome is None:
            raise EngineError(f"{self.name} failed a statement, and the failure is not a per-row error: "
                              f"{failed.failure.message}", engine=self.name, sql=failed.sql,
                              engine_message=failed.failure.message)
        return outcome

    def _assemble(self, item: SqlItem, outcome: ItemOutcome, row_count: int, losses: Losses,
                  statements: int) -> EngineEvaluation:
        target = to_arrow_type(item.type)
        segments: list[tuple[int, object | None]] = [(s, c) for s, c in outcome.pieces if c is not None]
        segments += [(row, None) for row in outcome.errors]
        segments.sort(key=lambda s: s[0])
        arrays: list[pa.Array] = []
        mismatches: dict[int, TypeMismatch] = {}
        for start, column in segments:
            if column is None:
                arrays.append(pa.nulls(1, target))
                continue
            array, found = self._map(column, item.type)
            arrays.append(array)
            mismatches.update({start + row: m for row, m in found.items()})
        values = arrays[0] if len(arrays) == 1 else pa.concat_arrays(arrays) if arrays else pa.array([], target)
        if len(values) != row_count:
            raise EngineError(f"{self.name}: results for item {item.alias!r} cover {len(values)} of "
                              f"{row_count} rows", engine=self.name)
        errors = {row: e for row, e in outcome.errors.items() if isinstance(e, RowError)}
        limits = {row: e for row, e in outcome.errors.items() if isinstance(e, EngineLimit)}
        return EngineEvaluation(item.alias, Evaluation(item.type, values, errors), mismatches,
                                _item_losses(item, losses), item.text(self.dialect), statements,
                                limits)


def _check_columns(engine: str, items: Sequence[SqlItem], layout: InputLayout) -> None:
    """Every column an item names must be an input column: SQLite reads a double-quoted name it
    cannot resolve as a string literal, which would be a silent wrong answer."""
    known = set(layout.names)
    for item in items:
        # Qualified names and names the item defines itself (derived tables the lowering binds
        # values with) are the item's own business.
        defined = {alias.alias for alias in item.expression.find_all(exp.Alias)}
        for node in item.expression.find_all(exp.Column):
            if not node.table and node.name not in known and node.name not in defined:
                raise EngineError(f"item {item.alias!r} reads column {node.name!r}, which the input does not have",
                                  engine=engine, sql=item.expression.sql(), code="unknown_column")


def _item_losses(item: SqlItem, losses: Losses) -> dict[int, str]:
    if not losses:
        return {}
    read = {column.name for column in item.expression.find_all(exp.Column) if not column.table}
    out: dict[int, str] = {}
    for name in sorted(read & set(losses)):
        for row, what in losses[name].items():
            out[row] = f"{out[row]}; {name}: {what}" if row in out else f"{name}: {what}"
    return dict(sorted(out.items()))

