"""Pushdown on Parquet, for the demo's filters, in one run (medians): executing the plan
(dataset filter + residual), reading everything and filtering locally, and DuckDB running the
whole filter over the Parquet file itself. Bytes are the compressed column chunks scanned.

    .venv/bin/python bench/bench_planner.py [--rows 2000000]
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import duckdb
import pyarrow.dataset as ds

sys.path.insert(0, str(Path(__file__).parent))
from common import median_time, print_table  # noqa: E402

import rexpr  # noqa: E402
from rexpr.demo.run import FILTERS, OUTPUT_COLUMNS  # noqa: E402
from rexpr.demo.scenario import SCHEMA, port_calls  # noqa: E402
from rexpr.planner.execute import DatasetSource, _scanned_bytes, execute  # noqa: E402
from rexpr.planner.plan import plan  # noqa: E402


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=2_000_000)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        import pyarrow.parquet as pq

        path = Path(tmp) / "port_calls.parquet"
        pq.write_table(port_calls(args.rows), path, row_group_size=65_536, compression="zstd")
        dataset = ds.dataset(str(path), format="parquet")
        everything = _scanned_bytes(dataset, SCHEMA.names, None)
        con = duckdb.connect()
        con.execute("SET threads=2")
        rows = []
        for title, text in FILTERS:
            p = plan(text, SCHEMA, "dataset", OUTPUT_COLUMNS)
            compiled = rexpr.compile(text, SCHEMA)
            t_plan = median_time(lambda: execute(p, SCHEMA, DatasetSource(dataset), OUTPUT_COLUMNS,
                                                 measure_baseline=False), args.repeat)
            t_local = median_time(lambda: compiled.filter(dataset.to_table()).select(OUTPUT_COLUMNS), args.repeat)
            # DuckDB's own reading of the same filter text (its semantics, not ours: a speed reference).
            sql = compiled.to_sql("duckdb", "native")
            query = f"SELECT call_id, vessel, eta FROM read_parquet('{path}') WHERE {sql}"
            t_duck = median_time(lambda: con.sql(query).to_arrow_table(), args.repeat)
            read = execute(p, SCHEMA, DatasetSource(dataset), OUTPUT_COLUMNS, measure_baseline=False)
            rows.append([title, f"{t_plan * 1e3:.0f}", f"{t_local * 1e3:.0f}", f"{t_local / t_plan:.2f}x",
                         f"{t_duck * 1e3:.0f}", f"{read.bytes_read / 2**20:.1f}", f"{everything / 2**20:.1f}"])
        print(f"{args.rows:,} rows of invented port calls in Parquet (ms, median of {args.repeat})")
        print_table(["filter", "plan", "read all + local", "plan speed-up", "duckdb whole filter",
                     "MiB scanned (plan)", "MiB (everything)"], rows)
        print("\nDuckDB runs its native SQL for the same text: its answer can differ (NaN, trim, case "
              "mapping); it is here as a speed reference only.")


if __name__ == "__main__":
    main()
