"""The NumPy backend against the reference evaluator (the project's oracle), row by row.

Every catalogue function id needs cases here: the id list comes from the catalogue, so a new
function fails ``test_every_function_has_cases`` until it has cases (and a kernel).
"""

from __future__ import annotations

import datetime as dt
import math
import struct
import sys

import pyarrow as pa
import pytest
from hypothesis import given, settings, strategies as st

import rexpr
from rexpr.catalogue import BY_ID, ErrorClass
from rexpr.compare import same_result
from rexpr.reference.evaluator import IMPLEMENTED
from rexpr.rows import edge_table
from rexpr.schema import Schema
from rexpr.values import RowError

SCHEMA = Schema.from_mapping({
    "a": "int64", "b": "int64", "x": "float64", "y": "float64", "s": "string", "t": "string",
    "p": "bool", "q": "bool", "d": "date", "e": "date", "ts": "timestamp", "tu": "timestamp",
    "ship": {"port": "string", "berth": "int64"},
})

_KINDS = (("a", "b"), ("x", "y"), ("s", "t"), ("d", "e"), ("ts", "tu"), ("p", "q"))


def _compare_all(op: str) -> list[str]:
    return [f"{left} {op} {right}" for left, right in _KINDS]


# Expressions per function id, over the edge-value pools (rexpr.edge_values). Column operands
# take the general paths, literal operands the constant fast paths; both must agree.
CASES: dict[str, list[str]] = {
    "add": ["a + b", "x + y", "a + 1", "ship.berth + 1"],
    "subtract": ["a - b", "x - y", "0 - a"],
    "multiply": ["a * b", "x * y", "a * -1"],
    "divide": ["x / y", "a / b", "x / 0"],
    "modulo": ["a % b", "x % y", "a % -1"],
    "negate": ["-a", "-x"],
    "div": ["div(a, b)", "div(a, -1)"],
    "abs": ["abs(a)", "abs(x)"],
    "round": ["round(x)", "round(x, 2)", "round(x, -1)", "round(x, b)", "round(a)", "round(a, -2)",
              "round(a, b)", "round(x, 400)", "round(x, -308)"],
    "floor": ["floor(x)", "floor(a)"],
    "ceil": ["ceil(x)", "ceil(a)"],
    "sqrt": ["sqrt(x)"],
    "power": ["power(x, y)", "power(x, 2)", "power(-8.0, y)"],
    "ln": ["ln(x)"],
    "exp": ["exp(x)", "exp(exp(x))"],
    "is_nan": ["is_nan(x)"],
    "eq": _compare_all("="),
    "ne": _compare_all("<>"),
    "lt": _compare_all("<"),
    "le": _compare_all("<="),
    "gt": _compare_all(">"),
    "ge": _compare_all(">="),
    "is_distinct_from": [f"{l} is distinct from {r}" for l, r in _KINDS] + ["s is not distinct from t"],
    "is_null": ["s is null", "x is not null", "div(a, b) is null"],
    "and": ["p and q", "b <> 0 and div(a, b) > 1", "p and q and a = 0", "div(a, b) > 0 and p"],
    "or": ["p or q", "b = 0 or div(a, b) > 1", "p or q or a = 0", "div(a, b) > 0 or p"],
    "not": ["not p", "not (a = b)"],
    "coalesce": ["coalesce(a, b)", "coalesce(s, t, 'none')", "coalesce(nullif(b, 0), div(a, b), -1)",
                 "coalesce(x / y, x)", "coalesce(x + y / 0.0, -1.0)"],
    "nullif": ["nullif(x, y)", "nullif(s, t)", "nullif(a, b)", "nullif(d, e)"],
    "case": ["case when a > 0 then div(b, a) when a < 0 then -a else a * b end",
             "case s when 'a' then 1 when t then 2 end",
             "case when p then x when q then y / 0 end",
             "case when div(a, b) > 0 then 'pos' else s end"],
    "in": ["a in (1, b, div(1, b))", "s in ('a', t)", "x in (y, 0.0, 1.0)", "d in (e)", "p in (q, true)"],
    "between": ["a between b and 7", "x between y and 1.5", "s between 'a' and t", "ts between tu and ts"],
    "like": ["s like t", "s like 'a%'", "s like '%b'", "s like '%a%b%'", "s like 'a%a'", "s like 'ab%b'",
             "s like 'a_b'", "s like '%%'", "s like ''", "s like t escape '\\'", "s like 'a\\%b' escape '\\'",
             "s like 'a' escape t", "s like '%' escape 'ab'", "s like 'a\\' escape '\\'", "s like 'ab%' escape 'a'"],
    "trim": ["trim(s)", "trim(s, t)", "trim(s, 'a ')", "trim(s, 'ß\u00a0')", "trim(s, 'ß ')", "trim(s, '')"],
    "ltrim": ["ltrim(s)", "ltrim(s, t)", "ltrim(s, ' a')"],
    "rtrim": ["rtrim(s)", "rtrim(s, t)", "rtrim(s, 'b ')"],
    "substring": ["substring(s, a)", "substring(s, a, b)", "substring(s, 2, 2)", "substring(s, 0, 2)",
                  "substring(s, -1)", "substring(s, a, 2)", "substring(s, 1, b)", "substring(s, 3)",
                  "substring(s, -2, 4)", "substring(s, 2, -1)", "substring(s, 2, 0)",
                  "substring(s, 9223372036854775807, 9223372036854775807)",
                  "substring(s, -9223372036854775808, 9223372036854775807)"],
    "upper": ["upper(s)"],
    "lower": ["lower(s)"],
    "length": ["length(s)"],
    "octet_length": ["octet_length(s)"],
    "concat_op": ["s || t", "s || 'x'"],
    "concat": ["concat(s, t, s)", "concat(s)", "concat(s, null)"],
    "replace": ["replace(s, t, 'x')", "replace(s, 'a', 'zz')", "replace(s, '', 'x')", "replace(s, 'b', t)"],
    "position": ["position(t, s)", "position('a', s)", "position('', s)"],
    "starts_with": ["starts_with(s, t)", "starts_with(s, 'a')"],
    "ends_with": ["ends_with(s, t)", "ends_with(s, 'b ')"],
    "cast": ["cast(a as float64)", "cast(x as int64)", "cast(p as int64)", "cast(a as bool)",
             "cast(s as int64)", "cast(s as float64)", "cast(s as bool)", "cast(s as date)",
             "cast(s as timestamp)", "cast(a as string)", "cast(x as string)", "cast(p as string)",
             "cast(d as string)", "cast(ts as string)", "cast(d as timestamp)", "cast(ts as date)",
             "cast(a as int64)"],
    "year": ["year(d)", "year(ts)"],
    "month": ["month(d)", "month(ts)"],
    "day": ["day(d)", "day(ts)", "day(cast(ship.port as date))"],
}


