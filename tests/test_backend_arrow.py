"""The Arrow backend (rexpr/backends/arrow.py) checked row by row.

The oracle is the reference evaluator (rexpr/reference/), the project's executable spec,
unless a check names another source: Python's repr, decimal, str case mapping and datetime
(reference libraries), or the standard a rule comes from. Function ids come from the
catalogue, so a new function fails ``test_every_function_has_cases`` until it has cases here
and ``test_arrow_implements_every_function`` until it has a kernel.
"""

from __future__ import annotations

import datetime as dt
import math
import random
import struct
import sys
from decimal import ROUND_HALF_UP, Decimal, localcontext

import pyarrow as pa
import pyarrow.dataset as ds
import pyarrow.parquet as pq
import pytest

import rexpr
from rexpr.api import CompiledExpression
from rexpr.backends import arrow
from rexpr.catalogue import BY_ID, ErrorClass
from rexpr.compare import same_result
from rexpr.corpus import load_corpora
from rexpr.errors import InputProblem, NotPushable
from rexpr.reference.evaluator import IMPLEMENTED as REFERENCE_IMPLEMENTED
from rexpr.rows import edge_table
from rexpr.schema import Schema
from rexpr.typed import TCall
from rexpr.types import BOOL
from rexpr.values import RowError, show_value

SCHEMA = Schema.from_mapping({
    "a": "int64", "b": "int64", "x": "float64", "y": "float64", "s": "string", "t": "string",
    "p": "bool", "q": "bool", "d": "date", "ts": "timestamp",
    "ship": {"port": "string", "berth": "int64 not null"},
})

