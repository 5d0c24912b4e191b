"""Invented data: port calls at a fictional harbour. Generated on the fly, seeded, so every
run sees the same rows. Values include the awkward ones real feeds have: padded and
tab-separated names, NaN drafts, null tonnage, non-ASCII flag states."""

from __future__ import annotations

import sqlite3
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from rexpr.schema import Schema

VESSELS = ["Kestrel", " Kestrel", "Kestrel ", "Tern", "Guillemot", "Skua\t", "Fulmar", "Petrel", "Øyfjell",
           "Shearwater", "Gannet", "Cormorant", "Eider", "Puffin", "Razorbill", "Kittiwake"]
CARGO = ["FRZ-fish", "FRZ-berries", "BULK-grain", "BULK-ore", "CONT-mixed", "TANK-diesel", "RORO-cars",
         "frz-fish", "CONT-reefer", "BREAK-steel"]
FLAGS = ["NO", "no", "IS", "FO", "DK", "Ísland", "SE", "FI", "GL"]

SCHEMA = Schema.from_mapping({
    "call_id": "int64 not null",
    "vessel": "string",
    "berth": "int64",
    "draft_m": "float64",
    "tonnage": "int64",
    "eta": "timestamp",
    "cargo": "string",
    "crane_hours": "float64",
    "flag_state": "string",
    "hazardous": "bool",
})


def port_calls(rows: int, seed: int = 2026) -> pa.Table:
    rng = np.random.default_rng(seed)

    def nulls(rate: float) -> np.ndarray:
        return rng.random(rows) < rate

    # Arrivals sorted by time, as a feed appends them: Parquet row groups then cover time ranges.
    start = np.datetime64("2026-01-01T00:00:00", "us").astype(np.int64)
    eta = np.sort(start + rng.integers(0, 365 * 86_400 * 10**6, rows))
    draft = np.round(rng.uniform(3.0, 14.0, rows), 2)
    draft[rng.random(rows) < 0.005] = np.nan  # sensor feed writes NaN when the gauge is off
    tonnage = rng.integers(500, 60_000, rows)
    crane = np.round(rng.gamma(2.0, 3.0, rows), 1)

    def pick(values: list[str]) -> pa.Array:
        codes = rng.integers(0, len(values), rows).astype(np.int32)
        return pa.DictionaryArray.from_arrays(pa.array(codes), pa.array(values)).cast(pa.string())

    table = pa.table({
        "call_id": pa.array(np.arange(rows, dtype=np.int64)),
        "vessel": pick(VESSELS),
        "berth": pa.array(rng.integers(1, 25, rows), mask=nulls(0.01)),
        "draft_m": pa.array(draft, mask=nulls(0.02)),
        "tonnage": pa.array(tonnage, mask=nulls(0.03)),
        "eta": pa.array(eta, type=pa.timestamp("us")),
        "cargo": pick(CARGO),
        "crane_hours": pa.array(crane, mask=nulls(0.2)),
        "flag_state": pick(FLAGS),
        "hazardous": pa.array(rng.random(rows) < 0.04, mask=nulls(0.01)),
    })
    return table.cast(SCHEMA.to_arrow())


def spread_rows(table: pa.Table, rows: int) -> pa.Table:
    """``rows`` rows taken evenly over the whole table: the port calls are in arrival order, so
    the first rows alone would cover only January."""
    if table.num_rows <= rows:
        return table
    step = table.num_rows / rows
    return table.take(pa.array([int(k * step) for k in range(rows)], pa.int64()))


def write_sources(table: pa.Table, directory: Path, copy: pa.Table, row_group_size: int = 65_536) -> dict[str, Path]:
    """The rows as a Parquet file and a DuckDB database, and ``copy`` (fewer rows: row-at-a-time
    inserts would dominate the demo's minute otherwise) as a SQLite database."""
    import duckdb

    directory.mkdir(parents=True, exist_ok=True)
    paths = {"parquet": directory / "port_calls.parquet", "duckdb": directory / "harbour.duckdb",
             "sqlite": directory / "harbour.sqlite"}
    pq.write_table(table, paths["parquet"], row_group_size=row_group_size, compression="zstd")
    for path in (paths["duckdb"], paths["sqlite"]):
        if path.exists():
            path.unlink()
    con = duckdb.connect(str(paths["duckdb"]))
    try:
        con.register("incoming", table)
        con.execute("CREATE TABLE port_calls AS SELECT * FROM incoming")
    finally:
        con.close()
    lite = sqlite3.connect(paths["sqlite"])
    try:
        columns = ", ".join(f'"{n}"' for n in table.column_names)
        lite.execute(f"CREATE TABLE port_calls (call_id INTEGER, vessel TEXT, berth INTEGER, draft_m REAL, "
                     f"tonnage INTEGER, eta TEXT, cargo TEXT, crane_hours REAL, flag_state TEXT, hazardous INTEGER)")
        placeholders = ", ".join("?" for _ in table.column_names)
        for batch in copy.to_batches(100_000):
            data = batch.to_pydict()
            data["eta"] = [None if v is None else v.isoformat(sep=" ") for v in data["eta"]]
            lite.executemany(f"INSERT INTO port_calls ({columns}) VALUES ({placeholders})", zip(*data.values()))
        lite.commit()
    finally:
        lite.close()
    return paths
