"""The reference evaluator checked against sources outside the project.

Each check names its source in a comment: ISO/IEC 9075-2 (SQL/Foundation; subclause numbers
as cited by the catalogue, from memory of the 2016 edition), IEEE 754-2019, RFC 3339 and 3629,
the Unicode Standard via Python's ``str``/``unicodedata``, and Python's ``decimal``, ``math``,
``fractions`` and ``calendar`` modules as reference libraries. Where the reference contradicts a
source the check is a strict xfail naming the contradiction.
"""

from __future__ import annotations

import calendar
import datetime as dt
import math
import random
import struct
import unicodedata
from decimal import ROUND_HALF_UP, Decimal, localcontext
from fractions import Fraction

import pyarrow as pa
import pytest

import rexpr
from rexpr.catalogue.model import ErrorClass
from rexpr.compare import same_result
from rexpr.values import RowError

T, F, U = True, False, None  # SQL truth values; unknown is the null boolean

INT64_MAX = 2**63 - 1  # two's-complement 64-bit bounds (common practice, no source)
INT64_MIN = -(2**63)


def value(text: str):
    """The reference value of a constant expression (one row, no columns)."""
    return rexpr.compile(text, {}).evaluate(pa.table({"_row": [0]}), backend="reference").to_pylist()[0]


def column(text: str, **columns: tuple[str, list]):
    """Reference values of ``text`` over columns given as name=(type, values)."""
    schema = {name: spec for name, (spec, _) in columns.items()}
    compiled = rexpr.compile(text, schema)
    table = pa.Table.from_pydict({name: values for name, (_, values) in columns.items()},
                                 schema=compiled.schema.to_arrow())
    return compiled.evaluate(table, backend="reference").to_pylist()


def error_class(result) -> ErrorClass | None:
    return result.error if isinstance(result, RowError) else None


def bits(x: float) -> bytes:
    return struct.pack("<d", x)


def same_float(a: float, b: float) -> bool:
    """Exact equality that tells -0.0 from 0.0 and lets NaN equal NaN."""
    return (math.isnan(a) and math.isnan(b)) or bits(a) == bits(b)


# ================================================================== three-valued logic
# ISO/IEC 9075-2 6.39 <boolean value expression>, the truth tables for AND, OR and NOT
# (table entries are the standard's; table numbering from memory).
AND_TABLE = {(T, T): T, (T, F): F, (T, U): U, (F, T): F, (F, F): F, (F, U): F, (U, T): U, (U, F): F, (U, U): U}
OR_TABLE = {(T, T): T, (T, F): T, (T, U): T, (F, T): T, (F, F): F, (F, U): U, (U, T): T, (U, F): U, (U, U): U}
NOT_TABLE = {T: F, F: T, U: U}
PAIRS = list(AND_TABLE)


@pytest.mark.parametrize("op, table", [("and", AND_TABLE), ("or", OR_TABLE)])
def test_truth_tables(op, table):
    p = [a for a, _ in PAIRS]
    q = [b for _, b in PAIRS]
    got = column(f"p {op} q", p=("bool", p), q=("bool", q))
    assert got == [table[pair] for pair in PAIRS]


def test_not_truth_table():
    got = column("not p", p=("bool", list(NOT_TABLE)))
    assert got == list(NOT_TABLE.values())


def test_is_null_and_is_distinct_from_are_never_unknown():
    # ISO/IEC 9075-2 8.8 <null predicate> and 8.15 <distinct predicate>: both are true or false.
    p = [a for a, _ in PAIRS]
    q = [b for _, b in PAIRS]
    assert column("p is null", p=("bool", p)) == [a is None for a in p]
    # 8.15: two nulls are not distinct; a null and a value are; otherwise distinct means <>.
    assert column("p is distinct from q", p=("bool", p), q=("bool", q)) == [
        (a is None) != (b is None) or (a is not None and a != b) for a, b in PAIRS]


def test_filter_keeps_only_true_rows():
    # ISO/IEC 9075-2 7.8 <where clause>: the result keeps the rows for which the search condition
    # is True; False and Unknown rows are both dropped.
    table = pa.table({"p": pa.array([T, F, U], pa.bool_())})
    kept = rexpr.compile("p", table.schema).filter(table, backend="reference")
    assert kept.column("p").to_pylist() == [True]


