"""The auto backend beside the arrow and numpy backends, hand-written pyarrow and NumPy, and
DuckDB over the same Arrow table at one and two threads, with the memory-bandwidth floor
measured in the same run. Medians of several runs; ratios are side by side in this process.

    .venv/bin/python bench/bench_auto.py [--rows 10000000] [--repeat 5] [--only TEXT ...]

Columns: "mask" computes the boolean keep-mask, "filter" also materialises the kept rows.
"floor %" is the time a NumPy sum needs to stream the bytes the filter reads, as a share of
auto's mask time (100 % would be memory-bound). "peak extra" is auto's peak allocation
(Arrow pool plus tracemalloc-traced NumPy memory) during one mask, beside the bytes of the
input columns it reads.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import threading
import time
import tracemalloc
from pathlib import Path
from typing import Callable

import duckdb
import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

sys.path.insert(0, str(Path(__file__).parent))
from common import make_table, median_time, print_table  # noqa: E402

import rexpr  # noqa: E402
from rexpr.backends import auto, auto_jit  # noqa: E402
from rexpr.schema import Schema  # noqa: E402

EXPRESSIONS = [
    "price * qty > 100.0",
    "trim(name) = 'ab'",
    "price * qty > 100.0 and coalesce(discount, 0) < 0.3",
    "substring(name, 2, 3) = 'bc'",
    "cast(qty as int64) * 3 > 20 and price < 150.0",
    "case when discount > 0.25 then price * (1.0 - discount) else price end > 120.0",
]
NUMERIC = {EXPRESSIONS[0], EXPRESSIONS[2], EXPRESSIONS[4], EXPRESSIONS[5]}


# ------------------------------------------------------------------------------ hand-written
def hand_arrow(text: str, t: pa.Table) -> pa.Array:
    price, qty, discount, name = (t[c] for c in ("price", "qty", "discount", "name"))
    if text == EXPRESSIONS[0]:
        out = pc.greater(pc.multiply(price, qty), 100.0)
    elif text == EXPRESSIONS[1]:
        out = pc.equal(pc.utf8_trim(name, " "), "ab")
    elif text == EXPRESSIONS[2]:
        out = pc.and_kleene(pc.greater(pc.multiply(price, qty), 100.0), pc.less(pc.fill_null(discount, 0.0), 0.3))
    elif text == EXPRESSIONS[3]:
        out = pc.equal(pc.utf8_slice_codeunits(name, 1, 4), "bc")
    elif text == EXPRESSIONS[4]:
        out = pc.and_kleene(pc.greater(pc.multiply(pc.cast(pc.round(qty), pa.int64()), 3), 20), pc.less(price, 150.0))
    else:
        value = pc.if_else(pc.greater(discount, 0.25), pc.multiply(price, pc.subtract(1.0, discount)), price)
        out = pc.greater(value, 120.0)
    return pc.fill_null(out, False)


def numpy_columns(t: pa.Table) -> dict:
    out = {}
    for name in ("price", "qty", "discount"):
        col = t[name].combine_chunks()
        out[name] = (col.to_numpy(zero_copy_only=False), np.asarray(col.is_valid()))
    names = t["name"].combine_chunks()
    out["name"] = (np.asarray(names.fill_null("").to_numpy(zero_copy_only=False), dtype=np.dtypes.StringDType()),
                   np.asarray(names.is_valid()))
    return out


def hand_numpy(text: str, cols: dict) -> np.ndarray:
    (p, pv), (q, qv), (d, dv), (s, sv) = (cols[c] for c in ("price", "qty", "discount", "name"))
    if text == EXPRESSIONS[0]:
        return (p * q > 100.0) & pv & qv
    if text == EXPRESSIONS[1]:
        return (np.strings.strip(s, " ") == "ab") & sv
    if text == EXPRESSIONS[2]:
        return (p * q > 100.0) & pv & qv & (np.where(dv, d, 0.0) < 0.3)
    if text == EXPRESSIONS[3]:
        return (np.strings.slice(s, 1, 4) == "bc") & sv
    if text == EXPRESSIONS[4]:
        with np.errstate(invalid="ignore"):  # null qty slots hold NaN after to_numpy
            return (np.round(q).astype(np.int64) * 3 > 20) & qv & (p < 150.0) & pv
    taken = dv & (d > 0.25)
    return (np.where(taken, p * (1.0 - d), p) > 120.0) & pv


def duckdb_runner(table: pa.Table, threads: int) -> tuple[Callable[[str], object], Callable[[str], object]]:
    con = duckdb.connect()
    con.execute(f"SET threads={threads}")
    con.register("t", table)
    # Same text as SQL; only a speed reference point (DuckDB orders NaN differently).
    mask = lambda text: con.sql(f"SELECT coalesce({text}, false) AS keep FROM t").to_arrow_table()  # noqa: E731
    rows = lambda text: con.sql(f"SELECT * FROM t WHERE {text}").to_arrow_table()  # noqa: E731
    return mask, rows


# ------------------------------------------------------------------------------ measuring
def bandwidth_floor(size: int = 200_000_000) -> float:
    """Bytes per second a NumPy sum streams from memory (the array is far larger than cache)."""
    data = np.ones(size // 8, dtype=np.float64)
    seconds = median_time(lambda: data.sum(), repeat=7)
    return data.nbytes / seconds


def peak_extra_bytes(fn: Callable[[], object]) -> int:
    """Peak bytes allocated while ``fn`` runs: Arrow's pool (sampled) plus NumPy (tracemalloc)."""
    base = pa.total_allocated_bytes()
    peak = [0]
    running = [True]

    def sample() -> None:
        while running[0]:
            peak[0] = max(peak[0], pa.total_allocated_bytes() - base)
            time.sleep(0.0002)

    sampler = threading.Thread(target=sample)
    tracemalloc.start()
    sampler.start()
    try:
        fn()
    finally:
        running[0] = False
        sampler.join()
        traced = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
    return peak[0] + traced