# Per function id, expressions over the edge-value pools (rexpr.edge_values). Column operands
# take the general (per-row) paths, literal operands the specialised ones; both are listed.
CASES: dict[str, list[str]] = {
    "add": ["a + b", "x + y", "a + 1", "ship.berth + a"],
    "subtract": ["a - b", "x - y", "-1 - a"],
    "multiply": ["a * b", "x * y", "a * -1", "a * 2"],
    "divide": ["x / y", "a / b", "x / 0.0"],
    "modulo": ["a % b", "x % y", "a % -1"],
    "negate": ["-a", "-x"],
    "div": ["div(a, b)", "div(a, -1)"],
    "abs": ["abs(a)", "abs(x)"],
    "round": ["round(x)", "round(x, 2)", "round(x, -2)", "round(x, b)", "round(x, 30)", "round(x, -308)",
              "round(a)", "round(a, -1)", "round(a, -19)", "round(a, b)"],
    "floor": ["floor(x)", "floor(a)"],
    "ceil": ["ceil(x)", "ceil(a)"],
    "sqrt": ["sqrt(x)"],
    "power": ["power(x, y)", "power(x, 0.5)", "power(-8.0, y)"],
    "ln": ["ln(x)"],
    "exp": ["exp(x)"],
    "is_nan": ["is_nan(x)"],
    **{fid: [f"a {op} b", f"x {op} y", f"s {op} t", f"p {op} q", f"d {op} date '2000-02-29'",
             f"ts {op} timestamp '1970-01-01 00:00:00'", f"a {op} x", f"s {op} 'ab'", f"x {op} 0.0"]
       for fid, op in (("eq", "="), ("ne", "<>"), ("lt", "<"), ("le", "<="), ("gt", ">"), ("ge", ">="))},
    "is_distinct_from": ["x is distinct from y", "s is not distinct from t", "a is distinct from b",
                         "p is distinct from q", "d is distinct from date '2024-05-01'"],
    "is_null": ["x is null", "s is not null", "a + b is null", "ship.berth is null"],
    "and": ["a > 0 and b > 0", "a + b > 0 and p", "p and q", "div(a, b) = 1 and x / y > 0 and p"],
    "or": ["p or q", "a + b > 0 or p", "a * b > 0 or x / y > 0 or q"],
    "not": ["not p", "not (a + b > 0)"],
    "coalesce": ["coalesce(a, b)", "coalesce(a + b, 0)", "coalesce(s, t, 'z')", "coalesce(x / y, x)",
                 "coalesce(ts, timestamp '2024-05-01 10:00:00')"],
    "nullif": ["nullif(a, b)", "nullif(x, y)", "nullif(s, t)", "nullif(a + b, 0)"],
    "case": ["case when a > 0 then a + b else div(a, b) end", "case a when 1 then 'one' when 2 then 'two' end",
             "case when p then x / y when q then 1.0 end", "case when a + b > 0 then 1 else 0 end",
             "case when b = 0 then 0 else div(a, b) end"],
    "in": ["a in (1, 2, b)", "x in (0.0, y, null)", "s in ('a', 'ab', 'abc', 'A', ' ab ')", "a + b in (1, 2)",
           "s in (t, 'a')", "d in (date '2024-05-01', date '1970-01-01', date '0001-01-01', date '9999-12-31')",
           "a in (1, 2, 3, 4, null)", "x in (0.0, -0.0, 1.0, 2.5, 100.0)", "p in (true, null)"],
    "between": ["a between b and 10", "x between -1.0 and y", "s between 'a' and t", "a + b between 0 and 10"],
    "like": ["s like t", "s like 'a%'", "s like '%b'", "s like 'a_b'", "s like '%'", "s like '_'",
             "s like 'a!%b' escape '!'", "s like t escape '!'", "s like 'a%' escape t", "s like '%\\%' escape '\\'",
             "s like 'a\\b'", "s like '%\\'", "s like '%a%b%'", "s like ''"],
    "trim": ["trim(s)", "trim(s, t)", "trim(s, 'a ')", "trim(s, '')"],
    "ltrim": ["ltrim(s)", "ltrim(s, t)", "ltrim(s, ' \ta')"],
    "rtrim": ["rtrim(s)", "rtrim(s, 'b')", "rtrim(s, t)"],
    "substring": ["substring(s, a)", "substring(s, a, b)", "substring(s, 2)", "substring(s, 0, 2)",
                  "substring(s, -1, 3)", "substring(s, 2, -1)", "substring(s, 2, a)"],
    "upper": ["upper(s)"],
    "lower": ["lower(s)"],
    "length": ["length(s)"],
    "octet_length": ["octet_length(s)"],
    "concat_op": ["s || t", "s || 'x'"],
    "concat": ["concat(s, t)", "concat(s)", "concat(s, t, 'x')", "concat(s, cast(a as string))"],
    "replace": ["replace(s, t, 'x')", "replace(s, 'a', 'xy')", "replace(s, '', 'x')", "replace(s, 'b', t)"],
    "position": ["position(t, s)", "position('a', s)", "position('', s)", "position('語', s)"],
    "starts_with": ["starts_with(s, t)", "starts_with(s, 'a')", "starts_with(s, '')"],
    "ends_with": ["ends_with(s, t)", "ends_with(s, 'b')", "ends_with(s, '')"],
    "cast": ["cast(a as float64)", "cast(x as int64)", "cast(p as int64)", "cast(a as bool)", "cast(s as int64)",
             "cast(s as float64)", "cast(s as bool)", "cast(s as date)", "cast(s as timestamp)",
             "cast(a as string)", "cast(x as string)", "cast(p as string)", "cast(d as string)",
             "cast(ts as string)", "cast(d as timestamp)", "cast(ts as date)", "cast(a as int64)"],
    "year": ["year(d)", "year(ts)"],
    "month": ["month(d)", "month(ts)"],
    "day": ["day(d)", "day(ts)"],
}

CASE_PARAMS = [pytest.param(fid, text, id=f"{fid}:{text}") for fid, texts in CASES.items() for text in texts]


def _rows_differing(compiled: CompiledExpression, table: pa.Table | pa.RecordBatch) -> list[str]:
    """Rows where the Arrow backend and the reference (the oracle) disagree, shown readably."""
    expected = compiled.evaluate(table, backend="reference").to_pylist()
    observed = compiled.evaluate(table, backend="arrow").to_pylist()
    assert len(observed) == len(expected) == table.num_rows
    columns = {name: table.column(name.split(".")[0]).to_pylist() for name in compiled.fields}
    return [f"row {i} {({k: v[i] for k, v in columns.items()})}: expected {show_value(e)}, got {show_value(o)}"
            for i, (e, o) in enumerate(zip(expected, observed)) if not same_result(e, o)][:8]


