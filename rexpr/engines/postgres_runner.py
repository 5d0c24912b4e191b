"""PostgreSQL through psycopg 3, loaded with binary COPY (exact float64 bits, NaN and ±inf
included), read back with binary results.

Storage: bigint, double precision, boolean, text COLLATE "C" (so comparisons with a column
are by code point whatever the database collation), date, timestamp(6) without time zone.

Limits, not hidden: text cannot contain NUL (U+0000), so such input is refused with
``engine_cannot_store`` before anything is sent; column names longer than 63 bytes would be
truncated by the server, which the name check refuses the same way.
"""

from __future__ import annotations

from typing import Any, Sequence

from rexpr.engines.base import Losses, Runner
from rexpr.engines.failures import StatementFailed, UnstorableInput
from rexpr.engines.layout import TABLE_NAME, InputLayout, rows_containing
from rexpr.engines.mapping import ValueRules
from rexpr.engines.settings import ServerSettings, server_settings
from rexpr.engines.statement import create_table, drop_table, quoted
from rexpr.errors import EngineUnavailable
from rexpr.sql.dialects.postgres import PROFILE
from rexpr.types import Kind

COLUMN_TYPES = {Kind.BOOL: "boolean", Kind.INT64: "bigint", Kind.FLOAT64: "double precision",
                Kind.STRING: 'text COLLATE "C"', Kind.DATE: "date", Kind.TIMESTAMP: "timestamp(6)"}
_COPY_TYPES = {Kind.BOOL: "bool", Kind.INT64: "int8", Kind.FLOAT64: "float8", Kind.STRING: "text",
               Kind.DATE: "date", Kind.TIMESTAMP: "timestamp"}
SESSION = PROFILE.session_settings  # the settings the lowering documents are the ones applied
_REPORTED = ("TimeZone", "extra_float_digits", "standard_conforming_strings", "DateStyle", "IntervalStyle",
             "client_encoding", "server_encoding", "lc_collate", "lc_ctype", "statement_timeout")


class PostgresRunner(Runner):
    name = "postgres"
    dialect = "postgres"
    rules = ValueRules(exact_decimals=True)
    max_items = 1664  # MaxTupleAttributeNumber: target-list entries per query (PostgreSQL source, from memory)
    notes = (
        "Text cannot contain NUL (U+0000): such input is refused (engine_cannot_store).",
        "Column names over 63 bytes would be truncated by the server: refused (engine_cannot_store).",
        'Text columns use COLLATE "C" (code point order); literals compared with literals use the '
        "database collation (see lc_collate).",
        "numeric results map to int64 or float64 only when exact.",
    )

    def __init__(self, settings: ServerSettings | None = None) -> None:
        super().__init__()
        self.settings = settings or server_settings("postgres")

    def _open(self) -> Any:
        try:
            import psycopg
        except ImportError as exc:
            raise EngineUnavailable(f"postgres: psycopg is not installed ({exc})") from None
        s = self.settings
        try:
            # libpq's connect_timeout is whole seconds, at least 2.
            return psycopg.connect(host=s.host, port=s.port, user=s.user, password=s.password or None,
                                   dbname=s.database, connect_timeout=max(2, round(s.connect_timeout)),
                                   autocommit=True, application_name="rexpr",
                                   # The input table is recreated with other columns between runs:
                                   # a server-side prepared statement over it would go stale.
                                   prepare_threshold=None)
        except psycopg.Error as exc:
            first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
            raise EngineUnavailable(f"postgres at {s.describe()} is not reachable: {first}") from None

    def _configure(self) -> None:
        connection = self._connection
        for statement in SESSION:
            connection.execute(statement)
        connection.execute(f"SET statement_timeout = {int(self.settings.statement_timeout * 1000)}")
        self._version_text = str(connection.execute("SHOW server_version").fetchone()[0])

    def _settings(self) -> dict[str, str]:
        return {name: str(self._connection.execute("SELECT current_setting(%s)", (name,)).fetchone()[0])
                for name in _REPORTED}

    def _load(self, layout: InputLayout) -> Losses:
        for column in layout.columns:
            if column.kind is Kind.STRING:
                rows = rows_containing(column.values, "\x00")
                if rows:
                    raise UnstorableInput(f"postgres text cannot contain NUL (U+0000): column {column.name!r} "
                                          f"has it in {len(rows)} row(s), first row {rows[0]}", engine=self.name)
            if "\x00" in column.name:
                raise UnstorableInput(f"postgres names cannot contain NUL: {column.name!r}", engine=self.name)
        connection = self._connection
        columns = [(c.name, COLUMN_TYPES[c.kind]) for c in layout.columns]
        columns.append((layout.row_number, "bigint PRIMARY KEY"))
        connection.execute(drop_table(TABLE_NAME, self.dialect))
        try:
            connection.execute(create_table(TABLE_NAME, columns, self.dialect))
            with connection.cursor() as cursor:
                with cursor.copy(f"COPY {quoted(TABLE_NAME, self.dialect)} FROM STDIN (FORMAT BINARY)") as copy:
                    copy.set_types([_COPY_TYPES[c.kind] for c in layout.columns] + ["int8"])
                    for row in zip(*[c.values.to_pylist() for c in layout.columns], range(layout.row_count)):
                        copy.write_row(row)
        except Exception as exc:  # noqa: BLE001 - psycopg errors and encoding errors alike
            raise UnstorableInput(f"postgres cannot load the input: {exc}", engine=self.name,
                                  engine_message=str(exc)) from None
        return {}

    def _stored_names(self, sql: str) -> list[str]:
        with self._connection.cursor() as cursor:
            cursor.execute(sql)
            return [d.name for d in cursor.description]

    def _fetch(self, sql: str, column_count: int) -> Sequence[object]:
        try:
            with self._connection.cursor(binary=True) as cursor:
                cursor.execute(sql)
                rows = cursor.fetchall()
        except Exception as exc:  # noqa: BLE001 - every driver error is examined by the bisect
            raise StatementFailed(self._failure(exc), sql) from None
        return list(zip(*rows)) if rows else [() for _ in range(column_count)]