def read_bytes(table: pa.Table, compiled: rexpr.CompiledExpression) -> int:
    return sum(table.column(name).nbytes for name in compiled.fields)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=10_000_000)
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--only", action="append", default=[],
                        help="run only the filters containing this text (repeatable)")
    options = parser.parse_args()
    # A fresh kernel cache, so the first call of each filter shows numba's whole compile time.
    os.environ[auto_jit.ENV_CACHE] = tempfile.mkdtemp(prefix="rexpr-bench-jit-")
    print(f"compiled path (numba): {'on' if auto_jit.available() else 'off (numba not installed)'}")
    table = make_table(options.rows)
    schema = Schema.from_arrow(table.schema)
    cols = numpy_columns(table)
    duck = {n: duckdb_runner(table, n) for n in (1, 2)}
    floor = bandwidth_floor()
    print(f"{options.rows:,} rows; memory-bandwidth floor (NumPy sum): {floor / 1e9:.1f} GB/s; "
          f"auto: {auto.THREADS} threads, {auto.BLOCK_ROWS:,}-row blocks\n")
    r = options.repeat

    def ms(fn: Callable[[], object], repeat: int = r) -> float:
        return median_time(fn, repeat=repeat) * 1000

    rows_out, summary = [], []
    for text in EXPRESSIONS:
        if options.only and not any(part in text for part in options.only):
            continue
        compiled = rexpr.compile(text, schema)
        prepared = auto.prepare(compiled.tree)
        single = auto.prepare(compiled.tree, threads=1)
        numpy_only = auto.prepare(compiled.tree, jit=False)
        start = time.perf_counter()
        kept = int(prepared.keep(table).sum())  # the first call compiles the fused kernels (cold cache)
        first = time.perf_counter() - start
        t = {
            "auto": ms(lambda: prepared.keep(table)),
            "auto 1t": ms(lambda: single.keep(table)),
            "auto no jit": ms(lambda: numpy_only.keep(table)),
            "auto api": ms(lambda: compiled.mask(table, "auto")),
            "arrow": ms(lambda: compiled.mask(table, "arrow"), max(3, r // 2)),
            "numpy": ms(lambda: compiled.mask(table, "numpy"), max(3, r // 2)),
            "hand pa": ms(lambda: hand_arrow(text, table)),
            "hand np": ms(lambda: hand_numpy(text, cols)),
            "duck 1": ms(lambda: duck[1][0](text)),
            "duck 2": ms(lambda: duck[2][0](text)),
        }
        f = {
            "auto": ms(lambda: prepared.filter(table)),
            "arrow": ms(lambda: compiled.filter(table, "arrow"), max(3, r // 2)),
            "hand pa": ms(lambda: table.filter(hand_arrow(text, table))),
            "duck 1": ms(lambda: duck[1][1](text)),
            "duck 2": ms(lambda: duck[2][1](text)),
        }
        floor_ms = read_bytes(table, compiled) / floor * 1000
        peak = peak_extra_bytes(lambda: prepared.keep(table))
        size = read_bytes(table, compiled)
        jit_note = f"{first:.2f} s" if prepared.jit_ops else "none"
        rows_out.append([text[:44], f"{kept:,}", jit_note] + [f"{t[k]:.0f}" for k in t] + [f"{f[k]:.0f}" for k in f]
                        + [f"{100 * floor_ms / t['auto']:.0f}%", f"{peak / 2**20:.0f}/{size / 2**20:.0f} MiB"])
        summary.append((text, t["duck 1"] / t["auto"], t["duck 2"] / t["auto"], f["duck 1"] / f["auto"],
                        f["duck 2"] / f["auto"], t["arrow"] / t["auto"], floor_ms / t["auto"], peak / size))
    headers = (["expression", "kept", "1st call (jit compile)"] + [f"mask {k}" for k in t] + [f"filter {k}" for k in f]
               + ["floor %", "peak extra/input"])
    print("times in ms (median)")
    print_table(headers, rows_out)
    print("\nratios (>1 means auto is faster): mask vs duck1, duck2; filter vs duck1, duck2; mask vs arrow;"
          " floor share; peak/input")
    print_table(["expression", "m/d1", "m/d2", "f/d1", "f/d2", "m/arrow", "floor", "peak/input"],
                [[s[0][:44]] + [f"{v:.2f}" for v in s[1:]] for s in summary])


if __name__ == "__main__":
    main()