def _used(compiled: CompiledExpression) -> set[str]:
    return {name.split(".")[0] for name in compiled.fields}


# ------------------------------------------------------------------------------ coverage
def test_every_function_has_cases():
    # The catalogue is the list of functions (rexpr/catalogue/entries.py).
    assert set(CASES) == set(BY_ID)


def test_arrow_implements_every_function():
    assert set(BY_ID) <= arrow.IMPLEMENTED
    assert set(BY_ID) <= REFERENCE_IMPLEMENTED


@pytest.mark.parametrize("fid, text", CASE_PARAMS)
def test_matches_reference_on_edge_values(fid: str, text: str):
    # Oracle: the reference evaluator, on every combination of the edge-value pools.
    compiled = rexpr.compile(text, SCHEMA)
    assert fid in compiled.functions  # the case really exercises its function
    table = edge_table(SCHEMA, used=_used(compiled))
    assert _rows_differing(compiled, table) == []


def test_every_error_class_is_produced():
    # Each error class of the catalogue (ISO/IEC 9075-2 SQLSTATE classes) comes out somewhere.
    seen: set[ErrorClass] = set()
    for _, text in (p.values for p in CASE_PARAMS):
        compiled = rexpr.compile(text, SCHEMA)
        result = compiled.evaluate(edge_table(SCHEMA, used=_used(compiled)), backend="arrow")
        seen |= {e.error for e in result.errors.values()}
    assert seen == set(ErrorClass)


# ------------------------------------------------------------------------------ input shapes
SHAPE_TEXTS = ["substring(s, a, b)", "position('a', s)", "cast(s as timestamp)", "upper(s) || lower(t)",
               "s like t", "a * b + length(s)", "coalesce(nullif(s, t), 'z')", "ship.port = s"]


@pytest.mark.parametrize("text", SHAPE_TEXTS)
def test_record_batches_chunks_and_slices_agree(text: str):
    # Oracle: the reference. Arrays with an offset, several chunks and a RecordBatch must give
    # the same rows as the table they come from.
    compiled = rexpr.compile(text, SCHEMA)
    table = edge_table(SCHEMA, used=_used(compiled))
    shapes = {
        "batch": table.combine_chunks().to_batches()[0],
        "chunks": pa.Table.from_batches(table.to_batches(max_chunksize=97)),
        "slice": table.slice(13, table.num_rows - 40),
        "sliced batch": table.combine_chunks().to_batches()[0].slice(7, 300),
    }
    for name, shaped in shapes.items():
        assert _rows_differing(compiled, shaped) == [], name


def test_empty_and_all_null_inputs():
    # Oracle: the reference; every expression above on no rows and on rows of nulls only.
    arrow_schema = pa.schema([f.with_nullable(True) for f in SCHEMA.to_arrow()])
    inputs = [arrow_schema.empty_table(), pa.table({f.name: pa.nulls(4, f.type) for f in arrow_schema})]
    for _, text in (p.values for p in CASE_PARAMS):
        compiled = rexpr.compile(text, SCHEMA)
        for table in inputs:
            assert _rows_differing(compiled, table) == [], text


def test_constant_expressions_fill_every_row():
    # Oracle: the reference. No field read: the result still has one value per input row.
    table = pa.table({"_row": [0, 1, 2]})
    for text in ["1 + 2", "null", "9223372036854775807 + 1", "cast('x' as int64)", "coalesce(null, 1)",
                 "case when 1 = 1 then 'a' end", "'ab' like 'a%'", "null is null"]:
        assert _rows_differing(rexpr.compile(text, {}), table) == [], text


def test_narrower_arrow_types_are_read_as_the_schema_says():
    # int32, float32, large_string and dictionary columns read as int64, float64 and string.
    table = pa.table({"a": pa.array([1, None, -3], pa.int32()), "x": pa.array([0.5, 2.0, None], pa.float32()),
                      "s": pa.array(["ab", None, "c"], pa.large_string()).dictionary_encode()})
    compiled = rexpr.compile("cast(a as float64) + x < 3.0 and s <> 'c'", Schema.from_arrow(table.schema))
    assert compiled.evaluate(table, backend="arrow").to_pylist() == [True, None, False]


