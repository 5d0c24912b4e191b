"""The SQL to paste for a shrunk repro: one statement that runs the expression on its one row.

    -- rexpr repro: duckdb, native lowering; session: ...
    SELECT <expression> AS "value" FROM (SELECT <value> AS "x", ...) AS "rexpr_input"

The row values are lowered as literals of their column types by the same lowering, so the
statement needs nothing but the session settings the header names.
"""

from __future__ import annotations

import json

from rexpr.errors import NotPushable
from rexpr.schema import Schema
from rexpr.typed import TLiteral, Typed, fields_read


def paste_sql(tree: Typed, row: dict[str, object], schema: Schema, engine: str, lowering: str,
              settings: object = None) -> str | None:
    """The statement, or None when the lowering refuses the expression or a row value."""
    from sqlglot import exp

    from rexpr.sql.lowering import dialect_of, lower

    dialect = dialect_of(engine).sqlglot_dialect
    try:
        expression = lower(tree, engine, lowering)  # type: ignore[arg-type]
        columns = []
        for path in fields_read(tree):
            data_type = schema.get(path[0])
            value: object = row.get(path[0])
            for part in path[1:]:
                data_type = data_type.field(part) if data_type is not None else None
                value = value.get(part) if isinstance(value, dict) else None
            if data_type is None:
                return None
            literal = lower(TLiteral(value, data_type.with_nullable(True), tree.span), engine, lowering)  # type: ignore[arg-type]
            columns.append(exp.alias_(literal, ".".join(path), quoted=True))
    except NotPushable:
        return None
    query = exp.select(exp.alias_(expression, "value", quoted=True))
    if columns:
        query = query.from_(exp.Subquery(this=exp.select(*columns), alias=exp.TableAlias(
            this=exp.to_identifier("rexpr_input", quoted=True))))
    header = f"-- rexpr repro: {engine}, {lowering} lowering"
    if settings:
        header += f"; session: {json.dumps(settings, ensure_ascii=False, default=str)}"
    return f"{header}\n{query.sql(dialect=dialect)}"
