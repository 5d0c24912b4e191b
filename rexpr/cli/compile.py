"""Print what an expression compiles to on one target, for pasting: SQL for an engine, or the
typed plan that the Arrow and NumPy backends run."""

from __future__ import annotations

import argparse

from rexpr.api import compile as compile_expression
from rexpr.cli.check import schema_from_args
from rexpr.printing import tree_lines

TARGETS = ("duckdb", "sqlite", "postgres", "mariadb", "arrow", "numpy")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("expression")
    parser.add_argument("--to", required=True, choices=TARGETS, dest="target")
    parser.add_argument("--schema", metavar="FILE")
    parser.add_argument("--field", action="append", default=[], metavar="NAME:TYPE")
    parser.add_argument("--lowering", choices=("faithful", "native"), default="faithful")


def run(args: argparse.Namespace) -> int:
    compiled = compile_expression(args.expression, schema_from_args(args))
    if args.target in ("arrow", "numpy"):
        print(f"# {args.target} evaluates this typed tree, node by node, over whole columns")
        print("\n".join(tree_lines(compiled.tree)))
        return 0
    from rexpr.sql.lowering import to_sql

    print(to_sql(compiled.tree, args.target, args.lowering))
    return 0
