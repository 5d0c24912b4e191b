"""The auto backend against the reference evaluator (the project's oracle), row by row.

Each check runs twice: with the default block size and with 7-row blocks, so block seams,
multi-chunk tables and slices are crossed. The function ids come from the catalogue, so a new
function fails ``test_every_function_has_cases`` until it has cases here.
"""

from __future__ import annotations

import pyarrow as pa
import pyarrow.dataset as ds
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings

import rexpr
from rexpr.backends import LOCAL_BACKENDS
from rexpr.backends import auto
from rexpr.catalogue import BY_ID
from rexpr.compare import row_differences
from rexpr.differential.generator import tables, typed_expressions
from rexpr.errors import EvaluationFailed, InputProblem
from rexpr.reference.tables import evaluate_table
from rexpr.rows import edge_table
from rexpr.schema import Schema

SCHEMA = Schema.from_mapping({
    "a": "int64", "b": "int64", "x": "float64", "y": "float64", "s": "string", "t": "string",
    "p": "bool", "q": "bool", "d": "date", "e": "date", "ts": "timestamp", "tu": "timestamp",
    "ship": {"port": "string", "berth": "int64"},
})

_PAIRS = (("a", "b"), ("x", "y"), ("s", "t"), ("d", "e"), ("ts", "tu"), ("p", "q"))


def _all_pairs(op: str) -> list[str]:
    return [f"{left} {op} {right}" for left, right in _PAIRS]


# Numeric and boolean cases take the NumPy path, mixed ones cross into the arrow plan and back.
CASES: dict[str, list[str]] = {
    "add": ["a + b", "x + y", "a + 1", "ship.berth + b", "x + 1.5 > y"],
    "subtract": ["a - b", "x - y", "0 - a"],
    "multiply": ["a * b", "x * y", "a * -1", "b * a > 0"],
    "divide": ["x / y", "a / b", "x / 0", "x / y > 1.0 or p", "1.0 / 0.0 > x or p", "x / -0.0 < 1.0"],
    "modulo": ["a % b", "x % y", "a % b = 0 and p"],
    "negate": ["-a", "-x", "-(a + b)"],
    "div": ["div(a, b)", "div(a, -1) > 0"],
    "abs": ["abs(a)", "abs(x)", "abs(x - y) < 1.0"],
    "round": ["round(x)", "round(x, 2)", "round(a, -2)", "round(x, b) > y"],
    "floor": ["floor(x)", "floor(a)", "floor(x) = x"],
    "ceil": ["ceil(x)", "ceil(a) + 1"],
    "sqrt": ["sqrt(x)", "sqrt(x) > 1.0 or x < 0.0", "sqrt(-1.0) < x and p"],
    "power": ["power(x, y)", "power(x, 2) > y"],
    "ln": ["ln(x)", "ln(x) > 0.0 and p"],
    "exp": ["exp(x)", "exp(x) > y"],
    "is_nan": ["is_nan(x)", "is_nan(x / y)"],
    "eq": _all_pairs("=") + ["x = -0.0"],
    "ne": _all_pairs("<>"),
    "lt": _all_pairs("<"),
    "le": _all_pairs("<="),
    "gt": _all_pairs(">") + ["a > x"],
    "ge": _all_pairs(">="),
    "is_distinct_from": [f"{l} is distinct from {r}" for l, r in _PAIRS] + ["x / y is not distinct from x"],
    "is_null": ["s is null", "x is not null", "div(a, b) is null", "x / y is null"],
    "and": ["p and q", "b <> 0 and div(a, b) > 1", "p and q and a = 0", "x / y > 0.0 and p",
            "y <> 0.0 and x / y > 1.0", "trim(s) = 'a' and x > 0.0"],
    "or": ["p or q", "b = 0 or div(a, b) > 1", "p or q or a = 0", "x / y > 0.0 or p", "a + b > 0 or q"],
    "not": ["not p", "not (a = b)", "not (x / y > 0.0)"],
    "coalesce": ["coalesce(a, b)", "coalesce(s, t, 'none')", "coalesce(nullif(b, 0), div(a, b), -1)",
                 "coalesce(x / y, x)", "coalesce(x + y / 0.0, -1.0)", "coalesce(p, q, a > b)",
                 "coalesce(x, 0.0) < 0.3"],
    "nullif": ["nullif(x, y)", "nullif(s, t)", "nullif(a, b)", "nullif(p, q)", "nullif(x / y, 1.0)"],
    "case": ["case when a > 0 then div(b, a) when a < 0 then -a else a * b end",
             "case when p then x when q then y / 0 end",
             "case when x / y > 1.0 then a else b + 1 end",
             "case when div(a, b) > 0 then 'pos' else s end",
             "case when p then q end"],
    "in": ["a in (1, b, div(1, b))", "x in (y, 0.0, 1.0)", "s in ('a', t)", "p in (q, true)",
           "x / y in (1.0, x)"],
    "between": ["a between b and 7", "x between y and 1.5", "s between 'a' and t", "x / y between 0.0 and y"],
    "like": ["s like t", "s like 'a%'", "s like t escape '\\'"],
    "trim": ["trim(s)", "trim(s, t)", "trim(s) = 'ab' and x > 0.0"],
    "ltrim": ["ltrim(s)", "ltrim(s, t)"],
    "rtrim": ["rtrim(s)", "rtrim(s, t)"],
    "substring": ["substring(s, a, b)", "substring(s, 2, 3) = 'bc'", "substring(s, 0, 2)"],
    "upper": ["upper(s)"],
    "lower": ["lower(s) = s or p"],
    "length": ["length(s)", "length(s) + a > 2"],
    "octet_length": ["octet_length(s)"],
    "concat_op": ["s || t"],
    "concat": ["concat(s, t, s)"],
    "replace": ["replace(s, t, 'x')"],
    "position": ["position(t, s)", "position('a', s) > 0"],
    "starts_with": ["starts_with(s, t)", "starts_with(s, 'a') and p"],
    "ends_with": ["ends_with(s, t)"],
    "cast": ["cast(a as float64)", "cast(x as int64)", "cast(p as int64)", "cast(a as bool)",
             "cast(s as int64)", "cast(s as float64) > x", "cast(x as string)", "cast(a as bool) or p",
             "cast(a as float64) * 2.0 > x", "cast(d as timestamp)", "cast(x * 2.0 as int64) > a",
             "cast(x as int64) is null or p"],
    "year": ["year(d)", "year(ts) > a"],
    "month": ["month(d)"],
    "day": ["day(ts)"],
}


