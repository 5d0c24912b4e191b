"""NumPy kernels for the cast table in ``rexpr.catalogue.casts``, one per (source, target).

Text is validated with vectorised character tests before any NumPy parse, because NumPy's
string-to-number casts call Python's ``int``/``float``, which accept more than the language
does ('1_0', non-ASCII digits, tabs)."""

from __future__ import annotations

import math
from typing import Callable

import numpy as np

from rexpr.backends.numpy_columns import TEXT, Ctx, Out, faults, merge_codes, rowwise
from rexpr.backends.numpy_numbers import round_half_away
from rexpr.catalogue.model import ErrorClass as E
from rexpr.types import Kind

B, I, F, S, D, T = Kind.BOOL, Kind.INT64, Kind.FLOAT64, Kind.STRING, Kind.DATE, Kind.TIMESTAMP
_DIGITS = "0123456789"
_TWO63 = 2.0**63  # exactly representable; the int64 range is [-2**63, 2**63)
_U_TWO63 = np.uint64(2**63)
_WORDS = {sign + word: value for sign, factor in (("", 1.0), ("+", 1.0), ("-", -1.0))
          for word, value in (("inf", factor * math.inf), ("infinity", factor * math.inf), ("nan", math.nan))}


def _spaces_removed(s: np.ndarray) -> np.ndarray:
    return np.strings.strip(s, " ")  # ISO/IEC 9075-2 6.13: only U+0020 is a <space>


def _only(s: np.ndarray, chars: str) -> np.ndarray:
    """Non-empty and made only of ``chars`` (stripping them leaves nothing)."""
    return (np.strings.str_len(s) > 0) & (np.strings.strip(s, chars) == "")


# ---------------------------------------------------------------- to and from int64
def string_to_int(cx: Ctx, s: np.ndarray) -> Out:
    body = _spaces_removed(s)
    negative = np.strings.startswith(body, "-")
    signed = negative | np.strings.startswith(body, "+")
    digits = np.where(signed, np.strings.slice(body, 1, None), body)
    well_formed = _only(digits, _DIGITS)
    significant = np.strings.lstrip(digits, "0")
    too_long = np.strings.str_len(significant) > 19  # 10**19 > 2**63: cannot fit
    usable = well_formed & ~too_long
    magnitude = np.where(usable & (significant != ""), significant, "0").astype(np.uint64)
    limit = np.where(negative, _U_TWO63, _U_TWO63 - np.uint64(1))
    with np.errstate(all="ignore"):
        values = np.where(negative, np.uint64(0) - magnitude, magnitude).view(np.int64)
    return values, faults(cx.live, (~well_formed, E.INVALID_CAST), (too_long | (magnitude > limit), E.OUT_OF_RANGE))


def float_to_int(cx: Ctx, x: np.ndarray) -> Out:
    rounded = round_half_away(x)
    with np.errstate(invalid="ignore"):
        fits = (rounded >= -_TWO63) & (rounded < _TWO63)  # false for NaN and ±inf too
    return np.where(fits, rounded, 0.0).astype(np.int64), faults(cx.live, (~fits, E.OUT_OF_RANGE))


# ---------------------------------------------------------------- to float64
def string_to_float(cx: Ctx, s: np.ndarray) -> Out:
    body = _spaces_removed(s)
    numeral = _only(body, _DIGITS + ".eE+-")
    # Only U+0130 and U+212A lowercase to text with ASCII letters, and neither to these words.
    folded = np.strings.lower(body)
    values = np.zeros(len(s), np.float64)
    word = np.zeros(len(s), bool)
    for spelling, value in _WORDS.items():
        hit = folded == spelling
        values[hit] = value
        word |= hit
    malformed = np.zeros(len(s), bool)
    with np.errstate(over="ignore"):
        try:
            parsed = np.where(numeral, body, "0").astype(np.float64)
        except ValueError:  # some numeral-looking text is not a numeral ('1e', '+-1', '.'): find which
            parsed, codes = rowwise(_parse_float, cx, np.dtype(np.float64), body, rows=numeral)
            malformed = codes != 0 if codes is not None else malformed
    values = np.where(numeral, parsed, values)
    with np.errstate(invalid="ignore"):
        too_large = numeral & ~malformed & np.isinf(parsed)  # a finite numeral beyond float64 is an error
    return values, faults(cx.live, (~numeral & ~word, E.INVALID_CAST), (malformed, E.INVALID_CAST),
                          (too_large, E.OUT_OF_RANGE))