@pytest.mark.parametrize("text, expected", [
    # ISO/IEC 9075-2 8.4 <in predicate>: x IN (a, b) is x = a OR x = b.
    ("1 in (1, null)", T), ("1 in (2, null)", U), ("1 not in (2, null)", U), ("null in (1)", U),
    ("1 in (2, 3)", F),
    # ISO/IEC 9075-2 8.3 <between predicate>: x BETWEEN a AND b is x >= a AND x <= b (asymmetric).
    ("2 between 1 and 3", T), ("2 between 3 and 1", F), ("2 between null and 1", F),
    ("2 between null and 3", U), ("null between 1 and 3", U),
    # ISO/IEC 9075-2 6.12 <case abbreviation>: COALESCE and NULLIF are CASE expressions.
    ("coalesce(null, 2, 3)", 2), ("nullif(1, 1) is null", T), ("nullif(1, 2)", 1),
])
def test_predicates_defined_by_the_standard(text, expected):
    assert value(text) == expected


def test_errors_are_absorbed_by_and_or():
    # The catalogue's rule ("and is false if any operand is false, absorbing errors") follows the
    # truth table of ISO/IEC 9075-2 6.39, where False AND x is False for every x.
    assert value("false and 1 / 0 > 1") is False
    assert value("1 / 0 > 1 and false") is False
    assert value("true or 1 / 0 > 1") is True
    assert error_class(value("true and 1 / 0 > 1")) is ErrorClass.DIVISION_BY_ZERO
    assert error_class(value("null and 1 / 0 > 1")) is ErrorClass.DIVISION_BY_ZERO
    # 6.12: CASE evaluates only the branch it takes.
    assert value("case when true then 1 else div(1, 0) end") == 1


# ================================================================== TRIM (6.31)
@pytest.mark.parametrize("text, expected", [
    # ISO/IEC 9075-2 6.31 <trim function>: without a trim character the character is <space>,
    # U+0020 only; tabs, newlines, no-break and ideographic spaces stay.
    ("trim('  ab  ')", "ab"), ("ltrim('  ab  ')", "ab  "), ("rtrim('  ab  ')", "  ab"),
    ("trim('   ')", ""), ("trim('')", ""),
    ("trim('\tab\n')", "\tab\n"), ("trim('\u00a0ab\u00a0')", "\u00a0ab\u00a0"),
    ("trim('\u3000ab\u3000')", "\u3000ab\u3000"), ("trim(' a b ')", "a b"),
    # 6.31 with an explicit trim character.
    ("trim('xxabxx', 'x')", "ab"), ("ltrim('xxabxx', 'x')", "abxx"), ("rtrim('xxabxx', 'x')", "xxab"),
])
def test_trim_worked_examples(text, expected):
    assert value(text) == expected


@pytest.mark.parametrize("s, chars", [("abcba", "ab"), ("  \t x \t  ", " \t"), ("日本日", "日"), ("", "ab"),
                                       ("abc", ""), ("é\u0301e", "e\u0301")])
def test_trim_with_several_characters_is_a_set(s, chars):
    # The several-character form is the catalogue's extension of 6.31; Python's str.strip(chars)
    # implements exactly "remove any leading/trailing character in the set" (Python docs).
    assert column("trim(s, c)", s=("string", [s]), c=("string", [chars])) == [s.strip(chars)]
    assert column("ltrim(s, c)", s=("string", [s]), c=("string", [chars])) == [s.lstrip(chars)]
    assert column("rtrim(s, c)", s=("string", [s]), c=("string", [chars])) == [s.rstrip(chars)]


# ================================================================== SUBSTRING (6.30)
def iso_substring(c: str, s: int, length: int | None) -> str | ErrorClass:
    """ISO/IEC 9075-2 6.30 <character substring function>, general rules, written out (from
    memory): LC = length of C; E = S + L, or the greater of LC + 1 and S without L; a negative L
    raises 22011 substring error; if S > LC or E < 1 the result is empty; otherwise S1 =
    max(S, 1), E1 = min(E, LC + 1) and the result is the E1 - S1 characters from S1."""
    lc = len(c)  # characters are code points here (the catalogue: CHARACTERS, not octets)
    if length is not None and length < 0:
        return ErrorClass.INVALID_ARGUMENT
    e = s + length if length is not None else max(lc + 1, s)
    if s > lc or e < 1:
        return ""
    s1, e1 = max(s, 1), min(e, lc + 1)
    return c[s1 - 1:s1 - 1 + max(e1 - s1, 0)]


SUBSTRING_TEXTS = ["abcdef", "", "日本語", "e\u0301x", "\U0001F600ab", "a b "]
STARTS = list(range(-4, 9)) + [INT64_MIN, INT64_MAX]
LENGTHS: list[int | None] = [None, -1, 0, 1, 2, 3, 10, INT64_MAX]


