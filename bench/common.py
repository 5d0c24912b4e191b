"""Shared pieces of the benchmarks: invented data and a median timer. Not imported by rexpr."""

from __future__ import annotations

import statistics
import time
from typing import Callable

import numpy as np
import pyarrow as pa

NAMES = np.array(["ab", " ab", "ab ", "abc", "xbcd", "Kestrel", "  ab  ", "bcx", "tern", "\tab"], dtype=object)


def make_table(rows: int, seed: int = 7) -> pa.Table:
    """price, qty, discount, name: about 1 % NaN prices and 5 % nulls in each column."""
    rng = np.random.default_rng(seed)
    price = rng.uniform(0, 200, rows)
    price[rng.random(rows) < 0.01] = np.nan
    qty = rng.integers(0, 10, rows).astype(np.float64)
    discount = rng.uniform(0, 0.5, rows)
    names = NAMES[rng.integers(0, len(NAMES), rows)]

    def nulls() -> np.ndarray:
        return rng.random(rows) < 0.05

    return pa.table({
        "price": pa.array(price, mask=nulls()),
        "qty": pa.array(qty, mask=nulls()),
        "discount": pa.array(discount, mask=nulls()),
        "name": pa.array(names.tolist(), type=pa.string(), mask=nulls()),
    })


def median_time(fn: Callable[[], object], repeat: int = 7, warmup: int = 1) -> float:
    for _ in range(warmup):
        fn()
    samples = []
    for _ in range(repeat):
        start = time.perf_counter()
        fn()
        samples.append(time.perf_counter() - start)
    return statistics.median(samples)


def print_table(headers: list[str], rows: list[list[str]]) -> None:
    widths = [max(len(str(r[i])) for r in [headers] + rows) for i in range(len(headers))]
    line = "  ".join(h.ljust(w) for h, w in zip(headers, widths))
    print(line)
    print("  ".join("-" * w for w in widths))
    for r in rows:
        print("  ".join(str(c).ljust(w) for c, w in zip(r, widths)))
