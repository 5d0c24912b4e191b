"""MariaDB through PyMySQL, loaded by ``executemany`` (which PyMySQL sends as multi-row
INSERT ... VALUES statements up to max_allowed_packet).

Storage: BIGINT, DOUBLE, BOOLEAN (which is TINYINT(1)), LONGTEXT CHARACTER SET utf8mb4 COLLATE
utf8mb4_bin (code point order), DATE, DATETIME(6). The INSERT names no columns, so field names
never pass through PyMySQL's ``%`` formatting.

Limits, not hidden: DOUBLE holds no NaN or infinity, and -0.0 arrives as 0.0; those values are
stored as NULL / 0.0 and listed per row in ``input_losses``. MariaDB refuses names with
characters outside the Basic Multilingual Plane, names over 64 characters, names ending in a
space, and names that differ only in case; each is refused with ``engine_cannot_store``.

A SELECT that divides by zero yields NULL with warning 1365 (ERROR_FOR_DIVISION_BY_ZERO only
affects writes): the runner reports the NULL the engine computed; the lowering must guard.

A result DOUBLE cannot hold (NaN, ±inf) fails with 1690 "DOUBLE value is out of range"; that, and
the lowering's ``rexpr-limit:non_finite`` tag, become per-row engine limits (``limits``).
"""

from __future__ import annotations

import math
from typing import Any, Sequence

from rexpr.engines.base import Losses, Runner
from rexpr.engines.failures import StatementFailed, UnstorableInput
from rexpr.engines.layout import TABLE_NAME, InputLayout, float_rows
from rexpr.engines.mapping import ValueRules
from rexpr.engines.settings import ServerSettings, server_settings
from rexpr.engines.statement import create_table, drop_table, quoted
from rexpr.sql.dialects.mariadb import PROFILE
from rexpr.errors import EngineUnavailable
from rexpr.types import Kind

COLUMN_TYPES = {Kind.BOOL: "BOOLEAN", Kind.INT64: "BIGINT", Kind.FLOAT64: "DOUBLE",
                Kind.STRING: "LONGTEXT CHARACTER SET utf8mb4 COLLATE utf8mb4_bin", Kind.DATE: "DATE",
                Kind.TIMESTAMP: "DATETIME(6)"}
SESSION = PROFILE.session_settings  # the settings the lowering documents are the ones applied
_REPORTED = ("version", "sql_mode", "time_zone", "character_set_connection", "collation_connection",
             "character_set_results", "div_precision_increment", "max_statement_time", "max_allowed_packet")
_INSERT_BATCH = 5000  # rows per executemany call; PyMySQL splits further by packet size


class MariaDBRunner(Runner):
    name = "mariadb"
    dialect = "mysql"
    rules = ValueRules(bool_as_integer=True, exact_decimals=True)
    max_items = 4096  # columns per result set (MariaDB knowledge base, from memory)
    notes = (
        "DOUBLE holds no NaN or ±inf (stored as NULL) and -0.0 is stored as 0.0: listed in input_losses.",
        "BOOLEAN is TINYINT(1): an integer 0/1 maps to a bool; other integers for a bool item are mismatches.",
        "DECIMAL results map to int64/float64 only when exact.",
        "Text is utf8mb4 with utf8mb4_bin collation (code point order).",
        "Names outside the BMP, over 64 characters, ending in a space, or equal ignoring case are refused.",
        "Division by zero in a SELECT is NULL plus warning 1365, not an error.",
        "A NaN or ±inf result (1690 'DOUBLE value is out of range', or the lowering's 'rexpr-limit:non_finite') "
        "is an engine-limit row, not an error.",
    )

    def __init__(self, settings: ServerSettings | None = None) -> None:
        super().__init__()
        self.settings = settings or server_settings("mariadb")

    def _open(self) -> Any:
        try:
            import pymysql
        except ImportError as exc:
            raise EngineUnavailable(f"mariadb: PyMySQL is not installed ({exc})") from None
        s = self.settings
        try:
            # PyMySQL reads the server greeting under read_timeout, not connect_timeout: use the
            # short timeout until the session is up, so a silent peer cannot stall us.
            connection = pymysql.connect(host=s.host, port=s.port, user=s.user, password=s.password,
                                         database=s.database, charset="utf8mb4", collation="utf8mb4_bin",
                                         autocommit=True, connect_timeout=s.connect_timeout,
                                         read_timeout=s.connect_timeout, write_timeout=s.connect_timeout)
        except pymysql.Error as exc:
            raise EngineUnavailable(f"mariadb at {s.describe()} is not reachable: {exc}") from None
        # Statements may run up to statement_timeout (the server cancels them then); the client
        # waits a little longer so the server's own error arrives first.
        connection._read_timeout = connection._write_timeout = s.statement_timeout + 10
        return connection

    def _configure(self) -> None:
        with self._connection.cursor() as cursor:
            for statement in SESSION:
                cursor.execute(statement)
            cursor.execute(f"SET SESSION max_statement_time = {float(self.settings.statement_timeout)!r}")
            cursor.execute("SELECT VERSION()")
            self._version_text = str(cursor.fetchone()[0])

    def _settings(self) -> dict[str, str]:
        with self._connection.cursor() as cursor:
            cursor.execute("SELECT " + ", ".join(f"@@{name}" for name in _REPORTED))
            row = cursor.fetchone()
        return {name: str(value) for name, value in zip(_REPORTED, row)}

    def _load(self, layout: InputLayout) -> Losses:
        columns = [(c.name, COLUMN_TYPES[c.kind]) for c in layout.columns]
        columns.append((layout.row_number, "BIGINT PRIMARY KEY"))
        losses: Losses = {}
        data: list[Any] = []
        for column in layout.columns:
            values = column.values.to_pylist()
            if column.kind is Kind.FLOAT64:
                found = float_rows(column.values, nan=True, infinite=True, negative_zero=True)
                if found:
                    losses[column.name] = {row: f"{label} stored as {'0.0' if label == '-0.0' else 'NULL'}"
                                           for row, label in found.items()}
                    values = [None if v is not None and not math.isfinite(v) else v for v in values]
            data.append(values)
        data.append(range(layout.row_count))
        placeholders = ", ".join("%s" for _ in columns)
        insert = f"INSERT INTO {quoted(TABLE_NAME, self.dialect)} VALUES ({placeholders})"
        rows = list(zip(*data))
        try:
            with self._connection.cursor() as cursor:
                cursor.execute(drop_table(TABLE_NAME, self.dialect))
                cursor.execute(create_table(TABLE_NAME, columns, self.dialect))
                for start in range(0, len(rows), _INSERT_BATCH):
                    cursor.executemany(insert, rows[start:start + _INSERT_BATCH])
        except Exception as exc:  # noqa: BLE001 - PyMySQL errors carry (errno, message)
            raise UnstorableInput(f"mariadb cannot load the input: {exc}", engine=self.name,
                                  engine_message=str(exc)) from None
        return losses

    def _stored_names(self, sql: str) -> list[str]:
        with self._connection.cursor() as cursor:
            cursor.execute(sql)
            return [d[0] for d in cursor.description]

    def _fetch(self, sql: str, column_count: int) -> Sequence[object]:
        try:
            with self._connection.cursor() as cursor:
                cursor.execute(sql)
                rows = cursor.fetchall()
        except Exception as exc:  # noqa: BLE001 - every driver error is examined by the bisect
            raise StatementFailed(self._failure(exc), sql) from None
        return list(zip(*rows)) if rows else [() for _ in range(column_count)]