def test_substring_matches_the_standard_over_a_grid():
    rows = [(c, s, n) for c in SUBSTRING_TEXTS for s in STARTS for n in LENGTHS]
    with_len = column("substring(c, s, n)", c=("string", [r[0] for r in rows]), s=("int64", [r[1] for r in rows]),
                      n=("int64", [r[2] if r[2] is not None else 0 for r in rows]))
    without = column("substring(c, s)", c=("string", [r[0] for r in rows]), s=("int64", [r[1] for r in rows]))
    for (c, s, n), got_len, got_free in zip(rows, with_len, without):
        want = iso_substring(c, s, n if n is not None else 0)
        assert (error_class(got_len) or got_len) == want, (c, s, n)
        assert got_free == iso_substring(c, s, None), (c, s)


@pytest.mark.parametrize("text, expected", [
    # Worked examples of the 6.30 rules: positions before 1 exist but hold nothing.
    ("substring('abc', 0, 2)", "a"), ("substring('abc', -1, 3)", "a"), ("substring('abc', -1)", "abc"),
    ("substring('abc', 2)", "bc"), ("substring('abc', 4)", ""), ("substring('abc', 2, 0)", ""),
    ("substring('abc', 3, 100)", "c"),
    # Characters, not octets: 6.30 counts characters of the character set (code points here).
    ("substring('日本語', 2, 1)", "本"), ("substring('\U0001F600ab', 2, 1)", "a"),
    ("substring('e\u0301x', 2, 1)", "\u0301"),
])
def test_substring_worked_examples(text, expected):
    assert value(text) == expected


def test_substring_negative_length_is_an_error():
    # ISO/IEC 9075-2 6.30: a negative length raises data exception - substring error (22011).
    assert error_class(value("substring('abc', 1, -1)")) is ErrorClass.INVALID_ARGUMENT


# ================================================================== IEEE 754 NaN and zeros
NAN, INF = math.nan, math.inf
# IEEE 754-2019 5.11: every comparison involving a NaN is unordered, so compareQuietEqual,
# Less, LessEqual, Greater and GreaterEqual are false and compareQuietNotEqual is true.
COMPARISONS = {"=": F, "<>": T, "<": F, "<=": F, ">": F, ">=": F}


@pytest.mark.parametrize("op, expected", list(COMPARISONS.items()))
@pytest.mark.parametrize("a, b", [(NAN, 1.0), (1.0, NAN), (NAN, NAN), (NAN, INF), (-INF, NAN), (NAN, -0.0)])
def test_nan_comparisons_are_unordered(op, expected, a, b):
    assert column(f"a {op} b", a=("float64", [a]), b=("float64", [b])) == [expected]


def test_nan_payloads_and_signs_are_all_nan():
    # IEEE 754-2019 5.7.2 isNaN: true for every NaN, quiet or signalling bit patterns, either sign;
    # 3.4: a NaN has an all-ones exponent and a non-zero significand.
    patterns = [0x7FF8000000000000, 0xFFF8000000000000, 0x7FF0000000000001, 0x7FFFFFFFFFFFFFFF,
                0xFFF0000000000001, 0x7FF8000000000123]
    nans = [struct.unpack("<d", struct.pack("<Q", p))[0] for p in patterns]
    others = [INF, -INF, 0.0, -0.0, 5e-324, 1.7976931348623157e308]
    assert column("is_nan(x)", x=("float64", nans + others)) == [True] * len(nans) + [False] * len(others)
    assert column("x = x", x=("float64", nans)) == [False] * len(nans)


@pytest.mark.parametrize("text, expected", [
    # IEEE 754-2019 5.11: comparisons ignore the sign of zero.
    ("-0.0 = 0.0", T), ("-0.0 < 0.0", F), ("-0.0 <> 0.0", F), ("-0.0 is distinct from 0.0", F),
    ("cast('-Infinity' as float64) < cast('Infinity' as float64)", T),
    ("cast('Infinity' as float64) = cast('Infinity' as float64)", T),
    # in and between are built from = and >=/<= (ISO/IEC 9075-2 8.4, 8.3), so NaN is in no list
    # and between no bounds.
    ("cast('NaN' as float64) in (cast('NaN' as float64), 1.0)", F),
    ("cast('NaN' as float64) not in (1.0)", T),
    ("cast('NaN' as float64) between cast('-Infinity' as float64) and cast('Infinity' as float64)", F),
    ("-0.0 in (0.0)", T), ("0.0 between -0.0 and -0.0", T),
])
def test_nan_and_signed_zero_in_predicates(text, expected):
    assert value(text) == expected


