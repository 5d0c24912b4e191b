"""Pools of edge values per type: where engines disagree. Drawn on by ``rexpr check`` without
``--rows``, by the property tests and by the differential tester."""

from __future__ import annotations

import datetime as dt
import math

from rexpr.types import INT64_MAX, INT64_MIN, Kind

EDGE_VALUES: dict[Kind, tuple[object, ...]] = {
    Kind.BOOL: (True, False, None),
    Kind.INT64: (0, 1, -1, 2, -2, 3, -7, 7, 10, 100, 255, 2**31 - 1, -(2**31), 2**53, 2**53 + 1,
                 INT64_MAX, INT64_MIN, INT64_MAX - 1, INT64_MIN + 1, None),
    Kind.FLOAT64: (0.0, -0.0, 1.0, -1.0, 0.5, -0.5, 1.5, 2.5, -2.5, 2.675, 0.1, 1e-310, 5e-324,
                   1.7976931348623157e308, -1.7976931348623157e308, 9007199254740993.0, 1e16, 1e20,
                   math.inf, -math.inf, math.nan, 100.0, 3.0, None),
    Kind.STRING: ("", " ", "  ", "a", "ab", " ab ", "ab ", "\tab\n", "\u00a0ab\u00a0", "\u2003x\u3000",
                  "A", "abc", "ABC", "Straße", "İ", "ǅ", "ΣΑΣ", "e\u0301", "\U0001F600", "日本語",
                  "a%b", "a_b", "a\\b", "'", "''", "1", " 1 ", "-0", "+5", "1e3", "1.5", "NaN", "inf",
                  "9223372036854775808", "0x10", "true", " FALSE ", "2024-05-01", "2024-02-30",
                  "2024-05-01 10:00:00", None),
    Kind.DATE: (dt.date(2024, 5, 1), dt.date(1970, 1, 1), dt.date(2000, 2, 29), dt.date(1, 1, 1),
                dt.date(9999, 12, 31), dt.date(1969, 12, 31), None),
    Kind.TIMESTAMP: (dt.datetime(2024, 5, 1, 10, 0, 0), dt.datetime(1970, 1, 1),
                     dt.datetime(2000, 2, 29, 23, 59, 59, 999999), dt.datetime(1969, 12, 31, 23, 59, 59, 500000),
                     dt.datetime(1, 1, 1), dt.datetime(9999, 12, 31, 23, 59, 59), None),
}


def pool(kind: Kind, nullable: bool = True) -> tuple[object, ...]:
    values = EDGE_VALUES[kind]
    return values if nullable else tuple(v for v in values if v is not None)