def _mismatches(text: str, table: pa.Table, schema: Schema = SCHEMA) -> list[tuple[int, object, object]]:
    compiled = rexpr.compile(text, schema)
    expected = compiled.evaluate(table, backend="reference").to_pylist()
    observed = compiled.evaluate(table, backend="numpy").to_pylist()
    assert len(observed) == len(expected)
    return [(i, e, o) for i, (e, o) in enumerate(zip(expected, observed)) if not same_result(e, o)][:5]


def test_every_function_has_cases():
    # The catalogue is the list of functions; the reference implements each (its oracle role).
    assert set(BY_ID) == set(IMPLEMENTED)
    assert set(CASES) == set(BY_ID), f"add cases for: {sorted(set(BY_ID) - set(CASES))}"


@pytest.mark.parametrize("function_id, text", [(f, t) for f, texts in CASES.items() for t in texts])
def test_matches_reference_on_edge_values(function_id, text):
    compiled = rexpr.compile(text, SCHEMA)
    assert function_id in compiled.functions
    table = edge_table(SCHEMA, {path.split(".")[0] for path in compiled.fields})
    # Oracle: the reference evaluator, compared with the documented equality rules (rexpr.compare).
    assert _mismatches(text, table) == []


# ---------------------------------------------------------------- U+0000 and input shapes
NUL_STRINGS = ["a\x00", "\x00", "a\x00b", "ab", "", " \x00 ", "\x00a", "1\x00", "2024-05-01\x00", None]


@pytest.mark.parametrize("text", [
    "s = t", "s < t", "s >= t", "length(s)", "octet_length(s)", "upper(s)", "trim(s, t)", "trim(s)",
    "substring(s, 2)", "position(t, s)", "starts_with(s, t)", "ends_with(s, t)", "replace(s, t, '-')",
    "s like t", "s like 'a%'", "s like '%b'", "s || t", "concat(s, t)", "s in (t, 'ab')",
    "nullif(s, t)", "s is distinct from t", "cast(s as int64)", "cast(s as date)", "cast(s as float64)",
    "cast(s as bool)", "cast(s as timestamp)",
])
def test_strings_holding_nul(text):
    # NumPy's string kernels mishandle a trailing U+0000; the backend must still agree with the
    # reference (oracle) on such strings. U+0000 is a valid code point in UTF-8 (RFC 3629).
    rows = [(a, b) for a in NUL_STRINGS for b in NUL_STRINGS]
    table = pa.table({"s": [r[0] for r in rows], "t": [r[1] for r in rows]})
    assert _mismatches(text, table, Schema.from_mapping({"s": "string", "t": "string"})) == []


