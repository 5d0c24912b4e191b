"""Run a plan against a source: the source applies the pushed part, rexpr the residual.

Sources are DuckDB, SQLite, PostgreSQL and MariaDB tables (given a connection the caller
opened) and Parquet files or Arrow datasets (through ``pyarrow.dataset``, so the pushed part is a
dataset filter and row groups are skipped). Every execution reports what was read with and
without the pushdown, measured, not estimated, except that Parquet bytes come from the file
metadata of the row groups and columns actually scanned.

A pushed statement that reaches a value the source engine cannot represent (MariaDB DOUBLE has
no NaN or ±inf, SQLite's text functions stop at U+0000) fails with ``engine_limit``, naming the
pushed conjuncts: rexpr never reads a row whose answer the engine could not give.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import pyarrow as pa
import pyarrow.dataset as ds

from rexpr.api import CompiledExpression
from rexpr.errors import EvaluationFailed, InputProblem
from rexpr.planner.plan import DATASET_SOURCE, Plan
from rexpr.schema import Schema, to_arrow_type


@dataclass(frozen=True)
class TableSource:
    """A table in a SQL engine; ``connection`` is the caller's open DB-API / DuckDB connection."""

    engine: str
    table: str
    connection: Any


@dataclass(frozen=True)
class DatasetSource:
    """Parquet files or any ``pyarrow.dataset`` source (a path, a list of paths or a Dataset)."""

    data: Any


@dataclass(frozen=True)
class Execution:
    table: pa.Table          # the rows the whole filter keeps, with the requested columns
    rows_read: int           # rows the source returned to rexpr
    bytes_read: int
    rows_without_pushdown: int
    bytes_without_pushdown: int

    @property
    def saved_fraction(self) -> float:
        return 1 - self.bytes_read / self.bytes_without_pushdown if self.bytes_without_pushdown else 0.0


def _apply_residual(plan: Plan, table: pa.Table, schema: Schema) -> pa.Table:
    if plan.residual_tree is None:
        return table
    compiled = CompiledExpression(plan.residual or "", schema, plan.residual_tree)
    return compiled.filter(table, backend="auto")


def _columns_of(plan: Plan, requested: list[str] | None) -> list[str]:
    return requested if requested is not None else [c.split(".")[0] for c in plan.columns]


def execute(plan: Plan, schema: Schema, source: TableSource | DatasetSource,
            columns: list[str] | None = None, measure_baseline: bool = True) -> Execution:
    """Execute ``plan``; ``columns`` are the output columns (default: the plan's column list)."""
    top_level = list(dict.fromkeys(c.split(".")[0] for c in plan.columns))
    output = list(dict.fromkeys(columns if columns is not None else top_level))
    if isinstance(source, DatasetSource):
        if plan.source != DATASET_SOURCE:
            raise InputProblem(f"plan was made for {plan.source}, not for a dataset", code="wrong_source")
        return _execute_dataset(plan, schema, source, top_level, output, measure_baseline)
    if plan.source != source.engine:
        raise InputProblem(f"plan was made for {plan.source}, not for {source.engine}", code="wrong_source")
    return _execute_sql(plan, schema, source, top_level, output, measure_baseline)


# ------------------------------------------------------------------------------- datasets
def _scanned_bytes(dataset: ds.Dataset, columns: list[str], filter_expr: Any) -> int:
    """Compressed bytes of the projected columns in the row groups a scan with this filter reads."""
    total = 0
    for fragment in dataset.get_fragments(filter=filter_expr):
        if not isinstance(fragment, ds.ParquetFileFragment):
            continue
        groups = fragment.split_by_row_group(filter_expr) if filter_expr is not None else [fragment]
        metadata = fragment.metadata
        names = [metadata.schema.column(i).path.split(".")[0] for i in range(metadata.num_columns)]
        for group_fragment in groups:
            for info in group_fragment.row_groups:
                row_group = metadata.row_group(info.id)
                total += sum(row_group.column(i).total_compressed_size
                             for i, name in enumerate(names) if name in columns)
    return total


def _execute_dataset(plan: Plan, schema: Schema, source: DatasetSource, top_level: list[str],
                     output: list[str], measure_baseline: bool) -> Execution:
    dataset = source.data if isinstance(source.data, ds.Dataset) else ds.dataset(source.data, format="parquet")
    read = dataset.to_table(columns=top_level, filter=plan.dataset_filter)
    bytes_read = _scanned_bytes(dataset, top_level, plan.dataset_filter) or read.nbytes
    kept = _apply_residual(plan, read, schema).select(output)
    rows_all = bytes_all = 0
    if measure_baseline:
        rows_all = dataset.count_rows()
        bytes_all = _scanned_bytes(dataset, [f for f, _ in schema.fields], None) or dataset.to_table().nbytes
    return Execution(kept, read.num_rows, bytes_read, rows_all, bytes_all)


# ------------------------------------------------------------------------------ SQL tables
def _select_sql(plan: Plan, source: TableSource, columns: list[str], with_filter: bool) -> str:
    import sqlglot
    from sqlglot import exp

    from rexpr.sql.lowering import dialect_of

    dialect = dialect_of(source.engine)
    table = exp.to_table(source.table, dialect=dialect.sqlglot_dialect)
    query = sqlglot.select(*[exp.column(c, quoted=True) for c in columns]).from_(table)
    if with_filter and plan.pushed_sqlglot is not None:
        query = query.where(plan.pushed_sqlglot)
    return query.sql(dialect=dialect.sqlglot_dialect)


def _fetch(source: TableSource, sql: str, schema: Schema, columns: list[str]) -> pa.Table:
    from rexpr.engines import session_for_connection

    arrow_schema = pa.schema([pa.field(c, to_arrow_type(schema.get(c))) for c in columns])  # type: ignore[arg-type]
    try:
        return session_for_connection(source.engine, source.connection).fetch_arrow(sql, arrow_schema)
    except EvaluationFailed:
        raise
    except Exception as exc:  # noqa: BLE001 - driver errors become one typed error
        from rexpr.engines.base import classify_failure

        raise classify_failure(source.engine, exc, sql) from exc


def _execute_sql(plan: Plan, schema: Schema, source: TableSource, top_level: list[str], output: list[str],
                 measure_baseline: bool) -> Execution:
    from rexpr.engines.failures import EngineLimitReached

    try:
        read = _fetch(source, _select_sql(plan, source, top_level, True), schema, top_level)
    except EngineLimitReached as exc:
        pushed = "; ".join(c.text for c in plan.conjuncts if c.pushed)
        raise EngineLimitReached(f"{exc.message}. Pushed conjuncts: {pushed}", engine=exc.engine, reason=exc.reason,
                                 sql=exc.sql, engine_message=exc.engine_message) from exc
    kept = _apply_residual(plan, read, schema).select(output)
    rows_all = bytes_all = 0
    if measure_baseline:
        everything = _fetch(source, _select_sql(plan, source, schema.names, False), schema, schema.names)
        rows_all, bytes_all = everything.num_rows, everything.nbytes
    return Execution(kept, read.num_rows, read.nbytes, rows_all, bytes_all)

