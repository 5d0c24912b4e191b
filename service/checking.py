"""The check operation: evaluate on rows (sent or edge values) with the reference and each
embedded engine, and report where they differ. Runs in a worker thread; see routes."""

from __future__ import annotations

import json
from typing import Any, Sequence

import pyarrow as pa

import rexpr
from rexpr.api import CompiledExpression
from rexpr.errors import InputProblem
from rexpr.rows import edge_table, rows_from_json_lines
from rexpr.runs import EngineRun, run_on
from rexpr.schema import Schema
from rexpr.values import to_json_value
from service.compiling import schema_from_request

MAX_SHOWN = 100
VERIFIED = "on these rows only; agreement here is evidence, not proof"


def table_from_rows(rows: Sequence[dict[str, Any]], schema: Schema) -> pa.Table:
    """Rows typed by the schema, converted exactly as ``rexpr check --rows file.jsonl`` would."""
    known = set(schema.names)
    for number, row in enumerate(rows, 1):
        unknown = [name for name in row if name not in known]
        if unknown:
            # Probably a misspelt field: reading it as null would be a guess.
            raise InputProblem(f"row {number} has field {unknown[0]!r}, which the schema does not name",
                               code="unknown_row_field")
    # ensure_ascii keeps U+2028 and friends escaped, so each row stays on one line.
    text = "\n".join(json.dumps(row, ensure_ascii=True, allow_nan=False) for row in rows)
    table = rows_from_json_lines(text, schema)
    if not schema.fields:  # a constant expression still needs one row per request row
        table = pa.table({"_row": pa.array(range(len(rows)), pa.int64())})
    return table


def json_value(value: object) -> object:
    """to_json_value, also inside struct values."""
    if isinstance(value, dict):
        return {k: json_value(v) for k, v in value.items()}
    return to_json_value(value)


def _engine_json(run: EngineRun, table: pa.Table, read: Sequence[str]) -> dict[str, Any]:
    shown = []
    for d in run.disagreements[:MAX_SHOWN]:
        inputs = {name: json_value(table.column(name)[d.row].as_py()) for name in read}
        shown.append({"row": d.row, "expected": json_value(d.expected), "observed": json_value(d.observed),
                      "inputs": inputs})
    out: dict[str, Any] = {"status": run.status, "rows": run.rows, "disagreement_count": len(run.disagreements),
                           "disagreements": shown}
    if run.reason:
        out["reason"] = run.reason
    if run.sql is not None:
        out["sql"] = run.sql
    return out


def _run(engine: str, compiled: CompiledExpression, table: pa.Table, expected: list[object]) -> EngineRun:
    try:
        return run_on(engine, compiled, table, expected)
    except ImportError:
        # run_on turns a missing lowering into "unavailable" but not a missing engine runner.
        return EngineRun(engine, "unavailable", reason=f"the {engine} runner is not installed in this build")
    except InputProblem as exc:
        if exc.code != "unknown_engine":
            raise
        # Requests name only engines this service knows, so the engine's SQL dialect is missing.
        return EngineRun(engine, "unavailable", reason=exc.message)


def check_payload(compiled: CompiledExpression, rows: Sequence[dict[str, Any]] | None,
                  engines: Sequence[str], max_edge_rows: int) -> dict[str, Any]:
    read = list(dict.fromkeys(path[0] for path in compiled.field_paths))
    if rows is None:
        table = edge_table(compiled.schema, set(read), max_rows=max_edge_rows)
    else:
        table = table_from_rows(rows, compiled.schema)
    expected = compiled.evaluate(table, backend="reference").to_pylist()
    runs = [_run(engine, compiled, table, expected) for engine in dict.fromkeys(engines)]
    return {
        "expression": compiled.text,
        "type": compiled.type.name,
        "nullable": compiled.nullable,
        "fields": list(compiled.fields),
        "rows": table.num_rows,
        "rows_source": "edge_values" if rows is None else "request",
        "results": {run.engine: _engine_json(run, table, read) for run in runs},
        # The reference values, row by row, when the caller sent the rows (edge rows are not shown).
        "values": [json_value(v) for v in expected] if rows is not None else None,
        "verified": VERIFIED,
    }


def compile_for_check(expression: str, schema_spec: dict[str, Any]) -> CompiledExpression:
    return rexpr.compile(expression, schema_from_request(schema_spec))