def _parse_float(text: str) -> float | E:
    try:
        return float(text)
    except ValueError:
        return E.INVALID_CAST


# ---------------------------------------------------------------- to bool
def string_to_bool(cx: Ctx, s: np.ndarray) -> Out:
    body = np.strings.lower(_spaces_removed(s))
    is_true = body == "true"
    return is_true, faults(cx.live, (~is_true & (body != "false"), E.INVALID_CAST))


# ---------------------------------------------------------------- to date and timestamp
_MONTH_DAYS = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], np.int64)


def _code_points(s: np.ndarray, keep: np.ndarray, width: int) -> np.ndarray:
    """Rows as an (n, width) array of code points (0 past the end); rows not kept are blank."""
    fixed = np.where(keep, s, "").astype(f"<U{width}")
    return fixed.view(np.uint32).reshape(len(s), width).astype(np.int64)


def _number(cells: np.ndarray, start: int, stop: int) -> tuple[np.ndarray, np.ndarray]:
    """The ASCII decimal number in columns [start, stop), and whether they all are digits."""
    digits = cells[:, start:stop] - ord("0")
    ok = ((digits >= 0) & (digits <= 9)).all(axis=1)
    weights = 10 ** np.arange(stop - start - 1, -1, -1, dtype=np.int64)
    return np.where(ok, (np.clip(digits, 0, 9) * weights).sum(axis=1), 0), ok


