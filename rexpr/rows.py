"""Input rows for ``rexpr check``: files typed by the schema, or the built-in edge-value pools."""

from __future__ import annotations

import itertools
import json
import math
from pathlib import Path

import pyarrow as pa
import pyarrow.ipc as ipc
import pyarrow.parquet as pq

from rexpr.edge_values import pool
from rexpr.errors import InputProblem
from rexpr.language.datetime_text import parse_date_text, parse_timestamp_text
from rexpr.schema import Schema, to_arrow_type
from rexpr.types import DataType, Kind

MAX_ROWS_FILE_BYTES = 256 * 1024 * 1024
_NON_FINITE = {"NaN": math.nan, "Infinity": math.inf, "-Infinity": -math.inf}


def load_rows(path: str | Path, schema: Schema) -> pa.Table:
    """Read Parquet, Arrow IPC or JSON Lines, then conform the columns to the schema."""
    path = Path(path)
    if not path.is_file():
        raise InputProblem(f"rows file {str(path)!r} does not exist")
    if path.stat().st_size > MAX_ROWS_FILE_BYTES:
        raise InputProblem(f"rows file {str(path)!r} is larger than {MAX_ROWS_FILE_BYTES >> 20} MiB")
    suffix = path.suffix.lower()
    try:
        if suffix == ".parquet":
            table = pq.read_table(path)
        elif suffix in (".arrow", ".ipc", ".feather"):
            with pa.memory_map(str(path)) as source:
                try:
                    table = ipc.open_file(source).read_all()
                except pa.ArrowInvalid:
                    table = ipc.open_stream(pa.memory_map(str(path))).read_all()
        elif suffix in (".jsonl", ".ndjson", ".json"):
            return rows_from_json_lines(path.read_text(encoding="utf-8"), schema)
        else:
            raise InputProblem(f"rows file {str(path)!r}: use .parquet, .arrow or .jsonl")
    except (pa.ArrowException, OSError, UnicodeDecodeError) as exc:
        raise InputProblem(f"cannot read rows file {str(path)!r}: {exc}") from None
    return conform(table, schema)


def conform(table: pa.Table, schema: Schema) -> pa.Table:
    columns = []
    for name, data_type in schema.fields:
        if name not in table.column_names:
            raise InputProblem(f"rows have no column {name!r} that the schema names")
        try:
            columns.append(table.column(name).cast(to_arrow_type(data_type)))
        except pa.ArrowException as exc:
            raise InputProblem(f"column {name!r} cannot be read as {data_type.name}: {exc}") from None
    return pa.table(columns, schema=pa.schema([pa.field(n, to_arrow_type(t)) for n, t in schema.fields]))


def rows_from_json_lines(text: str, schema: Schema) -> pa.Table:
    """One JSON object per line; floats may be "NaN", "Infinity" or "-Infinity" (or bare NaN)."""
    records: list[dict] = []
    # Split on newlines only: str.splitlines would also split inside strings at U+2028 and friends.
    for number, line in enumerate(text.split("\n"), 1):
        line = line.removesuffix("\r")
        if not line.strip():
            continue
        try:
            record = json.loads(line, parse_constant=lambda c: _NON_FINITE[c])
        except (json.JSONDecodeError, KeyError) as exc:
            raise InputProblem(f"rows line {number}: not a JSON object ({exc})") from None
        if not isinstance(record, dict):
            raise InputProblem(f"rows line {number}: expected a JSON object, got {type(record).__name__}")
        records.append(record)
    columns = {}
    for name, data_type in schema.fields:
        values = []
        for number, record in enumerate(records, 1):
            try:
                values.append(_json_value(record.get(name), data_type))
            except (TypeError, ValueError) as exc:
                raise InputProblem(f"rows line {number}, field {name!r}: {exc}") from None
        columns[name] = pa.array(values, type=to_arrow_type(data_type))
    return pa.table(columns)


def _json_value(value: object, data_type: DataType) -> object:
    if value is None:
        return None
    kind = data_type.kind
    if kind is Kind.FLOAT64:
        if isinstance(value, str) and value in _NON_FINITE:
            return _NON_FINITE[value]
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ValueError(f"expected a number, got {value!r}")
        return float(value)
    if kind is Kind.INT64:
        if isinstance(value, bool) or not isinstance(value, int):
            raise ValueError(f"expected an integer, got {value!r}")
        return value
    if kind is Kind.BOOL:
        if not isinstance(value, bool):
            raise ValueError(f"expected true or false, got {value!r}")
        return value
    if kind is Kind.STRING:
        if not isinstance(value, str):
            raise ValueError(f"expected a string, got {value!r}")
        return value
    if kind is Kind.DATE:
        parsed = parse_date_text(value) if isinstance(value, str) else None
        if parsed is None:
            raise ValueError(f"expected 'YYYY-MM-DD', got {value!r}")
        return parsed
    if kind is Kind.TIMESTAMP:
        parsed_ts = parse_timestamp_text(value) if isinstance(value, str) else None
        if parsed_ts is None:
            raise ValueError(f"expected 'YYYY-MM-DD HH:MM:SS', got {value!r}")
        return parsed_ts
    if kind is Kind.STRUCT:
        if not isinstance(value, dict):
            raise ValueError(f"expected an object, got {value!r}")
        return {n: _json_value(value.get(n), t) for n, t in data_type.fields}
    raise ValueError(f"unsupported type {data_type.name}")


def _pool_for(data_type: DataType) -> list[object]:
    if data_type.kind is Kind.STRUCT:
        inner = [_pool_for(t) for _, t in data_type.fields]
        longest = max(len(p) for p in inner)
        values: list[object] = [{n: p[i % len(p)] for (n, _), p in zip(data_type.fields, inner)}
                                for i in range(longest)]
        return values + ([None] if data_type.nullable else [])
    return list(pool(data_type.kind, data_type.nullable))


def edge_table(schema: Schema, used: set[str] | None = None, max_rows: int = 4096) -> pa.Table:
    """Edge values for the columns an expression uses: every combination when that fits in
    ``max_rows``, otherwise each column cycled so every value of every column appears."""
    names = [n for n, _ in schema.fields if used is None or n in used]
    pools = {n: _pool_for(schema.get(n)) for n in names}  # type: ignore[arg-type]
    total = math.prod(len(p) for p in pools.values()) if pools else 1
    if total <= max_rows:
        rows = list(itertools.product(*(pools[n] for n in names)))
        data = {n: [r[i] for r in rows] for i, n in enumerate(names)}
    else:
        length = max(len(p) for p in pools.values())
        # Shift each column by a different stride so pairs vary, not just diagonals.
        length = min(max_rows, length * 7)
        data = {n: [pools[n][(i * (k + 1) + i // len(pools[n])) % len(pools[n])] for i in range(length)]
                for k, n in enumerate(names)}
    other = [n for n, _ in schema.fields if n not in pools]
    count = len(next(iter(data.values()))) if data else 1
    columns = {n: pa.array(data[n], type=to_arrow_type(schema.get(n))) for n in names}  # type: ignore[arg-type]
    for n in other:
        columns[n] = pa.nulls(count, type=to_arrow_type(schema.get(n)))  # type: ignore[arg-type]
    ordered = {n: columns[n] for n in schema.names}
    # A constant expression still needs a row to be evaluated on.
    return pa.table(ordered or {"_row": pa.array(range(count), pa.int64())})
