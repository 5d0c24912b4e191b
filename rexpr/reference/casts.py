"""Reference casts: the executable form of the cast table in ``rexpr.catalogue.casts``."""

from __future__ import annotations

import datetime as dt
import math
import re
from decimal import ROUND_HALF_UP, Decimal
from typing import Callable

from rexpr.catalogue.model import ErrorClass
from rexpr.language.datetime_text import format_date, format_timestamp, parse_date_text, parse_timestamp_text
from rexpr.types import INT64_MAX, INT64_MIN, Kind
from rexpr.values import RowError

_INT_TEXT = re.compile(r"[+-]?[0-9]+")
_FLOAT_TEXT = re.compile(r"[+-]?(?:(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?|inf|infinity|nan)",
                         re.IGNORECASE | re.ASCII)  # ASCII: 'ınf' (dotless i) is not 'inf'
_MAX_INT64_DIGITS = 19


def _strip_spaces(text: str) -> str:
    # ISO/IEC 9075-2 6.13: leading and trailing <space>s are removed; only U+0020 is a <space>.
    return text.strip(" ")


def round_half_away(value: float) -> int:
    """Nearest integer to a finite float, ties away from zero, judged on the exact value."""
    return int(Decimal(value).to_integral_value(rounding=ROUND_HALF_UP))


def _out_of_range(detail: str) -> RowError:
    return RowError(ErrorClass.OUT_OF_RANGE, detail)


def float_to_int(value: float) -> int | RowError:
    if not math.isfinite(value):
        return _out_of_range(f"{value!r} has no int64 value")
    result = round_half_away(value)
    if not INT64_MIN <= result <= INT64_MAX:
        return _out_of_range(f"{value!r} does not fit in int64")
    return result


def string_to_int(text: str) -> int | RowError:
    body = _strip_spaces(text)
    if not _INT_TEXT.fullmatch(body):
        return RowError(ErrorClass.INVALID_CAST, f"{text!r} is not an integer")
    digits = body.lstrip("+-").lstrip("0") or "0"
    if len(digits) > _MAX_INT64_DIGITS:  # also keeps int() away from its 4300-digit limit
        return _out_of_range(f"{text[:40]!r}... does not fit in int64")
    result = -int(digits) if body.startswith("-") else int(digits)
    if not INT64_MIN <= result <= INT64_MAX:
        return _out_of_range(f"{text!r} does not fit in int64")
    return result


def string_to_float(text: str) -> float | RowError:
    body = _strip_spaces(text)
    if not _FLOAT_TEXT.fullmatch(body):
        return RowError(ErrorClass.INVALID_CAST, f"{text!r} is not a number")
    result = float(body)
    if math.isinf(result) and "inf" not in body.lower():
        return _out_of_range(f"{text!r} is too large for float64")
    return result


def string_to_bool(text: str) -> bool | RowError:
    body = _strip_spaces(text).lower()
    if body in ("true", "false"):
        return body == "true"
    return RowError(ErrorClass.INVALID_CAST, f"{text!r} is not true or false")


def string_to_date(text: str) -> dt.date | RowError:
    value = parse_date_text(_strip_spaces(text))
    return value if value is not None else RowError(ErrorClass.INVALID_DATETIME, f"{text!r} is not a date")


def string_to_timestamp(text: str) -> dt.datetime | RowError:
    value = parse_timestamp_text(_strip_spaces(text))
    return value if value is not None else RowError(ErrorClass.INVALID_DATETIME, f"{text!r} is not a timestamp")


def float_to_string(value: float) -> str:
    if math.isnan(value):
        return "NaN"
    if math.isinf(value):
        return "Infinity" if value > 0 else "-Infinity"
    return repr(value)


B, I, F, S, D, T = Kind.BOOL, Kind.INT64, Kind.FLOAT64, Kind.STRING, Kind.DATE, Kind.TIMESTAMP

CASTS: dict[tuple[Kind, Kind], Callable[[object], object]] = {
    (I, F): float,
    (F, I): float_to_int,
    (B, I): int,
    (I, B): bool,
    (S, I): string_to_int,
    (S, F): string_to_float,
    (S, B): string_to_bool,
    (S, D): string_to_date,
    (S, T): string_to_timestamp,
    (I, S): str,
    (F, S): float_to_string,
    (B, S): lambda v: "TRUE" if v else "FALSE",
    (D, S): format_date,
    (T, S): format_timestamp,
    (D, T): lambda v: dt.datetime(v.year, v.month, v.day),
    (T, D): lambda v: v.date(),
}


def cast_value(value: object, source: Kind, target: Kind) -> object:
    if value is None or isinstance(value, RowError) or source is target:
        return value
    return CASTS[(source, target)](value)
