"""Engine result values mapped back to the canonical type of the item.

A value maps when the canonical value denotes exactly the same thing. The engine's own kind
is accepted only where the engine has no canonical kind for it:

- bool: ``True``/``False``; an integer 0 or 1 where the engine has no boolean (SQLite,
  MariaDB's TINYINT(1)).
- int64: an integer within int64; an exact decimal with no fraction (PostgreSQL numeric,
  MariaDB and DuckDB DECIMAL).
- float64: a float; an exact decimal that float64 holds exactly (PostgreSQL numeric
  ``NaN``/``Infinity`` map to their IEEE 754 counterparts).
- string: a ``str``. Bytes are not text: they are a mismatch.
- date / timestamp: ``datetime.date`` / naive ``datetime.datetime``; ISO text where the
  engine stores them as text (SQLite), read with the language's own RFC 3339 parser.

An integer for a float64 item, a float for an int64 item, a float32 column, an aware
timestamp: each shows the engine computed in another domain, so it is a
:class:`TypeMismatch`, kept visible instead of coerced.
"""

from __future__ import annotations

import datetime as dt
import decimal
import math
from dataclasses import dataclass
from typing import Callable, Sequence

import pyarrow as pa

from rexpr.language.datetime_text import parse_date_text, parse_timestamp_text
from rexpr.schema import to_arrow_type
from rexpr.types import INT64_MAX, INT64_MIN, DataType, Kind


@dataclass(frozen=True)
class TypeMismatch:
    """An engine value that has no lossless canonical form for the item's type."""

    shown: str  # repr of the engine value and its Python or Arrow type

    def __str__(self) -> str:
        return f"type_mismatch:{self.shown}"


@dataclass(frozen=True)
class ValueRules:
    """Which non-canonical engine kinds an engine may return for a canonical kind."""

    bool_as_integer: bool = False
    exact_decimals: bool = False
    temporal_as_text: bool = False


class _Unmapped(Exception):
    pass


_FAIL = _Unmapped()


def _bool(value: object, rules: ValueRules) -> object:
    if type(value) is bool:
        return value
    if rules.bool_as_integer and type(value) is int and value in (0, 1):
        return value == 1
    raise _FAIL


def _int(value: object, rules: ValueRules) -> object:
    if type(value) is int:
        if INT64_MIN <= value <= INT64_MAX:  # type: ignore[operator]
            return value
        raise _FAIL
    if rules.exact_decimals and isinstance(value, decimal.Decimal) and value.is_finite():
        if value == value.to_integral_value() and INT64_MIN <= value <= INT64_MAX:
            return int(value)
    raise _FAIL


def _float(value: object, rules: ValueRules) -> object:
    if type(value) is float:
        return value
    if rules.exact_decimals and isinstance(value, decimal.Decimal):
        if value.is_nan():
            return math.nan
        if value.is_infinite():
            return math.inf if value > 0 else -math.inf
        converted = float(value)
        if math.isfinite(converted) and decimal.Decimal(converted) == value:
            return converted
    raise _FAIL


def _string(value: object, rules: ValueRules) -> object:
    if type(value) is str:
        return value
    raise _FAIL


def _date(value: object, rules: ValueRules) -> object:
    if type(value) is dt.date:
        return value
    if rules.temporal_as_text and type(value) is str:
        parsed = parse_date_text(value)
        if parsed is not None:
            return parsed
    raise _FAIL


def _timestamp(value: object, rules: ValueRules) -> object:
    if type(value) is dt.datetime and value.tzinfo is None:
        return value
    if rules.temporal_as_text and type(value) is str:
        parsed = parse_timestamp_text(value)
        if parsed is not None:
            return parsed
    raise _FAIL


def _null(value: object, rules: ValueRules) -> object:
    raise _FAIL  # only None maps to the null type, and None never reaches a decoder


_DECODERS: dict[Kind, Callable[[object, ValueRules], object]] = {
    Kind.BOOL: _bool, Kind.INT64: _int, Kind.FLOAT64: _float, Kind.STRING: _string,
    Kind.DATE: _date, Kind.TIMESTAMP: _timestamp, Kind.NULL: _null,
}