@pytest.mark.parametrize("text, expected", [
    # IEEE 754-2019 7.2 invalid operation: inf - inf and 0 * inf are NaN.
    ("cast('Infinity' as float64) - cast('Infinity' as float64)", NAN),
    ("0.0 * cast('Infinity' as float64)", NAN),
    # 7.4 overflow under roundTiesToEven gives an infinity of the result's sign.
    ("1e308 * 10.0", INF), ("-1e308 * 10.0", -INF),
    # 6.3: the sign of a product is the exclusive or of the operands' signs, zero included.
    ("-0.0 * 1.0", -0.0), ("0.0 * -1.0", -0.0), ("-(0.0)", -0.0),
    # 6.3: x + (-x) is +0 under roundTiesToEven; -0 + -0 is -0.
    ("1.5 + -1.5", 0.0), ("-0.0 + -0.0", -0.0),
    # 5.4.1 squareRoot: sqrt(-0) is -0.
    ("sqrt(-0.0)", -0.0),
    # 5.9 roundToIntegralTowardNegative/Positive keep the sign of zero results.
    ("floor(-0.0)", -0.0), ("ceil(-0.5)", -0.0), ("floor(-0.5)", -1.0), ("ceil(0.5)", 1.0),
    # 5.5.1 abs clears the sign bit.
    ("abs(-0.0)", 0.0),
])
def test_ieee_special_values(text, expected):
    got = value(text)
    assert isinstance(got, float) and same_float(got, expected), got


def test_float_division_by_zero_is_an_error_not_infinity():
    # IEEE 754-2019 7.3 would give ±inf, but ISO/IEC 9075-2 6.27 raises data exception - division
    # by zero (22012) for any numeric zero divisor; the catalogue follows SQL. -0.0 is zero too.
    for text in ("1.0 / 0.0", "1.0 / -0.0", "0.0 / 0.0", "1 / 0", "1 % 0", "div(1, 0)", "1.5 % 0.0"):
        assert error_class(value(text)) is ErrorClass.DIVISION_BY_ZERO, text


# ================================================================== int64 and integer arithmetic
@pytest.mark.parametrize("text", [
    # Two's-complement int64 holds [-2^63, 2^63 - 1] (common practice, no source); ISO/IEC
    # 9075-2 6.27 raises 22003 numeric value out of range when an exact result does not fit.
    "9223372036854775807 + 1", "-9223372036854775808 - 1", "-(-9223372036854775808)",
    "abs(-9223372036854775808)", "-9223372036854775808 * -1", "div(-9223372036854775808, -1)",
    "4294967296 * 4294967296", "cast('9223372036854775808' as int64)", "cast('-9223372036854775809' as int64)",
    "cast(9223372036854775807.0 as int64)",  # the float is 2^63 exactly (IEEE binary64 rounding)
])
def test_int64_overflow_is_an_error(text):
    assert error_class(value(text)) is ErrorClass.OUT_OF_RANGE


@pytest.mark.parametrize("text, expected", [
    ("9223372036854775806 + 1", INT64_MAX), ("-9223372036854775807 - 1", INT64_MIN),
    ("-9223372036854775808 % -1", 0), ("div(-9223372036854775808, 1)", INT64_MIN),
    ("cast('-9223372036854775808' as int64)", INT64_MIN), ("cast(-9223372036854775808.0 as int64)", INT64_MIN),
    ("3037000499 * 3037000499", 3037000499**2),  # the largest square below 2^63
])
def test_int64_values_at_the_bounds(text, expected):
    assert value(text) == expected


def test_integer_division_and_modulo_with_negative_operands():
    # ISO/IEC 9075-2 6.28 MOD: the result has the sign of the dividend, as C's fmod, which
    # Python's math.fmod wraps (exact for these small integers). div truncates toward zero so
    # a = div(a, b) * b + a % b; oracle: exact rational truncation with fractions.Fraction.
    pairs = [(a, b) for a in range(-9, 10) for b in range(-4, 5) if b != 0]
    a = [p[0] for p in pairs]
    b = [p[1] for p in pairs]
    assert column("a % b", a=("int64", a), b=("int64", b)) == [int(math.fmod(x, y)) for x, y in pairs]
    assert column("div(a, b)", a=("int64", a), b=("int64", b)) == [math.trunc(Fraction(x, y)) for x, y in pairs]
    assert column("div(a, b) * b + a % b = a", a=("int64", a), b=("int64", b)) == [True] * len(pairs)


