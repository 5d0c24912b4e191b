"""Compiler core benchmark: cold and cached compile beside sqlglot's parse, and the Arrow and
NumPy backends beside hand-written pyarrow.compute and NumPy code, in one run (medians).

    .venv/bin/python bench/bench_core.py [--rows 10000000]
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import sqlglot

sys.path.insert(0, str(Path(__file__).parent))
from common import make_table, median_time, print_table  # noqa: E402

import rexpr  # noqa: E402
from rexpr.checker import check  # noqa: E402
from rexpr.language.parser import parse  # noqa: E402
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


def numpy_columns(t: pa.Table) -> dict:
    out = {}
    for name in ("price", "qty", "discount"):
        col = t[name].combine_chunks()
        out[name] = (col.to_numpy(zero_copy_only=False), np.asarray(col.is_valid()))
    names = t["name"].combine_chunks()
    out["name"] = (np.asarray(names.fill_null("").to_numpy(zero_copy_only=False), dtype=np.dtypes.StringDType()),
                   np.asarray(names.is_valid()))
    return out


def hand_numpy(text: str, cols: dict):
    p, pv = cols["price"]
    q, qv = cols["qty"]
    if text == "price * qty > 100.0":
        return (p * q > 100.0) & pv & qv
    n, nv = cols["name"]
    if text == "trim(name) = 'ab'":
        return (np.strings.strip(n, " ") == "ab") & nv
    if text == "substring(name, 2, 3) = 'bc'":
        return (np.strings.slice(n, 1, 4) == "bc") & nv
    d, dv = cols["discount"]
    trim_ok = (np.strings.strip(n, " ") == "ab") & nv
    return trim_ok & ((p * q > 100.0) & pv & qv) & (np.where(dv, d, 0.0) < 0.3)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=10_000_000)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()

    schema = Schema.from_mapping({"name": "string", "price": "float64", "qty": "float64", "discount": "float64"})
    cold = median_time(lambda: check(parse(FILTER), schema), repeat=200, warmup=20)
    glot = median_time(lambda: sqlglot.parse_one(FILTER), repeat=200, warmup=20)
    rexpr.compile(FILTER, schema)
    cached = median_time(lambda: rexpr.compile(FILTER, schema), repeat=2000, warmup=100)
    print(f"compile of {FILTER!r}")
    print_table(["step", "median", "vs sqlglot.parse_one"],
                [["rexpr cold (parse + check)", f"{cold * 1e6:.0f} us", f"{cold / glot:.2f}x"],
                 ["sqlglot.parse_one", f"{glot * 1e6:.0f} us", "1.00x"],
                 ["rexpr cached compile", f"{cached * 1e6:.1f} us", f"{cached / glot:.3f}x"]])
    print()

    table = make_table(args.rows)
    cols = numpy_columns(table)
    rows = []
    for text in EXPRESSIONS:
        compiled = rexpr.compile(text, table.schema)
        t_arrow = median_time(lambda: compiled.evaluate(table, "arrow"), args.repeat)
        t_hand_arrow = median_time(lambda: hand_arrow(text, table), args.repeat)
        t_numpy = median_time(lambda: compiled.evaluate(table, "numpy"), args.repeat)
        t_hand_numpy = median_time(lambda: hand_numpy(text, cols), args.repeat)
        rows.append([text, f"{t_arrow * 1e3:.1f}", f"{t_hand_arrow * 1e3:.1f}", f"{t_arrow / t_hand_arrow:.2f}x",
                     f"{t_numpy * 1e3:.1f}", f"{t_hand_numpy * 1e3:.1f}", f"{t_numpy / t_hand_numpy:.2f}x"])
    print(f"evaluation over {args.rows:,} rows (ms, median of {args.repeat})")
    print_table(["expression", "arrow", "hand pyarrow", "ratio", "numpy", "hand numpy", "ratio"], rows)
    print("\nHand-written code skips what the semantics requires (error tracking, exact overflow and NaN "
          "rules), so a ratio above 1 is the price of those guarantees.")


if __name__ == "__main__":
    main()