def _mismatches(text: str, table: pa.Table, schema: Schema = SCHEMA, block_rows: int = auto.BLOCK_ROWS):
    compiled = rexpr.compile(text, schema)
    # Oracle: the reference evaluator, compared with the documented equality rules (rexpr.compare).
    expected = evaluate_table(compiled.tree, table).to_pylist()
    observed = auto.prepare(compiled.tree, block_rows=block_rows)(table).to_pylist()
    return row_differences(expected, observed, limit=5)


def test_every_function_has_cases():
    assert set(CASES) == set(BY_ID), f"add cases for: {sorted(set(BY_ID) - set(CASES))}"


def test_auto_is_a_local_backend():
    assert "auto" in LOCAL_BACKENDS  # so tests/test_properties.py's backend loop covers it


@pytest.mark.parametrize("block_rows", [auto.BLOCK_ROWS, 7])
@pytest.mark.parametrize("function_id, text", [(f, t) for f, texts in CASES.items() for t in texts])
def test_matches_reference_on_edge_values(function_id, text, block_rows):
    compiled = rexpr.compile(text, SCHEMA)
    assert function_id in compiled.functions
    table = edge_table(SCHEMA, {path.split(".")[0] for path in compiled.fields}, max_rows=600)
    assert _mismatches(text, table, block_rows=block_rows) == []


def test_chunked_and_sliced_tables_cross_block_seams():
    table = edge_table(SCHEMA, {"a", "b", "x", "y", "p", "s"}, max_rows=300)
    pieces = [table.slice(0, 5), table.slice(5, 40), table.slice(45, 1), table.slice(46)]
    chunked = pa.concat_tables(pieces)
    assert chunked.column("a").num_chunks == 4
    texts = ["x / y > 0.0 and coalesce(a, b) > 0", "case when p then a * b else div(a, b) end",
             "trim(s) = 'a' or x + y > 1.0", "x in (y, 1.0) or a between b and 3"]
    for text in texts:
        for data in (chunked, table.slice(13, 200), chunked.slice(3, 50)):
            assert _mismatches(text, data, block_rows=7) == [], text
    batch = table.slice(9, 60).to_batches()[0]
    compiled = rexpr.compile(texts[0], SCHEMA)
    expected = evaluate_table(compiled.tree, batch).to_pylist()  # oracle: the reference evaluator
    assert row_differences(expected, auto.prepare(compiled.tree, block_rows=7)(batch).to_pylist()) == []


