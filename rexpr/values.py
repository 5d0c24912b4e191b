"""Runtime values shared by every evaluator: Python scalars plus a per-row error value.

A value is ``None`` (null), ``bool``, ``int``, ``float``, ``str``, ``datetime.date``,
``datetime.datetime`` or :class:`RowError`; SQL engine results may also hold
:class:`EngineLimit` (a row whose value the engine cannot represent).
"""

from __future__ import annotations

import datetime as dt
import math
import struct
from dataclasses import dataclass

from rexpr.catalogue.model import ErrorClass
from rexpr.language.datetime_text import format_date, format_timestamp


@dataclass(frozen=True)
class RowError:
    """A semantic error for one row: a value, so evaluation of other rows goes on."""

    error: ErrorClass
    detail: str = ""

    def __str__(self) -> str:
        return f"error:{self.error.value}" + (f" ({self.detail})" if self.detail else "")


@dataclass(frozen=True)
class EngineLimit:
    """One row an SQL engine could not compute because it cannot represent a value on the way
    (MariaDB's DOUBLE has no NaN or ±inf, SQLite's REAL no NaN, SQLite's text functions stop at
    U+0000). Not an error of the semantics: the engine says it cannot give this row's answer."""

    reason: str        # "nan", "non_finite" or "nul" (the tag's ``rexpr-limit:<reason>``)
    engine: str = ""
    detail: str = ""

    def __str__(self) -> str:
        return f"engine_limit:{self.reason}" + (f" ({self.engine})" if self.engine else "")


def to_json_value(value: object) -> object:
    """JSON-ready form: non-finite floats as strings, dates as ISO text, errors as objects."""
    if isinstance(value, RowError):
        return {"error": value.error.value, "detail": value.detail}
    if isinstance(value, EngineLimit):
        return {"engine_limit": value.reason, "engine": value.engine, "detail": value.detail}
    if isinstance(value, float):
        if math.isnan(value):
            return "NaN"
        if math.isinf(value):
            return "Infinity" if value > 0 else "-Infinity"
        return value
    if isinstance(value, dt.datetime):
        return format_timestamp(value)
    if isinstance(value, dt.date):
        return format_date(value)
    return value


def show_value(value: object) -> str:
    """Short human-readable rendering for reports and the CLI."""
    if value is None:
        return "null"
    if isinstance(value, (RowError, EngineLimit)):
        return str(value)
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        if math.isnan(value):
            return "NaN"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return "'" + value.replace("'", "''") + "'"
    if isinstance(value, dt.datetime):
        return f"timestamp '{format_timestamp(value)}'"
    if isinstance(value, dt.date):
        return f"date '{format_date(value)}'"
    return repr(value)


def identity_key(value: object) -> object:
    """A hashable key equal only for the same value of the same type; floats by their bits,
    so -0.0 is not 0.0 and NaN payloads differ."""
    if isinstance(value, float):
        return ("float", struct.pack("<d", value))
    return (type(value).__name__, value)