def test_chunked_sliced_and_batch_inputs():
    schema = Schema.from_mapping({"a": "int64", "s": "string", "ship": {"port": "string"}})
    ships = pa.array([{"port": "Oslo"}, None, {"port": None}, {"port": " Bergen"}] * 3)
    whole = pa.table({"a": pa.array([1, None, -3, 2**62] * 3), "s": pa.array(["x", "y", None, "\u00e9"] * 3),
                      "ship": ships})
    chunked = pa.concat_tables([whole.slice(0, 5), whole.slice(5)])
    text = "case when a > 0 then trim(ship.port) || s else upper(s) end"
    for table in (whole, chunked, whole.slice(3, 6)):
        assert _mismatches(text, table, schema) == []
    batch = whole.to_batches()[0]
    compiled = rexpr.compile(text, schema)
    # Struct fields are null where the struct is null (ISO/IEC 9075-2 6.7 <field reference>, from memory).
    assert rexpr.compile("ship.port is null", schema).evaluate(whole, "numpy").to_pylist()[:4] == \
        [False, True, True, False]
    assert compiled.evaluate(batch, "numpy").to_pylist() == compiled.evaluate(batch, "reference").to_pylist()


def test_narrow_and_dictionary_inputs():
    table = pa.table({"a": pa.array([1, None, -7], pa.int8()), "x": pa.array([1.5, None, -0.5], pa.float32()),
                      "s": pa.array(["b", None, "b"]).dictionary_encode()})
    text = "cast(a as float64) + x > 0 or s = 'b'"
    assert _mismatches(text, table, Schema.from_arrow(table.schema)) == []


def test_empty_table_and_constant_expression():
    schema = Schema.from_mapping({"a": "int64"})
    empty = pa.table({"a": pa.array([], pa.int64())})
    assert rexpr.compile("a + 1", schema).evaluate(empty, "numpy").to_pylist() == []
    one_row = pa.table({"_row": [0]})
    for text in ("1 + 2 * 3", "null", "div(1, 0)", "'ab' like 'a_'", "coalesce(null, 2)"):
        compiled = rexpr.compile(text, {})
        expected = compiled.evaluate(one_row, "reference").to_pylist()
        assert all(same_result(e, o) for e, o in zip(expected, compiled.evaluate(one_row, "numpy").to_pylist()))


# ---------------------------------------------------------------- exactness beyond the pools
def _ints(draw_from: list[int]) -> st.SearchStrategy[list[int]]:
    near_bounds = st.sampled_from(draw_from)
    return st.lists(st.one_of(st.integers(-(2**63), 2**63 - 1), near_bounds), min_size=1, max_size=64)


_BOUNDS = [0, 1, -1, 2, -2, 3037000499, 3037000500, -3037000500, 2**32, -(2**32), 2**62, -(2**62),
           2**63 - 1, -(2**63), 2**63 - 2, -(2**63) + 1, 4294967296, 2147483648, -2147483649]


@settings(max_examples=60, deadline=None)
@given(_ints(_BOUNDS), _ints(_BOUNDS))
def test_int64_arithmetic_is_exact(left, right):
    # Oracle: the reference uses Python's unbounded ints, so overflow there is exact.
    size = min(len(left), len(right))
    table = pa.table({"a": left[:size], "b": right[:size]})
    schema = Schema.from_mapping({"a": "int64", "b": "int64"})
    for text in ("a * b", "a + b", "a - b", "div(a, b)", "a % b", "round(a, -b % 21)", "abs(a) + -b"):
        assert _mismatches(text, table, schema) == []


def _floats() -> st.SearchStrategy[float]:
    bits = st.integers(0, 2**64 - 1).map(lambda b: struct.unpack("<d", struct.pack("<Q", b))[0])
    decimals = st.decimals(allow_nan=False, allow_infinity=False, places=4, min_value=-10**6, max_value=10**6)
    int64_edges = [2.0**63, -(2.0**63), math.nextafter(2.0**63, 0), math.nextafter(-(2.0**63), -math.inf)]
    return st.one_of(bits, decimals.map(float), st.sampled_from([0.5, 2.5, -2.5, 2.675, 1.005, 0.125, *int64_edges]))