def test_slash_is_float_division():
    # The catalogue: / is always float64 (int64 operands converted first); oracle: Python's true
    # division on binary64, which IEEE 754 5.4.1 requires to be correctly rounded.
    assert value("7 / 2") == 3.5
    assert value("-7 / 2") == -3.5
    assert value("1 / 3") == 1 / 3
    assert value("9007199254740993 / 1") == 9007199254740992.0  # 2^53 + 1 is not a binary64 value


# ================================================================== rounding (decimal module)
def decimal_round(x: float, digits: int) -> float:
    """Python decimal: ROUND_HALF_UP (ties away from zero) on the exact binary value of x."""
    with localcontext() as ctx:
        ctx.prec = 2000
        return float(Decimal(x).quantize(Decimal(1).scaleb(-digits), rounding=ROUND_HALF_UP))


def test_round_matches_decimal_half_up_on_the_exact_value():
    rng = random.Random(754)
    xs = [k / 2 for k in range(-21, 22)] + [k / 1000 + 0.0005 for k in range(-3000, 3000, 37)]
    xs += [rng.uniform(-1e6, 1e6) for _ in range(300)] + [2.675, 1.005, 0.285, 1.115, 0.49999999999999994]
    for digits in (-3, -1, 0, 1, 2, 3, 6):
        got = column("round(x, d)", x=("float64", xs), d=("int64", [digits] * len(xs)))
        for x, g in zip(xs, got):
            assert same_float(g, decimal_round(x, digits)), (x, digits, g)


@pytest.mark.parametrize("text, expected", [
    # Half away from zero, not Python's built-in half-to-even round (Python docs, decimal module).
    ("round(0.5)", 1.0), ("round(1.5)", 2.0), ("round(2.5)", 3.0), ("round(-2.5)", -3.0), ("round(-0.5)", -1.0),
    # Judged on the exact binary value: 2.675 is 2.67499999999999982236431605997495353221893310546875
    # and 1.005 is 1.00499999999999989341858963598497211933135986328125 (decimal.Decimal of each).
    ("round(2.675, 2)", 2.67), ("round(1.005, 2)", 1.0),
    # The largest binary64 below 0.5 rounds to 0; floor(x + 0.5) would give 1 (common practice,
    # from memory, as the classic rounding pitfall).
    ("round(0.49999999999999994)", 0.0),
    ("round(1234.5678, -2)", 1200.0), ("round(-1250.0, -2)", -1300.0),
])
def test_round_worked_examples(text, expected):
    got = value(text)
    assert same_float(got, expected), got


@pytest.mark.parametrize("text, expected", [
    # int64 rounding, half away from zero, exact integers (oracle: decimal ROUND_HALF_UP).
    ("round(15, -1)", int(Decimal(15).quantize(Decimal("1E1"), ROUND_HALF_UP))),
    ("round(-15, -1)", int(Decimal(-15).quantize(Decimal("1E1"), ROUND_HALF_UP))),
    ("round(14, -1)", 10), ("round(149, -2)", 100), ("round(150, -2)", 200), ("round(7, 2)", 7),
    ("round(5, -20)", 0), ("round(9223372036854775807, -18)", 9000000000000000000),
    # Casts from float64 round the same way (catalogue cast table).
    ("cast(2.5 as int64)", 3), ("cast(-2.5 as int64)", -3), ("cast(0.49999999999999994 as int64)", 0),
    ("cast(-0.5 as int64)", -1), ("cast(1e18 as int64)", 10**18),
])
def test_integer_rounding(text, expected):
    assert value(text) == expected


def test_round_to_int64_overflow_is_an_error():
    # 9223372036854775807 rounded to -19 digits is 10^19, outside int64 (two's complement bounds).
    assert error_class(value("round(9223372036854775807, -19)")) is ErrorClass.OUT_OF_RANGE


@pytest.mark.parametrize("x", [math.nan, math.inf, -math.inf, 2.0**63, -(2.0**63) * 2, 1e300])
def test_float_to_int_out_of_range(x):
    # The catalogue cast table: NaN, ±inf and values outside int64 are errors (22003), never a
    # wrapped or saturated value.
    assert error_class(column("cast(x as int64)", x=("float64", [x]))[0]) is ErrorClass.OUT_OF_RANGE


