"""Compiler core benchmark: cold and cached compile beside sqlglot's parse, and the Arrow and
NumPy backends beside hand-written pyarrow.compute and NumPy code, in one run (medians).

Each backend and its hand-written counterpart start from the same input: the Arrow table for
pyarrow; for NumPy both ways, NumPy arrays (the backend reads them in place) and the Arrow table
(the hand code converts the columns it reads with the usual pyarrow calls, inside the timing).

    .venv/bin/python bench/bench_core.py [--rows 10000000]
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import sqlglot

sys.path.insert(0, str(Path(__file__).parent))
from common import make_table, median_time, print_table  # noqa: E402

import rexpr  # noqa: E402
from rexpr.api import _compile_cached  # noqa: E402
from rexpr.backends import numpy as numpy_backend  # noqa: E402
from rexpr.schema import Schema  # noqa: E402

FILTER = "trim(name) = 'ab' and price * qty > 100.0 and coalesce(discount, 0) < 0.3"
EXPRESSIONS = {
    "price * qty > 100.0": None,
    "trim(name) = 'ab'": None,
    FILTER: None,
    "substring(name, 2, 3) = 'bc'": None,
}


def hand_arrow(text: str, t: pa.Table):
    if text == "price * qty > 100.0":
        return pc.greater(pc.multiply(t["price"], t["qty"]), 100.0)
    if text == "trim(name) = 'ab'":
        return pc.equal(pc.utf8_trim(t["name"], " "), "ab")
    if text == "substring(name, 2, 3) = 'bc'":
        return pc.equal(pc.utf8_slice_codeunits(t["name"], 1, 4), "bc")
    return pc.and_kleene(pc.and_kleene(pc.equal(pc.utf8_trim(t["name"], " "), "ab"),
                                       pc.greater(pc.multiply(t["price"], t["qty"]), 100.0)),
                         pc.less(pc.fill_null(t["discount"], 0.0), 0.3))


def numpy_columns(t: pa.Table, names: tuple[str, ...] = ("price", "qty", "discount", "name")) -> dict:
    """name -> (values, validity): what NumPy code holds, converted the usual way."""
    out = {}
    for name in names:
        col = t[name].combine_chunks()
        if name == "name":
            values = np.asarray(col.fill_null("").to_numpy(zero_copy_only=False), dtype=np.dtypes.StringDType())
        else:
            values = col.to_numpy(zero_copy_only=False)
        out[name] = (values, np.asarray(col.is_valid()))
    return out


def hand_numpy(text: str, cols: dict):
    if text == "price * qty > 100.0":
        p, pv = cols["price"]
        q, qv = cols["qty"]
        return (p * q > 100.0) & pv & qv
    n, nv = cols["name"]
    if text == "trim(name) = 'ab'":
        return (np.strings.strip(n, " ") == "ab") & nv
    if text == "substring(name, 2, 3) = 'bc'":
        return (np.strings.slice(n, 1, 4) == "bc") & nv
    p, pv = cols["price"]
    q, qv = cols["qty"]
    d, dv = cols["discount"]
    trim_ok = (np.strings.strip(n, " ") == "ab") & nv
    return trim_ok & ((p * q > 100.0) & pv & qv) & (np.where(dv, d, 0.0) < 0.3)


def paired_medians(fns: list, repeat: int, warmup: int) -> list[float]:
    """Median time of each function, sampled in turn so that a change in machine load hits
    all of them alike (this machine is shared)."""
    for fn in fns:
        for _ in range(warmup):
            fn()
    samples: list[list[float]] = [[] for _ in fns]
    for _ in range(repeat):
        for fn, times in zip(fns, samples):
            start = time.perf_counter()
            fn()
            times.append(time.perf_counter() - start)
    return [statistics.median(times) for times in samples]


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=10_000_000)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()

    schema = Schema.from_mapping({"name": "string", "price": "float64", "qty": "float64", "discount": "float64"})

    def cold_compile() -> object:
        _compile_cached.cache_clear()  # what compile does the first time it sees a text
        return rexpr.compile(FILTER, schema)

    cold, glot = paired_medians([cold_compile, lambda: sqlglot.parse_one(FILTER)], repeat=400, warmup=40)
    rexpr.compile(FILTER, schema)
    cached = median_time(lambda: rexpr.compile(FILTER, schema), repeat=2000, warmup=100)
    print(f"compile of {FILTER!r}")
    print_table(["step", "median", "vs sqlglot.parse_one"],
                [["rexpr cold compile (parse + check)", f"{cold * 1e6:.0f} us", f"{cold / glot:.2f}x"],
                 ["sqlglot.parse_one", f"{glot * 1e6:.0f} us", "1.00x"],
                 ["rexpr cached compile", f"{cached * 1e6:.1f} us", f"{cached / glot:.3f}x"]])
    print()

    table = make_table(args.rows)
    cols = numpy_columns(table)
    rows = []
    for text in EXPRESSIONS:
        compiled = rexpr.compile(text, table.schema)
        read = compiled.fields
        mine = {name: cols[name] for name in read}
        t_arrow, t_hand_arrow = paired_medians(
            [lambda: compiled.evaluate(table, "arrow"), lambda: hand_arrow(text, table)], args.repeat, 1)
        t_numpy, t_hand_numpy = paired_medians(
            [lambda: compiled.evaluate(mine, "numpy"), lambda: hand_numpy(text, mine)], args.repeat, 1)
        t_numpy_arrow, t_hand_numpy_arrow = paired_medians(
            [lambda: compiled.evaluate(table, "numpy"), lambda: hand_numpy(text, numpy_columns(table, read))],
            args.repeat, 1)
        rows.append([text, f"{t_arrow * 1e3:.1f}", f"{t_hand_arrow * 1e3:.1f}", f"{t_arrow / t_hand_arrow:.2f}x",
                     f"{t_numpy * 1e3:.1f}", f"{t_hand_numpy * 1e3:.1f}", f"{t_numpy / t_hand_numpy:.2f}x",
                     f"{t_numpy_arrow * 1e3:.1f}", f"{t_hand_numpy_arrow * 1e3:.1f}",
                     f"{t_numpy_arrow / t_hand_numpy_arrow:.2f}x"])
    print(f"evaluation over {args.rows:,} rows (ms, median of {args.repeat}, each pair sampled in turn; "
          f"the numpy backend runs in blocks of {numpy_backend.BLOCK_ROWS:,} rows, the hand code on whole arrays)")
    print_table(["expression", "arrow", "hand pyarrow", "ratio",
                 "numpy (numpy in)", "hand numpy (numpy in)", "ratio",
                 "numpy (arrow in)", "hand numpy (arrow in)", "ratio"], rows)
    print("\nHand-written code skips what the semantics requires (error tracking, exact overflow and NaN "
          "rules, U+0000 in strings, three-valued logic), so a ratio above 1 is the price of those guarantees.")


if __name__ == "__main__":
    main()