@settings(max_examples=40, deadline=None)
@given(st.lists(_floats(), min_size=1, max_size=64), st.integers(-20, 20))
def test_float_rounding_and_text(values, digits):
    # Oracle: the reference rounds with Python's decimal on the exact binary value and spells
    # floats with Python's repr (shortest round trip, IEEE 754-2019 5.12.2).
    table = pa.table({"x": pa.array(values, pa.float64())})
    schema = Schema.from_mapping({"x": "float64"})
    for text in (f"round(x, {digits})", "round(x)", "cast(x as int64)", "cast(x as string)",
                 "cast(cast(x as string) as float64) = x"):
        assert _mismatches(text, table, schema) == []


@settings(max_examples=30, deadline=None)
@given(st.lists(st.tuples(st.floats(-745, 710), st.floats(0.0, 1e6, exclude_min=True), st.floats(-400, 400)),
                min_size=1, max_size=64))
def test_exp_ln_power_are_the_c_library_bit_for_bit(rows):
    # Source: Python's math module, i.e. the platform C library that the reference calls. A
    # last-place difference would be magnified by chains such as exp(exp(x)).
    x, positive, y = (list(column) for column in zip(*rows))
    table = pa.table({"x": x, "p": positive, "y": y})
    schema = Schema.from_mapping({"x": "float64", "p": "float64", "y": "float64"})

    def results(text: str) -> list[object]:
        return rexpr.compile(text, schema).evaluate(table, "numpy").to_pylist()

    assert results("exp(x)") == [_or_inf(math.exp, v) for v in x]
    assert results("ln(p)") == [math.log(v) for v in positive]
    assert results("power(p, y)") == [_or_inf(math.pow, a, b) for a, b in zip(positive, y)]


def _or_inf(fn, *args: float) -> float:
    try:
        return fn(*args)
    except OverflowError:  # positive results overflow to +inf (C99 F.10.3.1 exp, F.10.4.4 pow)
        return math.inf


_NUMERAL_TEXT = st.text(alphabet="0123456789+-.eE iInNfFtTyYaAlLsSuUrR_:\t\u0660\u00a0", max_size=12)
_INTEGER_TEXT = st.builds(lambda pad, sign, n: f"{pad}{sign}{abs(n)}{pad}", st.sampled_from(["", " ", "  ", "\t"]),
                          st.sampled_from(["", "+", "-", "0", "-00"]), st.integers(-(2**65), 2**65))
_DATE_TEXT = st.builds(lambda y, m, d, sep, rest: f"{y:04d}-{m:02d}-{d:02d}{sep}{rest}",
                       st.integers(0, 9999), st.integers(0, 13), st.integers(0, 32),
                       st.sampled_from(["", " ", "T", "t", "x"]),
                       st.text(alphabet="0123456789:. ", max_size=16))

def _date_time_text(when: dt.datetime, separator: str, dot: str, digits: int,
                    typo: tuple[int, str] | None) -> str:
    text = (f"{when.year:04d}-{when.month:02d}-{when.day:02d}{separator}"
            f"{when.hour:02d}:{when.minute:02d}:{when.second:02d}{dot}{when.microsecond:06d}9"[:digits + 20])
    text = text if dot else text[:19]
    if typo is not None and typo[0] < len(text):
        text = text[:typo[0]] + typo[1] + text[typo[0] + 1:]
    return text


# RFC 3339 date-times with 0 to 7 fraction digits, a bare dot, or one character changed.
_TIMESTAMP_TEXT = st.builds(_date_time_text, st.datetimes(), st.sampled_from([" ", "T", "t", "_"]),
                            st.sampled_from(["", "."]), st.integers(0, 7),
                            st.one_of(st.none(), st.tuples(st.integers(0, 27), st.sampled_from("09-:. xT"))))


@settings(max_examples=60, deadline=None)
@given(st.lists(st.one_of(_NUMERAL_TEXT, _INTEGER_TEXT, _DATE_TEXT, _TIMESTAMP_TEXT, st.text(max_size=6)),
                min_size=1, max_size=64))