# ================================================================== math library oracles
def _floats(seed: int, count: int) -> list[float]:
    rng = random.Random(seed)
    out = [rng.uniform(0, 10) for _ in range(count)] + [rng.uniform(0, 1e300) for _ in range(count)]
    out += [struct.unpack("<d", struct.pack("<Q", rng.getrandbits(63)))[0] for _ in range(count)]  # non-negative
    out += [0.0, -0.0, 5e-324, 1.7976931348623157e308, 1.0, 2.0, math.inf]
    return [x for x in out if not math.isnan(x)]


def test_sqrt_is_correctly_rounded():
    # IEEE 754-2019 5.4.1: squareRoot is correctly rounded, so it must equal math.sqrt bit for
    # bit (CPython's math.sqrt is the platform's IEEE sqrt).
    xs = _floats(1, 200)
    for x, got in zip(xs, column("sqrt(x)", x=("float64", xs))):
        assert same_float(got, math.sqrt(x)), x
    for x in (-1.0, -5e-324, -math.inf):
        assert error_class(column("sqrt(x)", x=("float64", [x]))[0]) is ErrorClass.INVALID_ARGUMENT


def test_ln_and_exp_agree_with_math():
    # Python math.log/math.exp as reference library; compared with the project's comparison rule
    # (rexpr/compare.py: 2 ulps), since IEEE 754 9.2 only recommends correct rounding for them.
    xs = [x for x in _floats(2, 200) if x > 0]
    for x, got in zip(xs, column("ln(x)", x=("float64", xs))):
        assert same_result(math.log(x), got), x
    for x in (0.0, -0.0, -1.0, -math.inf):
        # ISO/IEC 9075-2 6.28: ln of zero or a negative number raises 2201E.
        assert error_class(column("ln(x)", x=("float64", [x]))[0]) is ErrorClass.INVALID_ARGUMENT
    ys = [-745.2, -700.0, -1.0, -0.0, 0.0, 1e-300, 0.5, 1.0, 10.0, 700.0, 709.78]
    for y, got in zip(ys, column("exp(y)", y=("float64", ys))):
        assert same_result(math.exp(y), got), y
    # IEEE 754-2019 9.2 exp: overflow gives +inf (math.exp raises OverflowError instead), exp(-inf) = 0.
    assert column("exp(y)", y=("float64", [710.0, math.inf, -math.inf])) == [math.inf, math.inf, 0.0]


def test_float_modulo_is_fmod():
    # The catalogue: float % is fmod (result has the dividend's sign; ISO/IEC 9075-2 6.28 MOD),
    # not IEEE remainder; math.fmod is C's fmod, which is exact.
    rng = random.Random(3)
    pairs = [(rng.uniform(-1e6, 1e6), rng.choice([-1, 1]) * rng.uniform(1e-3, 1e3)) for _ in range(300)]
    pairs += [(-7.5, 2.0), (7.5, -2.0), (-0.0, 3.0), (5.0, math.inf), (-5.0, math.inf), (1e300, 3.0)]
    got = column("a % b", a=("float64", [p[0] for p in pairs]), b=("float64", [p[1] for p in pairs]))
    for (a, b), g in zip(pairs, got):
        assert same_float(g, math.fmod(a, b)), (a, b)
    # C99 F.9.7.1 fmod(±inf, y) is NaN (math.fmod raises ValueError instead).
    assert math.isnan(column("a % b", a=("float64", [math.inf]), b=("float64", [2.0]))[0])


def test_power_agrees_with_math_pow():
    # Python math.pow (C pow) as reference library, 2-ulp rule of rexpr/compare.py.
    rng = random.Random(4)
    pairs = [(rng.uniform(0, 100), rng.uniform(-20, 20)) for _ in range(200)] + [(2.0, 0.5), (-2.0, 3.0), (-8.0, 2.0)]
    got = column("power(a, b)", a=("float64", [p[0] for p in pairs]), b=("float64", [p[1] for p in pairs]))
    for (a, b), g in zip(pairs, got):
        assert same_result(math.pow(a, b), g), (a, b)
    # ISO/IEC 9075-2 6.28 <power function>: 0 to a negative power and a negative base with a
    # non-integral exponent raise 2201F.
    for a, b in ((0.0, -1.0), (-8.0, 1 / 3)):
        got = column("power(a, b)", a=("float64", [a]), b=("float64", [b]))[0]
        assert error_class(got) is ErrorClass.INVALID_ARGUMENT


# ================================================================== Unicode
def _assigned_code_points() -> list[str]:
    # Every assigned scalar value (surrogates are not Unicode text; 'Cn' is unassigned), per the
    # Unicode Character Database shipped with Python (unicodedata).
    return [chr(c) for c in range(0x110000)
            if not 0xD800 <= c <= 0xDFFF and unicodedata.category(chr(c)) != "Cn"]


