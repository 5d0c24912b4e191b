"""SQL on a connection the caller opened (the planner's pushed-down queries).

The session settings the lowered SQL assumes (time zone, sql_mode, names, ...) are applied to
that connection. Results are mapped to the requested Arrow schema with the engine's rules; a
value that does not map is an error here, since a table has no place to keep it visible.
"""

from __future__ import annotations

import pyarrow as pa

from rexpr.engines.base import Runner
from rexpr.engines.failures import EngineError, StatementFailed, error_for
from rexpr.schema import from_arrow_type


class BorrowedSession:
    def __init__(self, runner: Runner) -> None:
        self.runner = runner

    def fetch_arrow(self, sql: str, schema: pa.Schema) -> pa.Table:
        runner = self.runner
        try:
            columns = runner._fetch(sql, len(schema))
        except StatementFailed as failed:
            raise error_for(failed.failure, sql) from None
        if len(columns) != len(schema):
            raise EngineError(f"{runner.name} returned {len(columns)} columns, expected {len(schema)}",
                              engine=runner.name, sql=sql)
        arrays = []
        for field, column in zip(schema, columns):
            data_type = from_arrow_type(field.type, field.nullable, field.name)
            array, mismatches = runner._map(column, data_type)
            if mismatches:
                row, mismatch = next(iter(mismatches.items()))
                raise EngineError(f"{runner.name}: column {field.name!r} row {row} holds {mismatch.shown}, "
                                  f"which is not exactly a {data_type.name}", engine=runner.name, sql=sql)
            arrays.append(array)
        return pa.Table.from_arrays(arrays, schema=schema)

