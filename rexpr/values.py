"""Runtime values shared by every evaluator: Python scalars plus a per-row error value.

A value is ``None`` (null), ``bool``, ``int``, ``float``, ``str``, ``datetime.date``,
``datetime.datetime`` or :class:`RowError`.
"""

from __future__ import annotations

import datetime as dt
import math
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


def to_json_value(value: object) -> object:
    """JSON-ready form: non-finite floats as strings, dates as ISO text, errors as objects."""
    if isinstance(value, RowError):
        return {"error": value.error.value, "detail": value.detail}
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
    if isinstance(value, RowError):
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