@pytest.fixture(scope="module")
def code_points() -> list[str]:
    return _assigned_code_points()


@pytest.mark.parametrize("function, oracle", [("upper", str.upper), ("lower", str.lower)])
def test_case_mapping_of_every_code_point(code_points, function, oracle):
    # The Unicode Standard 3.13 full case mappings (UnicodeData.txt + SpecialCasing.txt), as
    # implemented by Python's str.upper/str.lower for the UCD version unicodedata reports.
    got = column(f"{function}(s)", s=("string", code_points))
    wrong = [(hex(ord(c)), g) for c, g in zip(code_points, got) if g != oracle(c)]
    assert wrong == []


@pytest.mark.parametrize("text, expected", [
    # SpecialCasing.txt unconditional mappings (from memory): ß -> SS, ﬁ -> FI, ŉ -> ʼN,
    # İ -> i + U+0307 when lowered; no Turkish tailoring without a locale.
    ("upper('Straße')", "STRASSE"), ("upper('ﬁ')", "FI"), ("upper('ŉ')", "\u02bcN"),
    ("lower('İ')", "i\u0307"), ("upper('i')", "I"), ("lower('I')", "i"),
    # The Unicode Standard 3.13 Final_Sigma: a capital sigma at the end of a word lowers to ς.
    ("lower('ΣΑΣ')", "σας"), ("lower('Σ')", "σ"),
    # UnicodeData.txt: the titlecase digraph ǅ (U+01C5) uppercases to Ǆ and lowercases to ǆ.
    ("upper('ǅ')", "Ǆ"), ("lower('ǅ')", "ǆ"),
    # Astral letters map too (Deseret, U+10400 <-> U+10428).
    ("lower('\U00010400')", "\U00010428"), ("upper('\U00010428')", "\U00010400"),
])
def test_special_casing_examples(text, expected):
    assert value(text) == expected


def test_length_counts_code_points_and_octet_length_utf8_bytes(code_points):
    # RFC 3629 section 3: UTF-8 uses 1 byte up to U+007F, 2 up to U+07FF, 3 up to U+FFFF and 4 above.
    def utf8_octets(c: str) -> int:
        cp = ord(c)
        return 1 if cp < 0x80 else 2 if cp < 0x800 else 3 if cp < 0x10000 else 4

    sample = code_points[::7]
    assert column("length(s)", s=("string", sample)) == [1] * len(sample)
    assert column("octet_length(s)", s=("string", sample)) == [utf8_octets(c) for c in sample]
    # Nothing is normalized: e + U+0301 is 2 code points, its NFC form 1 (unicodedata.normalize).
    decomposed = "e\u0301"
    nfc = unicodedata.normalize("NFC", decomposed)
    assert column("length(s)", s=("string", [decomposed, nfc])) == [2, 1]


# ================================================================== string comparison and like
def test_strings_compare_by_code_point():
    # ISO/IEC 9075-2 8.2 with a binary NO PAD collation: order by code point (Python ord), case
    # sensitive, trailing spaces significant. U+1F600 sorts above U+FFFF by code point although
    # its UTF-16 form (D83D DE00) sorts below (The Unicode Standard 2.5, code units vs scalars).
    words = ["", " ", "a", "a ", "A", "B", "b", "ab", "é", "z", "\uffff", "\U0001F600", "\u00a0", "\t"]
    pairs = [(a, b) for a in words for b in words]
    a = [p[0] for p in pairs]
    b = [p[1] for p in pairs]
    lt = column("a < b", a=("string", a), b=("string", b))
    eq = column("a = b", a=("string", a), b=("string", b))
    for (x, y), got_lt, got_eq in zip(pairs, lt, eq):
        assert got_lt == ([ord(c) for c in x] < [ord(c) for c in y]), (x, y)
        assert got_eq == ([ord(c) for c in x] == [ord(c) for c in y]), (x, y)


@pytest.mark.parametrize("text, expected", [
    # ISO/IEC 9075-2 8.5 <like predicate>: without ESCAPE no character escapes, so a backslash is
    # an ordinary character.
    ("'a\\b' like 'a\\b'", T), ("'a%b' like 'a\\%b'", F), ("'a\\xb' like 'a\\%b'", T),
    # _ is one character (a code point here), % any run, including none; matching is case sensitive.
    ("'\U0001F600' like '_'", T), ("'e\u0301' like '_'", F), ("'' like '%'", T), ("'A' like 'a'", F),
    ("'ab' like 'a_'", T), ("'a\nb' like 'a_b'", T),
    # With ESCAPE the escape character makes the next %, _ or itself literal.
    ("'a%b' like 'a!%b' escape '!'", T), ("'axb' like 'a!%b' escape '!'", F), ("'a!' like 'a!!' escape '!'", T),
])
def test_like_worked_examples(text, expected):
    assert value(text) == expected


