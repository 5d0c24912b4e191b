"""The comparison rules of rexpr/compare.py, each on its own, plus the result-type rule the
differential runner applies. Float values are built bit by bit (struct) or with
math.nextafter, so every check rests on IEEE 754 binary64 rather than on rexpr."""

from __future__ import annotations

import datetime as dt
import math
import struct

import pyarrow as pa
import pytest

from rexpr.catalogue.model import ErrorClass
from rexpr.compare import FLOAT_ULPS, floats_agree, result_type_problem, row_differences, same_result, ulp_distance
from rexpr.evaluation import Evaluation
from rexpr.types import DataType, Kind
from rexpr.values import RowError


def from_bits(bits: int) -> float:
    return struct.unpack("<d", struct.pack("<Q", bits))[0]


def steps_up(x: float, n: int) -> float:
    for _ in range(n):
        x = math.nextafter(x, math.inf)
    return x


# ------------------------------------------------------------------------ rule 1: null
@pytest.mark.parametrize("other", [0, 0.0, -0.0, "", False, math.nan, RowError(ErrorClass.OUT_OF_RANGE)])
def test_null_equals_only_null(other):
    # ISO/IEC 9075-2 4.4.2: the null value is distinct from every non-null value; rexpr's rule 1
    # makes two nulls the same result.
    assert same_result(None, None)
    assert not same_result(None, other)
    assert not same_result(other, None)


# ------------------------------------------------------------------ rule 2: error class
def test_errors_compare_by_class_and_ignore_details():
    # The classes follow ISO/IEC 9075-2 clause 24 SQLSTATE classes (22003 vs 22012 differ).
    a = RowError(ErrorClass.DIVISION_BY_ZERO, "divisor is 0")
    b = RowError(ErrorClass.DIVISION_BY_ZERO, "Division by zero!")
    c = RowError(ErrorClass.OUT_OF_RANGE, "divisor is 0")
    assert same_result(a, b)
    assert not same_result(a, c)


@pytest.mark.parametrize("value", [0, 0.0, "", False, math.nan])
def test_an_error_is_not_a_value(value):
    error = RowError(ErrorClass.INVALID_CAST)
    assert not same_result(error, value)
    assert not same_result(value, error)


# ----------------------------------------------------------------------- rule 3: NaN
QUIET_NAN = 0x7FF8000000000000      # IEEE 754-2019 3.4: exponent all ones, fraction non-zero,
NEGATIVE_NAN = 0xFFF8000000000000   # first fraction bit set for a quiet NaN (6.2.1);
PAYLOAD_NAN = 0x7FF8000000000ABC    # the sign and the other fraction bits are the payload,
SIGNALLING_NAN = 0x7FF0000000000001  # which 6.2 does not make portable between engines.


@pytest.mark.parametrize("bits", [QUIET_NAN, NEGATIVE_NAN, PAYLOAD_NAN, SIGNALLING_NAN])
def test_every_nan_equals_every_nan(bits):
    nan = from_bits(bits)
    assert math.isnan(nan)  # Python's math agrees these bit patterns are NaN
    assert nan != nan       # IEEE 754-2019 5.11: NaN is unordered, even with itself
    assert same_result(nan, math.nan)
    assert same_result(from_bits(QUIET_NAN), nan)


@pytest.mark.parametrize("value", [0.0, math.inf, -math.inf, 1.0, from_bits(0x7FEFFFFFFFFFFFFF)])
def test_nan_differs_from_numbers(value):
    assert not same_result(math.nan, value)
    assert not same_result(value, math.nan)


# ------------------------------------------------------------------- rule 4: signed zero
def test_negative_zero_equals_zero():
    negative_zero = from_bits(0x8000000000000000)  # IEEE 754-2019 3.4: sign bit only
    assert math.copysign(1.0, negative_zero) == -1.0  # it really is -0.0
    assert same_result(negative_zero, 0.0)
    assert same_result(0.0, negative_zero)
    assert ulp_distance(negative_zero, 0.0) == 0