def test_float_to_int_rounds_half_away_at_the_int64_edges():
    # Cast rule: round half away from zero; NaN, ±inf and values outside int64 are errors
    # (rexpr/catalogue/casts.py). Values chosen around ties and 2^63 (IEEE 754 binary64, from memory:
    # 2^63 - 1024 is the largest float64 below 2^63); oracle: the reference evaluator.
    values = [0.5, -0.5, 1.5, -2.5, 0.49999999999999994, 2.0 ** 52 + 0.5, 2.0 ** 53 + 1, 2.0 ** 63,
              -(2.0 ** 63), 2.0 ** 63 - 1024, float("nan"), float("inf"), -float("inf"), -0.0, None]
    table = pa.table({"x": pa.array(values, pa.float64())})
    schema = Schema.from_mapping({"x": "float64"})
    assert _mismatches("cast(x as int64)", table, schema, block_rows=4) == []
    assert _mismatches("cast(x as int64) > 0 or x > 0.0", table, schema, block_rows=4) == []


def test_int64_arithmetic_with_a_literal_operand_at_the_overflow_bounds():
    # A literal operand takes a range test instead of the general overflow check, and a
    # product near +-2^63 the exact check; every result outside [-2^63, 2^63 - 1] is an
    # out_of_range error (ISO/IEC 9075-2 6.27, 22003). 3037000499 is floor(sqrt(2^63 - 1))
    # (from memory; Python's math.isqrt confirms it below). Oracle: the reference evaluator.
    import math
    assert math.isqrt(2 ** 63 - 1) == 3037000499
    edges = [-2 ** 63, -2 ** 63 + 1, -2 ** 62, -3037000500, -3037000499, -7, -1, 0, 1, 2, 7,
             3037000499, 3037000500, 2 ** 62, 2 ** 63 - 2, 2 ** 63 - 1, None]
    pairs = [(a, b) for a in edges for b in edges]
    table = pa.table({"a": pa.array([a for a, _ in pairs], pa.int64()), "b": pa.array([b for _, b in pairs], pa.int64())})
    schema = Schema.from_mapping({"a": "int64", "b": "int64"})
    for text in ["a * b", "a * 3", "3 * a", "a * -1", "-1 * a", "a * 0", "a * -9223372036854775808",
                 "a * 3037000499", "a + 5", "5 + a", "a + -9223372036854775808", "a + 9223372036854775807",
                 "a - b", "a - 5", "a - -9223372036854775808", "a - 9223372036854775807", "0 - a", "-a"]:
        assert _mismatches(text, table, schema, block_rows=64) == [], text


def test_substring_at_the_int64_bounds():
    # Source: ISO/IEC 9075-2 6.30 <character substring function> (E = S + L; L < 0 is 22011;
    # S > length or E < 1 gives the empty string), worked out in Python's unbounded ints.
    def iso(text: str, start: int, length: int) -> object:
        if length < 0:
            return "invalid_argument"
        end = start + length
        return "" if start > len(text) or end < 1 else text[max(start, 1) - 1:min(end, len(text) + 1) - 1]

    bounds = [-2 ** 63, -2 ** 63 + 1, -1, 0, 1, 2, 3, 2 ** 63 - 2, 2 ** 63 - 1]
    rows = [(c, s, n) for c in ("", "ab", "日本語") for s in bounds for n in bounds]
    table = pa.table({"s": [r[0] for r in rows], "a": pa.array([r[1] for r in rows], pa.int64()),
                      "b": pa.array([r[2] for r in rows], pa.int64())})
    for text in ("substring(s, a, b)", "substring(s, a, b) || s"):
        result = rexpr.compile(text, {"s": "string", "a": "int64", "b": "int64"}).evaluate(table, backend="auto")
        got = [v.error.value if hasattr(v, "error") else v for v in result.to_pylist()]
        want = [iso(*r) for r in rows]
        if text.endswith("|| s"):
            want = [w if w == "invalid_argument" else w + r[0] for w, r in zip(want, rows)]
        assert [(r, w, g) for r, w, g in zip(rows, want, got) if w != g] == []


