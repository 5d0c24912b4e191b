"""Run the demo: realistic filters over invented harbour data, planned for Parquet, DuckDB,
SQLite and (when reachable) PostgreSQL and MariaDB, executed, and checked against the
reference semantics."""

from __future__ import annotations

import argparse
from pathlib import Path


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--rows", type=int, default=2_000_000, help="port calls to generate (default 2,000,000)")
    parser.add_argument("--keep", metavar="DIR", help="write the generated sources here and keep them")
    parser.add_argument("--no-servers", action="store_true",
                        help="leave out PostgreSQL and MariaDB even when they are reachable (connection "
                             "settings: REXPR_POSTGRES_* / REXPR_MARIADB_* or REXPR_ENGINES_CONFIG)")


def run(args: argparse.Namespace) -> int:
    from rexpr.demo.run import run_demo
    from rexpr.errors import InputProblem

    if not 1_000 <= args.rows <= 50_000_000:
        raise InputProblem("--rows must be between 1,000 and 50,000,000")
    return run_demo(args.rows, Path(args.keep) if args.keep else None, servers=not args.no_servers)
