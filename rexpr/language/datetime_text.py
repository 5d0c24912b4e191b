"""The one text form of dates and timestamps (RFC 3339 profile of ISO 8601), shared by
literals and casts so both accept exactly the same strings."""

from __future__ import annotations

import datetime as dt
import re

# RFC 3339 section 5.6 full-date, and partial-time with a space or 'T' separator; no offset,
# because timestamps here carry no time zone. Fractions beyond microseconds are rejected
# rather than rounded (an error beats a guess).
_DATE = re.compile(r"([0-9]{4})-([0-9]{2})-([0-9]{2})")
_TIMESTAMP = re.compile(
    r"([0-9]{4})-([0-9]{2})-([0-9]{2})(?:[ Tt]([0-9]{2}):([0-9]{2}):([0-9]{2})(?:\.([0-9]{1,6}))?)?")


def parse_date_text(text: str) -> dt.date | None:
    match = _DATE.fullmatch(text)
    if match is None:
        return None
    try:
        return dt.date(int(match[1]), int(match[2]), int(match[3]))
    except ValueError:
        return None


def parse_timestamp_text(text: str) -> dt.datetime | None:
    match = _TIMESTAMP.fullmatch(text)
    if match is None:
        return None
    year, month, day = int(match[1]), int(match[2]), int(match[3])
    hour = int(match[4] or 0)
    minute = int(match[5] or 0)
    second = int(match[6] or 0)
    micro = int((match[7] or "0").ljust(6, "0"))
    try:
        return dt.datetime(year, month, day, hour, minute, second, micro)
    except ValueError:
        return None


def format_date(value: dt.date) -> str:
    return f"{value.year:04d}-{value.month:02d}-{value.day:02d}"


def format_timestamp(value: dt.datetime) -> str:
    text = f"{format_date(value)} {value.hour:02d}:{value.minute:02d}:{value.second:02d}"
    if value.microsecond:
        text += f".{value.microsecond:06d}".rstrip("0")
    return text