def test_a_missing_column_is_an_input_problem():
    compiled = rexpr.compile("a + 1", {"a": "int64"})
    with pytest.raises(InputProblem):
        compiled.evaluate(pa.table({"b": [1]}), backend="arrow")


def test_an_unknown_function_is_refused_at_prepare():
    node = TCall("no_such_function", (), BOOL, rexpr.compile("true", {}).tree.span)
    with pytest.raises(NotPushable) as caught:
        arrow.prepare(node)
    assert caught.value.code == "not_pushable"


# ------------------------------------------------------------------------------ awkward strings
# Hand-picked text for casts and string functions beyond the edge pools: sign and digit forms
# (ISO/IEC 9075-2 6.13 numeric literals), RFC 3339 dates and times and their near misses,
# Unicode case-mapping specials (SpecialCasing.txt), and like metacharacters.
AWKWARD = [
    "", " ", "0", "-0", "+0", "0" * 25 + "1", "-9223372036854775808", "9223372036854775807",
    "9223372036854775808", "-9223372036854775809", "9" * 20, " +12 ", "1 2", "+-1", "--1", "0x10", "١٢", "１２",
    "1.", ".5", ".", "1e", "1e5", "1E-5", "+.5e+3", "-inf", "+Infinity", "INFINITY", "infinit", "nan", "-NaN",
    "1e400", "-1e400", "1e-400", "1" * 400, "0." + "0" * 400 + "1", "2.2250738585072011e-308", "\tt", "True",
    "fAlSe", " true ", "tru", "2024-05-01", "2024-02-29", "2023-02-29", "0000-01-01", "0001-01-01", "9999-12-31",
    "2024-13-01", "2024-00-10", "2024-5-1", "2024-05-01T10:00:00", "2024-05-01t10:00:00",
    "2024-05-01 23:59:59.999999", "2024-05-01 24:00:00", "2024-05-01 10:60:00", "2024-05-01 10:00:60",
    "2024-05-01 10:00:00.", "2024-05-01 10:00:00.1234567", "2024-05-01 10:00:00.5", "2024-05-01 10:00",
    "2024-05-01 10:00:00Z", " 2024-05-01 ", "1969-12-31 23:59:59.000001", "2024-05-01  10:00:00",
    "\u00a02024-05-01", "ǅ", "ß", "ﬁ", "ΣΑΣ", "ΑΣ Σ", "İ", "ı", "\u212a", "\U0001F600x", "e\u0301", "a\\b", "a%b",
    "a_b", "%", "_", "\\", "x\\", "\n", "a\nb", None,
]
AWKWARD_TEXTS = [
    "cast(s as int64)", "cast(s as float64)", "cast(s as bool)", "cast(s as date)", "cast(s as timestamp)",
    "cast(cast(s as timestamp) as string)", "cast(cast(s as float64) as string)", "cast(cast(s as date) as timestamp)",
    "upper(s)", "lower(s)", "length(s)", "octet_length(s)", "substring(s, 2, 3)", "substring(s, length(s) - 1)",
    "substring(s, -length(s), length(s) + 2)", "position('a', s)", "position('\\', s)", "s like '%\\'",
    "s like '\\%'", "s like '%\\%' escape '\\'", "s like '_'", "s like '__'", "s like '%_%_'", "s like '%\n%'",
    "trim(s, '0')", "rtrim(s, 'ΣΑ')", "replace(s, '0', '')", "replace(s, 'Σ', 'ss')", "starts_with(s, '\\')",
]


@pytest.mark.parametrize("text", AWKWARD_TEXTS)
def test_awkward_strings(text: str):
    # Oracle: the reference evaluator on the hand-picked strings above.
    table = pa.table({"s": pa.array(AWKWARD, pa.string())})
    assert _rows_differing(rexpr.compile(text, {"s": "string"}), table) == []