def _calendar_date(cells: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Columns 0-9 as an RFC 3339 full-date (proleptic Gregorian), and whether it is one."""
    year, ok_y = _number(cells, 0, 4)
    month, ok_m = _number(cells, 5, 7)
    day, ok_d = _number(cells, 8, 10)
    leap = ((year % 4 == 0) & (year % 100 != 0)) | (year % 400 == 0)
    month_index = np.clip(month - 1, 0, 11)
    last_day = _MONTH_DAYS[month_index] + ((month_index == 1) & leap)
    ok = (ok_y & ok_m & ok_d & (cells[:, 4] == ord("-")) & (cells[:, 7] == ord("-"))
          & (year >= 1) & (month >= 1) & (month <= 12) & (day >= 1) & (day <= last_day))
    months = np.where(ok, (year - 1970) * 12 + month - 1, 0)
    days = months.astype("datetime64[M]").astype("datetime64[D]") + np.where(ok, day - 1, 0)
    return days, ok


def string_to_date(cx: Ctx, s: np.ndarray) -> Out:
    body = _spaces_removed(s)
    fits = np.strings.str_len(body) == 10
    days, ok = _calendar_date(_code_points(body, fits, 10))
    return days, faults(cx.live, (~(fits & ok), E.INVALID_DATETIME))


def string_to_timestamp(cx: Ctx, s: np.ndarray) -> Out:
    body = _spaces_removed(s)
    size = np.strings.str_len(body)
    fits = (size == 10) | (size == 19) | ((size >= 21) & (size <= 26))  # date, time, 1-6 fraction digits
    cells = _code_points(body, fits, 26)
    days, ok = _calendar_date(cells)
    timed = size >= 19
    hour, ok_h = _number(cells, 11, 13)
    minute, ok_mi = _number(cells, 14, 16)
    second, ok_s = _number(cells, 17, 19)
    separator = np.isin(cells[:, 10], [ord(" "), ord("T"), ord("t")])
    ok_time = (separator & ok_h & ok_mi & ok_s & (cells[:, 13] == ord(":")) & (cells[:, 16] == ord(":"))
               & (hour <= 23) & (minute <= 59) & (second <= 59))
    fraction_cells = np.where(cells[:, 20:26] == 0, ord("0"), cells[:, 20:26])  # right-pad with zeros
    micros, ok_f = _number(np.concatenate([cells[:, :20], fraction_cells], axis=1), 20, 26)
    ok_fraction = (size <= 19) | ((cells[:, 19] == ord(".")) & ok_f)
    ok &= fits & (~timed | (ok_time & ok_fraction))
    clock = np.where(ok & timed, ((hour * 60 + minute) * 60 + second) * 1_000_000 + micros, 0)
    values = days.astype("datetime64[us]") + clock.astype("timedelta64[us]")
    return values, faults(cx.live, (~ok, E.INVALID_DATETIME))


def _nul_is_invalid(kernel: Callable[[Ctx, np.ndarray], Out], error: E) -> Callable[[Ctx, np.ndarray], Out]:
    """No literal of any type contains U+0000: such rows fail, and the rest (then free of it)
    take the vectorised path."""
    def cast(cx: Ctx, s: np.ndarray) -> Out:
        if cx.exact_text:
            return kernel(cx, s)
        has_nul = np.fromiter(("\x00" in x for x in s.tolist()), bool, len(s))
        values, codes = kernel(Ctx(cx.live & ~has_nul, True, cx.constant), np.where(has_nul, "", s))
        return values, merge_codes(faults(cx.live, (has_nul, error)), codes)

    return cast


# ---------------------------------------------------------------- to string
def float_to_string(cx: Ctx, x: np.ndarray) -> Out:
    # NumPy's float64 -> StringDType cast writes the shortest round-trip repr, like Python's repr
    # (checked against repr in the tests); only the non-finite spellings differ.
    text = x.astype(TEXT)
    text = np.where(np.isnan(x), "NaN", text)
    return np.where(np.isinf(x), np.where(x > 0, "Infinity", "-Infinity"), text), None


def timestamp_to_string(cx: Ctx, t: np.ndarray) -> Out:
    seconds = t.astype("datetime64[s]")  # floors, so the microseconds below are in [0, 10**6)
    text = np.strings.replace(np.datetime_as_string(seconds).astype(TEXT), "T", " ")
    micros = (t - seconds).astype(np.int64)
    fraction = np.strings.rstrip(np.strings.slice((micros + 1_000_000).astype(TEXT), 1, None), "0")
    return np.where(micros != 0, np.strings.add(np.strings.add(text, "."), fraction), text), None


CASTS: dict[tuple[Kind, Kind], Callable[..., Out]] = {
    (I, F): lambda cx, v: (v.astype(np.float64), None),  # IEEE 754 convertFromInt, nearest even
    (F, I): float_to_int,
    (B, I): lambda cx, v: (v.astype(np.int64), None),
    (I, B): lambda cx, v: (v != 0, None),
    (S, I): _nul_is_invalid(string_to_int, E.INVALID_CAST),
    (S, F): _nul_is_invalid(string_to_float, E.INVALID_CAST),
    (S, B): _nul_is_invalid(string_to_bool, E.INVALID_CAST),
    (S, D): _nul_is_invalid(string_to_date, E.INVALID_DATETIME),
    (S, T): _nul_is_invalid(string_to_timestamp, E.INVALID_DATETIME),
    (I, S): lambda cx, v: (v.astype(TEXT), None),
    (F, S): float_to_string,
    (B, S): lambda cx, v: (np.where(v, "TRUE", "FALSE").astype(TEXT), None),
    (D, S): lambda cx, v: (np.datetime_as_string(v).astype(TEXT), None),
    (T, S): timestamp_to_string,
    (D, T): lambda cx, v: (v.astype("datetime64[us]"), None),
    (T, D): lambda cx, v: (v.astype("datetime64[D]"), None),  # floors: the date part
}
