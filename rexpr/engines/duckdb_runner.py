"""DuckDB, in process. The Arrow table is registered and copied into a temporary table by
DuckDB itself (no row passes through Python); results come back as Arrow through
``con.execute(...).to_arrow_table()`` (no row passes through Python either).

Statements go through ``execute()``, not the relation API: ``con.sql()`` parses and binds a
statement before it runs it, which made each of the thousands of small statements that locate
failing rows about a third slower (measured on client v2.0.1). Every result is read to the
end before the next statement, because ``execute()`` and ``sql()`` do not mix on one connection
while a result is unfinished.
"""

from __future__ import annotations

import warnings
from typing import Any, Sequence

import pyarrow as pa
import pyarrow.compute as pc

from rexpr.engines.base import Losses, Runner
from rexpr.engines.failures import StatementFailed, UnstorableInput
from rexpr.engines.layout import TABLE_NAME, InputLayout
from rexpr.engines.mapping import TypeMismatch, ValueRules, map_arrow
from rexpr.engines.statement import drop_table, quoted
from rexpr.errors import EngineUnavailable
from rexpr.sql.dialects.duckdb import PROFILE
from rexpr.types import DataType

_SOURCE = "rexpr_source"
# The client warns that Arrow out of an execute() result is copied once inside DuckDB; that copy
# is cheaper than the relation API's second bind. Only warnings raised for this module's calls.
warnings.filterwarnings("ignore", message="Arrow output on a DB-API result", category=UserWarning,
                        module=__name__)
# The common-subexpression pass computes a repeated subtree once, before the expression it was
# taken from, so an operand that raises can beat an earlier one's error (measured on v2.0.1):
# the faithful SQL assumes it is off (rexpr.sql.dialects.duckdb).
SESSION = PROFILE.session_settings  # the settings the lowering documents are the ones applied
# Settings the SQL may depend on; each is read back from duckdb_settings() when it exists.
_REPORTED = ("TimeZone", "disabled_optimizers", "default_collation", "integer_division", "threads", "default_null_order",
             "default_order", "errors_as_json")


class DuckDBRunner(Runner):
    name = "duckdb"
    dialect = "duckdb"
    rules = ValueRules(exact_decimals=True)
    max_items = 1000  # no engine limit; keeps one statement a reasonable size
    notes = (
        "Column names are case-insensitive: a name that differs from another only in case is renamed "
        "by DuckDB, which the runner detects and refuses (engine_cannot_store).",
        "Per-row errors: error('rexpr:<class>') raises InvalidInputException with the tag in the message.",
    )

    def _open(self) -> Any:
        try:
            import duckdb
        except ImportError as exc:
            raise EngineUnavailable(f"duckdb cannot be imported: {exc}") from None
        return duckdb.connect(":memory:")

    def _configure(self) -> None:
        for statement in SESSION:
            self._connection.sql(statement)
        self._version_text = str(self._connection.sql("SELECT version()").fetchall()[0][0])

    def _settings(self) -> dict[str, str]:
        names = ", ".join("'" + n.replace("'", "''") + "'" for n in _REPORTED)
        rows = self._connection.sql(f"SELECT name, value FROM duckdb_settings() WHERE name IN ({names}) "
                                    "ORDER BY name").fetchall()
        return {str(name): str(value) for name, value in rows}

    def _load(self, layout: InputLayout) -> Losses:
        connection = self._connection
        source = pa.table([c.values for c in layout.columns] + [layout.row_numbers()], names=list(layout.names))
        connection.sql(drop_table(TABLE_NAME, self.dialect))
        connection.register(_SOURCE, source)
        try:
            connection.sql(f"CREATE TEMPORARY TABLE {quoted(TABLE_NAME, self.dialect)} AS "
                           f"SELECT * FROM {quoted(_SOURCE, self.dialect)}")
        except Exception as exc:  # noqa: BLE001 - the driver's error classes are not importable types here
            raise UnstorableInput(f"duckdb cannot load the input: {exc}", engine=self.name,
                                  engine_message=str(exc)) from None
        finally:
            connection.unregister(_SOURCE)
        return {}

    def _stored_names(self, sql: str) -> list[str]:
        return list(self._connection.sql(sql).columns)

    def _fetch(self, sql: str, column_count: int) -> Sequence[object]:
        try:
            result = self._connection.execute(sql).to_arrow_table()
        except Exception as exc:  # noqa: BLE001 - every driver error is examined by the bisect
            raise StatementFailed(self._failure(exc), sql) from None
        return [result.column(i) for i in range(result.num_columns)]

    # TRY(x) is null on the rows where x raises (and only there: the struct around x is not
    # null even when x is), so one statement finds every failing row.
    probes_rows = True

    def _probe_text(self, text: str) -> str:
        # The item is one printed expression, which needs no parentheses as an argument.
        return f"TRY(STRUCT_PACK(v := {text}))"

    def _probed(self, column: object) -> tuple[object, Sequence[int]]:
        chunked: pa.ChunkedArray = column  # type: ignore[assignment]
        failing = pc.indices_nonzero(pc.is_null(chunked)).to_pylist()
        return pc.struct_field(chunked, "v"), failing

    def _map(self, column: object, data_type: DataType) -> tuple[pa.Array, dict[int, TypeMismatch]]:
        return map_arrow(column, data_type, self.rules)  # type: ignore[arg-type]
