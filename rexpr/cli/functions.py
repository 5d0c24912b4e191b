"""List the function catalogue with, per engine, whether the faithful SQL keeps the semantics."""

from __future__ import annotations

import argparse
import json


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--engine", help="only this engine")
    parser.add_argument("--json", action="store_true", help="print JSON")


def run(args: argparse.Namespace) -> int:
    from rexpr.sql.capabilities import capability_table

    engines = [args.engine] if args.engine else None
    table = capability_table(engines)
    if args.json:
        print(json.dumps(table, ensure_ascii=False))
        return 0
    _print_table(table)
    return 0


def _print_table(table) -> None:
    rows = table["functions"] if isinstance(table, dict) and "functions" in table else table
    engines = table.get("engines") if isinstance(table, dict) else None
    if not engines:
        engines = sorted({e for r in rows for e in r.get("engines", {})})
    width = max(len(r["id"]) for r in rows)
    print(f"{'function':<{width}}  " + "  ".join(f"{e:<13}" for e in engines))
    mark = {"faithful": "faithful", "conditional": "conditional", "not_pushable": "no"}
    for r in rows:
        cells = [mark.get(r["engines"][e]["status"], r["engines"][e]["status"]) for e in engines]
        print(f"{r['id']:<{width}}  " + "  ".join(f"{c:<13}" for c in cells))
    print("\nconditional and no entries have reasons: use --json, or see docs/engines.md")
