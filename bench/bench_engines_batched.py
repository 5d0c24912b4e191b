"""Engine runners: 50 expressions over 100,000 rows per engine, all in ONE statement beside one
statement per expression, in one run (medians of --repeat runs; rows/s = rows x expressions / s).

Both modes include loading the table into the engine, so the load is also timed on its own
(an evaluate with no items) and subtracted for the query-only columns.

    .venv/bin/python bench/bench_engines_batched.py [--rows 100000] [--expressions 50] [--repeat 3]
        [--engines duckdb,sqlite,postgres,mariadb]
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from sqlglot import exp

sys.path.insert(0, str(Path(__file__).parent))
from common import make_table, median_time, print_table  # noqa: E402

from rexpr.engines import ENGINE_NAMES, get_engine  # noqa: E402
from rexpr.engines.base import SqlItem  # noqa: E402
from rexpr.types import BOOL, FLOAT64  # noqa: E402


def items(count: int) -> list[SqlItem]:
    """Simple arithmetic and comparisons over the benchmark table's float columns."""
    price, qty, discount = (exp.column(n, quoted=True) for n in ("price", "qty", "discount"))
    out = []
    for k in range(count):
        factor = exp.Literal.number(f"{k + 1}.5")
        if k % 3 == 0:
            expression: exp.Expression = exp.Add(this=exp.Mul(this=price.copy(), expression=factor), expression=qty.copy())
            out.append(SqlItem(f"e{k}", expression, FLOAT64))
        elif k % 3 == 1:
            expression = exp.GT(this=exp.Mul(this=price.copy(), expression=qty.copy()),
                                expression=exp.Mul(this=factor, expression=exp.Literal.number(10)))
            out.append(SqlItem(f"e{k}", expression, BOOL))
        else:
            expression = exp.Sub(this=qty.copy(), expression=exp.Mul(this=discount.copy(), expression=factor))
            out.append(SqlItem(f"e{k}", expression, FLOAT64))
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=100_000)
    parser.add_argument("--expressions", type=int, default=50)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--engines", default=",".join(ENGINE_NAMES))
    args = parser.parse_args()
    table = make_table(args.rows).select(["price", "qty", "discount"])
    work = items(args.expressions)
    values = args.rows * args.expressions
    rows = []
    for name in args.engines.split(","):
        runner = get_engine(name)
        status = runner.availability()
        if not status.available:
            rows.append([name, "unavailable", "", "", "", "", "", status.reason[:60]])
            continue
        with runner:
            load = median_time(lambda: runner.evaluate(table, []), repeat=args.repeat)
            batched = median_time(lambda: runner.evaluate(table, work), repeat=args.repeat)
            single = median_time(lambda: runner.evaluate(table, work, items_per_statement=1), repeat=args.repeat)
        query_batched = max(batched - load, 1e-9)
        query_single = max(single - load, 1e-9)
        rows.append([name, status.version or "", f"{load:.3f}", f"{batched:.3f}", f"{single:.3f}",
                     f"{values / batched:,.0f}", f"{values / single:,.0f}",
                     f"{single / batched:.2f}x (query only {query_single / query_batched:.2f}x)"])
    print(f"{args.expressions} expressions x {args.rows:,} rows, medians of {args.repeat}; seconds include loading")
    print_table(["engine", "version", "load s", "batched s", "per-expr s", "batched values/s", "per-expr values/s",
                 "per-expr / batched"], rows)


if __name__ == "__main__":
    main()
