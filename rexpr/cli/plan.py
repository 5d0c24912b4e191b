"""Plan a pushdown: which conjuncts of a filter the source runs, what stays local, and why."""

from __future__ import annotations

import argparse
import json

from rexpr.cli.check import schema_from_args
from rexpr.planner.plan import SOURCES, plan


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("expression", help="the filter text (a bool expression)")
    parser.add_argument("--schema", metavar="FILE", help="JSON schema file")
    parser.add_argument("--field", action="append", default=[], metavar="NAME:TYPE", help="an input field (repeatable)")
    parser.add_argument("--source", required=True, choices=SOURCES, help="where the data lives")
    parser.add_argument("--columns", metavar="LIST", help="comma-separated output columns (default: all)")
    parser.add_argument("--json", action="store_true", help="print one JSON object")


def run(args: argparse.Namespace) -> int:
    schema = schema_from_args(args)
    columns = [c.strip() for c in args.columns.split(",") if c.strip()] if args.columns else None
    result = plan(args.expression, schema, args.source, columns)
    if args.json:
        print(json.dumps(result.to_json(), ensure_ascii=False))
        return 0
    data = result.to_json()
    print(f"filter    {result.expression}")
    print(f"source    {result.source}")
    print(f"pushed    {data['pushed'] or '(nothing)'}")
    print(f"residual  {data['residual'] or '(nothing: the source does all of it)'}")
    print(f"columns   {', '.join(result.columns)}")
    print("conjuncts")
    for c in result.conjuncts:
        print(f"  [{'pushed' if c.pushed else 'local '}] {c.text}")
        print(f"           {c.reason}")
    print(f"\nevidence  {result.evidence}; {data['verified']}")
    return 0