def test_text_casts(texts):
    # Oracle: the reference casts (rexpr.reference.casts), which follow rexpr.catalogue.casts.
    table = pa.table({"s": pa.array(texts, pa.string())})
    schema = Schema.from_mapping({"s": "string"})
    for target in ("int64", "float64", "bool", "date", "timestamp"):
        assert _mismatches(f"cast(s as {target})", table, schema) == []


@settings(max_examples=40, deadline=None)
@given(st.lists(st.text(alphabet="ab%_\\é\x00", max_size=6), min_size=1, max_size=40),
       st.text(alphabet="ab%_\\é", max_size=6))
def test_like_patterns(subjects, pattern):
    # Oracle: the reference like (ISO/IEC 9075-2 8.5 semantics, translated to a regular expression).
    table = pa.table({"s": subjects})
    schema = Schema.from_mapping({"s": "string"})
    quoted = pattern.replace("'", "''")
    for text in (f"s like '{quoted}'", f"s like '{quoted}' escape '\\'", f"s like '{quoted}' escape 'a'"):
        assert _mismatches(text, table, schema) == []


def test_case_mapping_over_every_code_point():
    # Source: Python's str.upper/str.lower implement Unicode toUppercase/toLowercase with
    # SpecialCasing (The Unicode Standard 3.13); surrogates cannot be encoded in UTF-8 (RFC 3629).
    chars = [chr(c) for c in range(1, sys.maxunicode + 1) if not 0xD800 <= c <= 0xDFFF]
    table = pa.table({"s": chars})
    schema = Schema.from_mapping({"s": "string"})
    upper = rexpr.compile("upper(s)", schema).evaluate(table, "numpy").to_pylist()
    lower = rexpr.compile("lower(s)", schema).evaluate(table, "numpy").to_pylist()
    assert [c for c, u in zip(chars, upper) if u != c.upper()] == []
    assert [c for c, u in zip(chars, lower) if u != c.lower()] == []
    # Final sigma (Unicode 3.13 Final_Sigma): lowercase Σ at the end of a word is ς.
    sigma = pa.table({"s": ["ΣΑΣ", "ΑΣ Α", "Σ", "ΑΣ.", "aΣb"]})
    assert rexpr.compile("lower(s)", schema).evaluate(sigma, "numpy").to_pylist() == \
        [s.lower() for s in sigma.column("s").to_pylist()]


def test_independent_facts():
    table = pa.table({"_row": [0]})

    def value(text: str) -> object:
        return rexpr.compile(text, {}).evaluate(table, "numpy").to_pylist()[0]

    assert value("-7 % 3") == -1 and value("7 % -3") == 1  # ISO/IEC 9075-2 6.28 MOD: sign of the dividend
    assert value("div(-7, 2)") == -3  # truncation toward zero (common practice, no source)
    assert value("9223372036854775807 + 1") == RowError(ErrorClass.OUT_OF_RANGE)
    assert value("3037000500 * 3037000500") == RowError(ErrorClass.OUT_OF_RANGE)  # > 2**63
    assert value("3037000499 * 3037000499") == 3037000499**2  # < 2**63 (Python int arithmetic)
    assert value("round(2.675, 2)") == 2.67  # exact binary value is below the tie (Python decimal)
    assert value("round(2.5)") == 3.0 and value("round(-2.5)") == -3.0  # half away from zero
    assert math.copysign(1.0, value("round(-0.4)")) == -1.0  # sign of zero kept (IEEE 754-2019 5.9)
    assert value("upper('straße')") == "STRASSE"  # Unicode SpecialCasing.txt: ß -> SS
    assert value("length('e\u0301')") == 2 and value("octet_length('\U0001F600')") == 4  # RFC 3629
    assert value("cast(1e20 as string)") == "1e+20" and value("cast(-0.0 as string)") == "-0.0"  # Python repr
    assert value("cast(0.0 / 0.0 > 0 as string)") == RowError(ErrorClass.DIVISION_BY_ZERO)
    assert value("sqrt(-0.0)") == 0.0 and math.copysign(1.0, value("sqrt(-0.0)")) == -1.0  # IEEE 754 5.4.1
    assert value("cast('2024-02-29' as date)") == dt.date(2024, 2, 29)  # 2024 is a leap year (Gregorian)
    assert value("cast('1900-02-29' as date)") == RowError(ErrorClass.INVALID_DATETIME)
    assert value("cast(timestamp '1969-12-31 23:59:59.5' as date)") == dt.date(1969, 12, 31)
    assert value("cast(timestamp '2024-05-01 10:00:00.120000' as string)") == "2024-05-01 10:00:00.12"