def _random_text(rng: random.Random, alphabet: str, longest: int) -> str:
    return "".join(rng.choice(alphabet) for _ in range(rng.randint(0, longest)))


@pytest.mark.parametrize("text", ["s like t", "s like t escape e", "position(t, s)", "replace(s, t, 'Z')",
                                  "trim(s, t)", "ltrim(s, t)", "rtrim(s, t)", "starts_with(s, t)", "ends_with(s, t)",
                                  "substring(s, a, b)", "substring(s, a)"])
def test_parameters_that_vary_per_row(text: str):
    # Oracle: the reference. Nearly every row has its own pattern, so the backend goes row by
    # row; on the second table a few patterns repeat, so it runs one kernel per pattern.
    rng = random.Random(20240501)
    alphabet = "ab%_\\!日 Σß"
    schema = {"s": "string", "t": "string", "e": "string", "a": "int64", "b": "int64"}
    many = pa.table({"s": [_random_text(rng, alphabet, 6) for _ in range(3000)],
                     "t": [_random_text(rng, alphabet, 4) for _ in range(3000)],
                     "e": [rng.choice(["!", "\\", "a", "", "ab", "%"]) for _ in range(3000)],
                     "a": [rng.randint(-4, 8) for _ in range(3000)], "b": [rng.randint(-2, 5) for _ in range(3000)]})
    few = many.set_column(1, "t", pa.array([rng.choice(["a%", "%\\", "_b", "", "日"]) for _ in range(3000)]))
    compiled = rexpr.compile(text, schema)
    assert _rows_differing(compiled, many) == []
    assert _rows_differing(compiled, few) == []


# ------------------------------------------------------------------------------ numbers
def _random_doubles(seed: int, count: int) -> list[float]:
    rng = random.Random(seed)
    out = []
    for i in range(count):
        kind = i % 4
        if kind == 0:  # any bit pattern: subnormals, huge exponents, NaN payloads
            out.append(struct.unpack("<d", struct.pack("<Q", rng.getrandbits(64)))[0])
        elif kind == 1:  # short decimals, where ties on the decimal digit are common
            out.append(round(rng.uniform(-1000, 1000), rng.randint(0, 4)))
        elif kind == 2:  # exact binary ties
            out.append(rng.randint(-10 ** 6, 10 ** 6) / 8)
        else:
            out.append(rng.uniform(-1, 1) * 10.0 ** rng.randint(-30, 30))
    return out


def test_float_to_string_is_python_repr():
    # Source: Python's repr, the shortest string that reads back (IEEE 754-2019 5.12.2), with
    # 'NaN', 'Infinity' and '-Infinity' as the cast table (rexpr/catalogue/casts.py) spells them.
    values = _random_doubles(7, 20000) + [0.0, -0.0, 1.0, 1e16, 1e15 + 0.5, 1e-4, 9.999999999999999e-5, 5e-324,
                                         math.inf, -math.inf, math.nan, 2.675, 123456789.123]
    result = rexpr.compile("cast(x as string)", {"x": "float64"}).evaluate(pa.table({"x": values}), backend="arrow")

    def spelled(v: float) -> str:
        return "NaN" if math.isnan(v) else "Infinity" if v == math.inf else "-Infinity" if v == -math.inf else repr(v)

    assert result.to_pylist() == [spelled(v) for v in values]


def test_round_is_decimal_half_up_on_the_exact_value():
    # Source: Python's decimal module, ROUND_HALF_UP (ties away from zero) applied to the exact
    # binary value, as the catalogue states for round; round(2.675, 2) is 2.67 because 2.675 is
    # stored as 2.67499999999999982236431605997495353221893310546875.
    rng = random.Random(11)
    values = _random_doubles(11, 6000)
    digits = [rng.randint(-25, 25) for _ in values]
    values += [2.675, 0.5, -0.5, 1.5, 2.5, -2.5, 0.125, 0.375]
    digits += [2, 0, 0, 0, 0, 0, 2, 2]
    result = rexpr.compile("round(x, k)", {"x": "float64", "k": "int64"}).evaluate(
        pa.table({"x": values, "k": digits}), backend="arrow").to_pylist()
    for value, k, got in zip(values, digits, result):
        if not math.isfinite(value):
            expected = value
        else:
            with localcontext() as context:
                context.prec = 2000
                expected = float(Decimal(value).quantize(Decimal(1).scaleb(-k), rounding=ROUND_HALF_UP))
        assert same_result(expected, got) and math.copysign(1, expected) == math.copysign(1, got), (value, k)
    assert result[-8] == 2.67


