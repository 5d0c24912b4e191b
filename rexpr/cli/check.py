"""Check one expression: type it, show the typed tree, and compare every engine with the reference.

Exit code 0 when every available engine agrees (``limited`` counts: the rows it could not
compute are ones it cannot represent, listed per row), 1 when one disagrees, 2 for invalid input.
"""

from __future__ import annotations

import argparse
import json
import sys

from rexpr.api import compile as compile_expression
from rexpr.engines.failures import LIMIT_WHAT
from rexpr.errors import InputProblem
from rexpr.printing import tree_lines
from rexpr.rows import edge_table, load_rows
from rexpr.runs import EngineRun, parse_engine_list, run_on
from rexpr.schema import Schema
from rexpr.typed import to_json
from rexpr.values import show_value, to_json_value

MAX_SHOWN = 10


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("expression", help="the expression text")
    parser.add_argument("--field", action="append", default=[], metavar="NAME:TYPE",
                        help="an input field (repeatable; split at the last colon), e.g. --field price:float64")
    parser.add_argument("--schema", metavar="FILE", help='JSON schema file: {"name": "string", ...}')
    parser.add_argument("--rows", metavar="FILE", help="rows to evaluate on: .parquet, .arrow or .jsonl "
                                                        "(default: built-in edge values for each field's type)")
    parser.add_argument("--engines", metavar="LIST", help="comma-separated engine names (default: all)")
    parser.add_argument("--lowering", choices=("faithful", "native"), default="faithful",
                        help="SQL lowering for SQL engines (default: faithful)")
    parser.add_argument("--json", action="store_true", help="print one JSON object")


def schema_from_args(args: argparse.Namespace) -> Schema:
    if args.schema and args.field:
        raise InputProblem("give either --schema or --field, not both")
    if args.schema:
        return Schema.from_json_file(args.schema)
    return Schema.from_field_specs(args.field)


def run(args: argparse.Namespace) -> int:
    schema = schema_from_args(args)
    engines = parse_engine_list(args.engines)
    compiled = compile_expression(args.expression, schema)
    used = {path[0] for path in compiled.field_paths}
    if args.rows:
        table = load_rows(args.rows, schema)
        source = args.rows
    else:
        table = edge_table(schema, used)
        source = "built-in edge values"
    expected = compiled.evaluate(table, backend="reference").to_pylist()
    runs = [run_on(engine, compiled, table, expected, args.lowering) for engine in engines]
    if args.json:
        print(json.dumps(_as_json(compiled, runs, table.num_rows, source, args.lowering), ensure_ascii=False))
    else:
        _print_text(compiled, runs, table, source, expected)
    return 1 if any(r.status == "disagree" for r in runs) else 0


def _as_json(compiled, runs: list[EngineRun], rows: int, source: str, lowering: str) -> dict:
    return {
        "expression": compiled.text,
        "type": compiled.type.name,
        "nullable": compiled.nullable,
        "fields": list(compiled.fields),
        "tree": to_json(compiled.tree),
        "rows": rows,
        "rows_source": source,
        "lowering": lowering,
        "results": {
            r.engine: {
                "status": r.status,
                "rows": r.rows,
                **({"reason": r.reason} if r.reason else {}),
                "disagreements": [{"row": d.row, "expected": to_json_value(d.expected),
                                   "observed": to_json_value(d.observed)} for d in r.disagreements],
                **({"limited_rows": [{"row": x.row, "engine_limit": x.reason, "expected": to_json_value(x.expected)}
                                     for x in r.limited_rows]} if r.limited_rows else {}),
            } for r in runs
        },
        "sql": {r.engine: r.sql for r in runs if r.sql is not None},
        "verified": "on these rows only; agreement here is evidence, not proof",
    }


def _print_text(compiled, runs: list[EngineRun], table, source: str, expected: list[object]) -> None:
    out = sys.stdout
    nullable = "nullable" if compiled.nullable else "never null"
    print(f"expression  {compiled.text}", file=out)
    print(f"type        {compiled.type.name} ({nullable})", file=out)
    print(f"fields      {', '.join(compiled.fields) or '(none)'}", file=out)
    print("tree", file=out)
    for line in tree_lines(compiled.tree, 1):
        print(line, file=out)
    print(f"rows        {table.num_rows} ({source})", file=out)
    print("", file=out)
    width = max(len(r.engine) for r in runs) if runs else 6
    for r in runs:
        detail = f"{len(r.disagreements)} of {r.rows} rows differ" if r.status == "disagree" else (
            r.reason or f"{r.rows} rows")
        print(f"  {r.engine:<{width}}  {r.status:<12}  {detail}", file=out)
        if r.sql:
            print(f"  {'':<{width}}  sql: {r.sql}", file=out)
        for d in r.disagreements[:MAX_SHOWN]:
            print(f"  {'':<{width}}  row {d.row}: expected {show_value(d.expected)}, got "
                  f"{show_value(d.observed)}   [{_inputs(compiled, table, d.row)}]", file=out)
        if len(r.disagreements) > MAX_SHOWN:
            print(f"  {'':<{width}}  ... and {len(r.disagreements) - MAX_SHOWN} more", file=out)
        for x in r.limited_rows[:MAX_SHOWN]:
            print(f"  {'':<{width}}  row {x.row}: not computed, {r.engine} cannot represent "
                  f"{LIMIT_WHAT.get(x.reason, x.reason)}; reference: {show_value(x.expected)}   "
                  f"[{_inputs(compiled, table, x.row)}]", file=out)
        if len(r.limited_rows) > MAX_SHOWN:
            print(f"  {'':<{width}}  ... and {len(r.limited_rows) - MAX_SHOWN} more rows at the engine limit", file=out)
    print("", file=out)
    print("Agreement is checked on these rows only: evidence, not proof.", file=out)


def _inputs(compiled, table, row: int) -> str:
    used = {p[0] for p in compiled.field_paths}
    return ", ".join(f"{name}={show_value(table.column(name)[row].as_py())}"
                     for name in table.column_names if name in used)