@pytest.mark.parametrize("text", [
    # ISO/IEC 9075-2 8.5: an escape that is not one character raises 22019 invalid escape character;
    # an escape followed by anything but %, _ or itself raises 22025 invalid escape sequence.
    "'a' like 'a' escape ''", "'a' like 'a' escape '!!'", "'a' like 'a!' escape '!'", "'ab' like 'a!b' escape '!'",
])
def test_like_escape_errors(text):
    assert error_class(value(text)) is ErrorClass.INVALID_ESCAPE


@pytest.mark.parametrize("text, expected", [
    # ISO/IEC 9075-2 6.31 <concatenation>: null if either operand is null; concat skips nulls
    # (catalogue: common practice, no source).
    ("'a' || null", None), ("concat('a', null, 'b')", "ab"), ("concat(cast(null as string))", ""),
])
def test_concatenation_and_null(text, expected):
    assert value(text) == expected


# ================================================================== casts (6.13) and dates
@pytest.mark.parametrize("text, expected", [
    # ISO/IEC 9075-2 6.13 <cast specification> general rules (from memory): leading and trailing
    # <space>s are removed before reading a number, boolean or datetime; <space> is U+0020.
    ("cast(' 1 ' as int64)", 1), ("cast('+5' as int64)", 5), ("cast('-0' as int64)", 0),
    ("cast(' 1.5e3 ' as float64)", 1500.0), ("cast(' true ' as bool)", True), ("cast('FALSE' as bool)", False),
    ("cast(' 2024-05-01 ' as date)", dt.date(2024, 5, 1)),
    # 6.13: boolean to character gives 'TRUE' or 'FALSE' (from memory).
    ("cast(true as string)", "TRUE"),
])
def test_string_casts_strip_spaces(text, expected):
    assert value(text) == expected


@pytest.mark.parametrize("text, error", [
    # 6.13: a string that is not a literal of the target type raises 22018 (numbers, booleans) or
    # 22007 (datetimes). Tab and U+00A0 are not <space>.
    ("cast('\t1' as int64)", ErrorClass.INVALID_CAST), ("cast('\u00a01' as int64)", ErrorClass.INVALID_CAST),
    ("cast('' as int64)", ErrorClass.INVALID_CAST), ("cast('1.0' as int64)", ErrorClass.INVALID_CAST),
    ("cast('0x10' as int64)", ErrorClass.INVALID_CAST), ("cast('1_000' as int64)", ErrorClass.INVALID_CAST),
    ("cast('١' as int64)", ErrorClass.INVALID_CAST),  # Arabic-Indic digit one: not a SQL <digit>
    ("cast('yes' as bool)", ErrorClass.INVALID_CAST), ("cast('1e999' as float64)", ErrorClass.OUT_OF_RANGE),
    ("cast('2024-5-1' as date)", ErrorClass.INVALID_DATETIME),
])
def test_string_casts_refuse_non_literals(text, error):
    assert error_class(value(text)) is error


def test_date_validity_follows_the_gregorian_calendar():
    # RFC 3339 5.7 (full-date, with its leap year rule) and Python calendar.isleap: Feb 29 exists
    # exactly in leap years of the proleptic Gregorian calendar.
    years = [1, 4, 100, 400, 1900, 2000, 2023, 2024, 2100, 9996, 9999]
    texts = [f"{y:04d}-02-29" for y in years]
    got = column("cast(s as date)", s=("string", texts))
    for year, result in zip(years, got):
        if calendar.isleap(year):
            assert result == dt.date(year, 2, 29)
        else:
            assert error_class(result) is ErrorClass.INVALID_DATETIME


def test_float_to_string_is_the_shortest_round_trip():
    # IEEE 754-2019 5.12.2: the shortest decimal that converts back to the same binary64; Python's
    # repr has the same property (Python docs, floating point repr).
    rng = random.Random(5)
    xs = [rng.uniform(-1e20, 1e20) for _ in range(100)] + [0.1, 1e-7, 5e-324, 1e16, 123456789012345680.0]
    for x, text in zip(xs, column("cast(x as string)", x=("float64", xs))):
        assert float(text) == x and text == repr(x)