def test_float_to_int_rounds_half_away_and_checks_range():
    # Source: Python's decimal (ROUND_HALF_UP is away from zero) and the int64 bounds
    # [-2^63, 2^63 - 1] (common practice, no source); NaN and ±inf do not fit (casts.py).
    values = _random_doubles(3, 8000) + [0.5, -0.5, 2.5, -2.5, 9.223372036854775e18, -9.223372036854775808e18,
                                        9.223372036854775808e18, math.nan, math.inf]
    result = rexpr.compile("cast(x as int64)", {"x": "float64"}).evaluate(pa.table({"x": values}), backend="arrow")
    for value, got in zip(values, result.to_pylist()):
        if math.isfinite(value):
            whole = int(Decimal(value).to_integral_value(rounding=ROUND_HALF_UP))
            expected = whole if -2 ** 63 <= whole < 2 ** 63 else RowError(ErrorClass.OUT_OF_RANGE)
        else:
            expected = RowError(ErrorClass.OUT_OF_RANGE)
        assert same_result(expected, got), value


def test_int64_overflow_is_exact():
    # Source: exact integer arithmetic in Python against the int64 range (common practice, no
    # source for the range); random operands near the limits so that many rows overflow.
    rng = random.Random(5)
    big = [rng.choice([rng.randint(-2 ** 63, 2 ** 63 - 1), rng.randint(-2 ** 32, 2 ** 32), rng.randint(-3, 3),
                       -2 ** 63, 2 ** 63 - 1]) for _ in range(6000)]
    other = big[::-1]
    table = pa.table({"a": big, "b": other})
    for text, exact in [("a + b", lambda x, y: x + y), ("a - b", lambda x, y: x - y), ("a * b", lambda x, y: x * y),
                        ("-a", lambda x, y: -x), ("abs(a)", lambda x, y: abs(x))]:
        got = rexpr.compile(text, {"a": "int64", "b": "int64"}).evaluate(table, backend="arrow").to_pylist()
        for x, y, value in zip(big, other, got):
            true = exact(x, y)
            expected = true if -2 ** 63 <= true < 2 ** 63 else RowError(ErrorClass.OUT_OF_RANGE)
            assert same_result(expected, value), (text, x, y)


def iso_substring(text: str, start: int, length: int | None) -> object:
    """ISO/IEC 9075-2 6.30 <string value function>, general rules for <character substring
    function>, in Python's unbounded integers: E = S + L (no L: past the end); L < 0 is
    exception 22011; if S > the length of C or E < 1 the result is empty; otherwise the
    characters from max(S, 1) up to, not including, min(E, length + 1)."""
    if length is not None and length < 0:
        return RowError(ErrorClass.INVALID_ARGUMENT)
    end = len(text) + 1 if length is None else start + length
    if start > len(text) or end < 1:
        return ""
    return text[max(start, 1) - 1:min(end, len(text) + 1) - 1]


SUBSTRING_TEXTS = ["", "a", "abc", "日本語x"]
SUBSTRING_STARTS = [-2 ** 63, -2 ** 63 + 1, -3, -1, 0, 1, 2, 3, 4, 5, 2 ** 63 - 2, 2 ** 63 - 1]
SUBSTRING_LENGTHS = [0, 1, 2, 3, 4, 2 ** 63 - 2, 2 ** 63 - 1, -1, -2 ** 63]


@pytest.mark.parametrize("text", ["substring(s, a, b)", "substring(s, a)", "substring(s, -9223372036854775808, b)",
                                  "substring(s, a, 0)", "substring(s, 9223372036854775807, b)"])