# --------------------------------------------------------------- rule 5: ulp tolerance
@pytest.mark.parametrize("x", [1.0, -1.0, 0.1, 1e300, 2.0 ** -1022, 123456.789])
def test_floats_within_the_tolerance_agree(x):
    # math.nextafter steps one unit in the last place (IEEE 754-2019 5.3.1 nextUp).
    for n in range(FLOAT_ULPS + 1):
        y = steps_up(x, n)
        assert ulp_distance(x, y) == n
        assert same_result(x, y) and same_result(y, x)
    beyond = steps_up(x, FLOAT_ULPS + 1)
    assert not same_result(x, beyond)
    assert not same_result(beyond, x)


def test_ulps_are_counted_across_zero_and_in_subnormals():
    smallest = from_bits(1)  # 2**-1074, the least subnormal (IEEE 754-2019 table 3.5, binary64)
    assert smallest == 2.0 ** -1074 == math.nextafter(0.0, 1.0)
    assert ulp_distance(smallest, -smallest) == 2
    assert ulp_distance(0.0, steps_up(0.0, 3)) == 3
    assert not same_result(0.0, steps_up(0.0, FLOAT_ULPS + 1))


def test_infinity_is_not_near_the_largest_finite_float():
    largest = from_bits(0x7FEFFFFFFFFFFFFF)  # (2 - 2**-52) * 2**1023 (IEEE 754-2019 table 3.5)
    assert largest == 1.7976931348623157e308
    assert ulp_distance(largest, math.inf) == 1  # adjacent bit patterns ...
    assert not same_result(largest, math.inf)    # ... but an overflow is not a rounding error
    assert same_result(math.inf, math.inf)
    assert not same_result(math.inf, -math.inf)
    assert not floats_agree(-math.inf, -largest)


# -------------------------------------------------------------- rule 6: types and ==
@pytest.mark.parametrize("a, b", [
    (True, 1), (False, 0), (1, 1.0), (0, -0.0), ("1", 1), (dt.date(2024, 5, 1), dt.datetime(2024, 5, 1)),
])
def test_values_of_different_types_never_agree(a, b):
    # Python's == holds for the numeric pairs (bool is an int subtype; PEP 285), which is exactly
    # what the rule must not accept: a bool result is never an int result.
    assert not same_result(a, b)
    assert not same_result(b, a)


def test_strings_compare_by_code_point_without_normalising():
    # Unicode 15, 3.7: U+00E9 and U+0065 U+0301 are canonically equivalent but different strings.
    assert not same_result("\u00e9", "e\u0301")
    assert not same_result("ab", "ab ")  # trailing spaces count (no PAD SPACE)
    assert same_result("Stra\u00dfe", "Straße")


# ----------------------------------------------------------------- row_differences
def test_row_differences_lists_differing_rows_and_length_mismatch():
    expected = [1, None, 2.0, RowError(ErrorClass.OUT_OF_RANGE)]
    observed = [1, 0, steps_up(2.0, 1), RowError(ErrorClass.OUT_OF_RANGE), 5]
    assert row_differences(expected, observed) == [(1, None, 0), (-1, "4 rows", "5 rows")]
    assert row_differences([1, 2, 3], [0, 0, 0], limit=2) == [(0, 1, 0), (1, 2, 0)]


# ---------------------------------------------------------------- result-type rule
def test_result_type_rule_wants_the_canonical_arrow_type():
    # Arrow's int32 and int64 are different types (Arrow columnar format, "Data Types"), so a
    # backend that narrows an int64 column is caught even though every value compares equal.
    int64 = DataType(Kind.INT64)
    right = Evaluation(int64, pa.array([1, 2], pa.int64()), {})
    narrow = Evaluation(int64, pa.array([1, 2], pa.int32()), {})
    floats = Evaluation(DataType(Kind.FLOAT64), pa.array([1.0, 2.0], pa.float64()), {})
    assert result_type_problem(int64, right) is None
    assert "int32" in (result_type_problem(int64, narrow) or "")
    assert "float64" in (result_type_problem(int64, floats) or "")
    assert row_differences(right.to_pylist(), narrow.to_pylist()) == []  # values alone cannot tell