def test_narrow_and_dictionary_inputs():
    table = pa.table({"a": pa.array([1, None, -7], pa.int8()), "x": pa.array([1.5, None, -0.5], pa.float32()),
                      "s": pa.array(["b", None, "b"]).dictionary_encode()})
    text = "cast(a as float64) + x > 0 or s = 'b'"
    assert _mismatches(text, table, Schema.from_arrow(table.schema), block_rows=2) == []


def test_shared_subtrees_and_constants():
    # The same subtree three times (evaluated once per block) and foldable constants.
    text = "(x / y > 1.0 and x / y < 3.0) or (x / y is null and 2 * 3 > 5)"
    table = edge_table(SCHEMA, {"x", "y"})
    assert _mismatches(text, table, block_rows=7) == []
    schema = Schema.from_mapping({"a": "int64"})
    empty = pa.table({"a": pa.array([], pa.int64())})
    assert auto.prepare(rexpr.compile("a + 1 > 0", schema).tree)(empty).to_pylist() == []
    one_row = pa.table({"a": [0]})
    for text in ("1 + 2 * 3", "null", "div(1, 0)", "'ab' like 'a_'", "coalesce(null, 2)", "a > 0 or true"):
        assert _mismatches(text, one_row, schema) == [], text


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(tree=typed_expressions(SCHEMA, 4), table=tables(SCHEMA, max_rows=20))
def test_generated_expressions_match_reference(tree, table):
    expected = evaluate_table(tree, table).to_pylist()  # oracle: the reference evaluator
    for block_rows in (3, auto.BLOCK_ROWS):
        observed = auto.prepare(tree, block_rows=block_rows)(table).to_pylist()
        assert row_differences(expected, observed) == []


# ---------------------------------------------------------------- filtering
def _numbers_table(rows: int) -> pa.Table:
    return pa.table({"a": pa.array([i % 11 - 5 if i % 13 else None for i in range(rows)], pa.int64()),
                     "x": pa.array([(i % 17) / 4.0 if i % 7 else None for i in range(rows)]),
                     "s": pa.array([" ab"[i % 3:] if i % 5 else None for i in range(rows)])})


FILTERS = ["x * 2.0 > 3.0 and coalesce(a, 0) < 2", "trim(s) = 'ab' or a = 3", "case when a > 0 then x else -x end > 1.0"]
FILTER_SCHEMA = Schema.from_mapping({"a": "int64", "x": "float64", "s": "string"})


@pytest.mark.parametrize("text", FILTERS)
def test_filter_table_and_stream_keep_the_true_rows(text, tmp_path):
    table = _numbers_table(500)
    compiled = rexpr.compile(text, FILTER_SCHEMA)
    expected = [r for r, keep in zip(table.to_pylist(), evaluate_table(compiled.tree, table).to_pylist())
                if keep is True]  # oracle: the reference evaluator; null and false rows are dropped
    assert auto.filter_table(compiled, table, block_rows=7).to_pylist() == expected
    path = tmp_path / "rows.parquet"
    pq.write_table(table, path, row_group_size=64)
    batches = ds.dataset(path).to_batches(batch_size=50)
    out = list(auto.filter_batches(compiled, batches, block_rows=16))
    assert all(b.num_rows <= 50 for b in out)
    assert [row for b in out for row in b.to_pylist()] == expected


def test_filter_batches_is_lazy_and_reports_the_stream_row():
    compiled = rexpr.compile("div(10, a) > 1", FILTER_SCHEMA)
    batches = [pa.record_batch({"a": pa.array([1, 2, 3], pa.int64()), "x": pa.array([0.0] * 3),
                                "s": pa.array(["a"] * 3)}),
               pa.record_batch({"a": pa.array([4, 0, 5], pa.int64()), "x": pa.array([0.0] * 3),
                                "s": pa.array(["a"] * 3)})]
    stream = auto.filter_batches(compiled, iter(batches), block_rows=2)
    first = next(stream)  # the failing second batch is not read yet
    assert first.column("a").to_pylist() == [1, 2, 3]  # 10/1, 10/2, 10/3 all exceed 1
    with pytest.raises(EvaluationFailed) as failure:
        next(stream)
    # Division by zero is an error (ISO/IEC 9075-2 6.27, SQLSTATE 22012); the row counts the stream.
    assert failure.value.row == 4 and failure.value.error_class == "division_by_zero"


def test_filter_needs_a_predicate():
    with pytest.raises(InputProblem):
        list(auto.filter_batches(rexpr.compile("a + 1", FILTER_SCHEMA), []))