def test_substring_follows_the_standard_at_the_int64_bounds(text: str):
    # Source: ISO/IEC 9075-2 6.30 (iso_substring above), on start and length values at and
    # next to the int64 bounds, where S + L and E - 1 leave int64 if computed naively.
    rows = [(c, s, n) for c in SUBSTRING_TEXTS for s in SUBSTRING_STARTS for n in SUBSTRING_LENGTHS]
    table = pa.table({"s": [r[0] for r in rows], "a": pa.array([r[1] for r in rows], pa.int64()),
                      "b": pa.array([r[2] for r in rows], pa.int64())})
    compiled = rexpr.compile(text, {"s": "string", "a": "int64", "b": "int64"})
    observed = compiled.evaluate(table, backend="arrow").to_pylist()
    literal_start = {"-9223372036854775808": -2 ** 63, "9223372036854775807": 2 ** 63 - 1}
    wrong = []
    for (c, s, n), got in zip(rows, observed):
        start = next((v for k, v in literal_start.items() if k in text), s)
        length = None if text == "substring(s, a)" else 0 if text.endswith(", 0)") else n
        expected = iso_substring(c, start, length)
        if not same_result(expected, got):
            wrong.append((c, start, length, show_value(expected), show_value(got)))
    assert wrong == []


def test_substring_with_a_computed_length_at_the_lowest_start():
    # The repro from the differential tester: position('a', '') is 0 (ISO/IEC 9075-2 6.33
    # <position expression>: a search string that does not occur gives 0), so by 6.30 the
    # result is the empty string (E = -2^63 + 0 < 1), not 'a'.
    compiled = rexpr.compile("substring('a', -9223372036854775808, position('a', ''))", {"z": "int64"})
    assert compiled.evaluate(pa.table({"z": [1]}), backend="arrow").to_pylist() == [""]


def test_string_to_date_matches_the_proleptic_gregorian_calendar():
    # Source: Python's datetime (proleptic Gregorian calendar, years 1 to 9999) for every day
    # of a sample of years, and the invalid days around them.
    days = []
    for year in (1, 4, 100, 400, 1582, 1900, 1969, 1970, 2000, 2024, 2100, 9999):
        start = dt.date(year, 1, 1).toordinal()
        end = dt.date(year, 12, 31).toordinal()
        days += [dt.date.fromordinal(o) for o in range(start, end + 1)]
    texts = [f"{d.year:04d}-{d.month:02d}-{d.day:02d}" for d in days] + ["1900-02-29", "2100-02-29", "2023-04-31"]
    result = rexpr.compile("cast(s as date)", {"s": "string"}).evaluate(pa.table({"s": texts}), backend="arrow")
    assert result.to_pylist() == days + [RowError(ErrorClass.INVALID_DATETIME)] * 3


# ------------------------------------------------------------------------------ Unicode
def test_case_mapping_is_python_str_for_every_code_point():
    # Source: the Unicode Standard 3.13 full case mapping (SpecialCasing.txt included) as
    # Python's str.upper and str.lower implement it, for every code point but the surrogates.
    text = [chr(c) for c in range(sys.maxunicode + 1) if not 0xD800 <= c <= 0xDFFF] + ["ΣΑΣ", "ΑΣ Σ", "Straße"]
    table = pa.table({"s": text})
    assert rexpr.compile("upper(s)", {"s": "string"}).evaluate(table, backend="arrow").to_pylist() == \
        [c.upper() for c in text]
    assert rexpr.compile("lower(s)", {"s": "string"}).evaluate(table, backend="arrow").to_pylist() == \
        [c.lower() for c in text]


def test_no_other_code_point_lowercases_into_ascii():
    # The bool cast lower-cases with ASCII rules only; that equals Python's str.lower for
    # 'true'/'false' because (Unicode case mapping, via str.lower) only these two non-ASCII
    # code points lower-case to anything containing ASCII, and neither spells those words.
    ascii_bearing = {c for c in range(0x80, sys.maxunicode + 1)
                     if not 0xD800 <= c <= 0xDFFF and any(ch.isascii() for ch in chr(c).lower())}
    assert ascii_bearing == {0x130, 0x212A}