def show(value: object) -> str:
    return f"{value!r} ({type(value).__name__})"


def map_values(values: Sequence[object], data_type: DataType,
               rules: ValueRules) -> tuple[pa.Array, dict[int, TypeMismatch]]:
    """Canonical Arrow array for engine values; unmappable rows are null and listed."""
    decode = _DECODERS.get(data_type.kind)
    if decode is None:
        raise TypeError(f"no engine value mapping for {data_type.name}")
    fast = _already_canonical(values, data_type.kind, rules)
    if fast is not None:
        return fast, {}
    out: list[object] = []
    mismatches: dict[int, TypeMismatch] = {}
    append = out.append
    for row, value in enumerate(values):
        if value is None:
            append(None)
            continue
        try:
            append(decode(value, rules))
        except _Unmapped:
            mismatches[row] = TypeMismatch(show(value))
            append(None)
    return pa.array(out, type=to_arrow_type(data_type)), mismatches


_CANONICAL_TYPES: dict[Kind, type] = {Kind.BOOL: bool, Kind.INT64: int, Kind.FLOAT64: float, Kind.STRING: str,
                                      Kind.DATE: dt.date, Kind.TIMESTAMP: dt.datetime}


def _already_canonical(values: Sequence[object], kind: Kind, rules: ValueRules) -> pa.Array | None:
    """The array, when every value already has the canonical Python type (checked at C speed
    with ``map(type, ...)``); None sends the caller to the per-value path."""
    wanted = _CANONICAL_TYPES.get(kind)
    kinds = set(map(type, values))
    if kind is Kind.BOOL and rules.bool_as_integer and kinds <= {int, type(None)} and set(values) <= {0, 1, None}:
        return pa.array(values, type=pa.int8()).cast(pa.bool_())
    if wanted is None or not kinds <= {wanted, type(None)}:
        return None
    if kind is Kind.TIMESTAMP and any(v is not None and v.tzinfo is not None for v in values):  # type: ignore[attr-defined]
        return None
    try:
        return pa.array(values, type=to_arrow_type(DataType(kind)))
    except (OverflowError, pa.ArrowInvalid):  # an int beyond int64: the per-value path names it
        return None


# Arrow types that widen to int64 without changing any value.
_INT_WIDENING = (pa.int8(), pa.int16(), pa.int32(), pa.uint8(), pa.uint16(), pa.uint32())


def map_arrow(values: pa.Array | pa.ChunkedArray, data_type: DataType,
              rules: ValueRules) -> tuple[pa.Array, dict[int, TypeMismatch]]:
    """Arrow results (DuckDB): zero-copy when the type is already canonical."""
    if isinstance(values, pa.ChunkedArray):
        values = values.combine_chunks()
    target = to_arrow_type(data_type)
    if values.type == target:
        return values, {}
    if pa.types.is_null(values.type):
        return pa.nulls(len(values), target), {}
    if target == pa.int64() and values.type in _INT_WIDENING:
        return values.cast(target), {}
    if data_type.kind is Kind.STRUCT:
        shown = f"({values.type})"
        return pa.nulls(len(values), target), {row: TypeMismatch(shown) for row in range(len(values))
                                               if values[row].is_valid}
    if pa.types.is_floating(values.type) and values.type != pa.float64():
        # A float32 result means the engine computed in single precision: another domain.
        return _all_mismatched(values, target)
    if pa.types.is_timestamp(values.type) and values.type.tz is not None:
        return _all_mismatched(values, target)  # an instant with a zone is no naive timestamp
    return map_values(values.to_pylist(), data_type, rules)


def _all_mismatched(values: pa.Array, target: pa.DataType) -> tuple[pa.Array, dict[int, TypeMismatch]]:
    mismatches = {row: TypeMismatch(f"{value!r} ({values.type})")
                  for row, value in enumerate(values.to_pylist()) if value is not None}
    return pa.nulls(len(values), target), mismatches