# ------------------------------------------------------------------------------ corpora
CORPORA = load_corpora()


@pytest.mark.parametrize("corpus", CORPORA, ids=lambda c: c.name)
def test_corpus_inputs(corpus):
    # Oracle: the reference, on the hand-written corpus tables (corpora/*.toml).
    for case in corpus.cases:
        if case.compile_error is None:
            compiled = rexpr.compile(case.expression, corpus.schema)
            assert _rows_differing(compiled, corpus.table) == [], case.expression


# ------------------------------------------------------------------------------ dataset filters
PUSHED = [
    "a = 1", "a <> b", "x = 0.0", "x < 1.0", "x >= y", "s like 'a%'", "s like '%b'", "s like '%\\'",
    "s like 'a_b'", "s like '_'", "s like 'a!%b' escape '!'", "s like '%a%b%'", "starts_with(s, 'a')",
    "ends_with(s, 'b')", "x is null", "not (s is null)", "not (x is null)", "p", "not p", "p = true",
    "s in ('a', 'ab', null)", "x in (0.0, 1.0)", "a between -1 and 7", "x between -1.0 and 1.0",
    "not (a between -1 and 7)", "d >= date '2000-02-29'", "ts < timestamp '2000-01-01 00:00:00'",
    "ship.port = 'a'", "ship.berth > 5", "ship.port is null", "(a > 0 or s = 'a') and not (p or q)", "x > 0.0 or s = 'ab'",
    "s >= 'a' and s < 'b'", "s = 'Straße'", "not (s like 'a%')", "s < t",
]
REFUSED = {
    "x <> 1.0": "true for NaN, which Parquet statistics leave out of min/max",
    "not (x < 1.0)": "a negated float comparison is true for NaN",
    "is_nan(x)": "only NaN rows match, and statistics cannot see them",
    "x is distinct from y": "true for NaN rows",
    "a + 1 > 0": "int64 arithmetic can raise a per-row error",
    "a > 1.5": "the int64 -> float64 cast fails in statistics pruning beyond 2^53",
    "s like t": "a per-row pattern",
    "s like 'a' escape 'xy'": "an invalid escape is a per-row error",
    "substring(s, 1, 2) = 'a'": "substring is not in the covered set",
    "a": "not a predicate",
}


@pytest.fixture(scope="module")
def parquet_rows(tmp_path_factory):
    """The edge table plus a column of row ids, written as a Parquet file of 3-row groups, so
    that row-group statistics really prune."""
    table = edge_table(SCHEMA, max_rows=600)
    # Groups whose only NaN sits beside zeros, and strings ending in a backslash.
    extra = table.slice(0, 4)
    extra = extra.set_column(extra.schema.get_field_index("s"), "s", pa.array(["x\\", "\\", "a\nb", "ab"]))
    extra = extra.set_column(extra.schema.get_field_index("x"), "x", pa.array([math.nan, 0.0, -0.0, math.nan]))
    table = pa.concat_tables([table, extra])
    table = table.append_column("_id", pa.array(range(table.num_rows), pa.int64()))
    path = tmp_path_factory.mktemp("parquet") / "edge.parquet"
    pq.write_table(table, path, row_group_size=3)
    return table, ds.dataset(path)


@pytest.mark.parametrize("text", PUSHED)
def test_dataset_filter_keeps_exactly_the_true_rows(text: str, parquet_rows):
    # Oracle: the reference evaluator's mask; the dataset scan reads a real Parquet file.
    table, dataset = parquet_rows
    compiled = rexpr.compile(text, SCHEMA)
    expression = arrow.to_dataset_expression(compiled.tree)
    assert expression is not None
    kept = sorted(dataset.to_table(filter=expression, columns=["_id"]).column("_id").to_pylist())
    mask = compiled.evaluate(table, backend="reference").to_pylist()
    assert kept == [i for i, v in enumerate(mask) if v is True]


@pytest.mark.parametrize("text", sorted(REFUSED))
def test_dataset_filter_refuses_what_arrow_does_differently(text: str):
    assert arrow.to_dataset_expression(rexpr.compile(text, SCHEMA).tree) is None, REFUSED[text]
