"""NumPy kernels for arithmetic: exact int64 overflow detection, IEEE 754 float rules, and the
catalogue's error cases. Each kernel takes a :class:`Ctx` and argument values, returns values
and its own error codes."""

from __future__ import annotations

import math
from decimal import ROUND_HALF_UP, Context, Decimal
from typing import Callable

import numpy as np

from rexpr.backends.numpy_columns import Ctx, Out, faults, rowwise
from rexpr.catalogue.model import ErrorClass as E
from rexpr.types import INT64_MIN

_MIN = np.int64(INT64_MIN)
# 10**k for k = 0..19 fits in uint64 (10**19 < 2**64); used for round(int, negative digits).
_POW10 = np.array([10**k for k in range(20)], dtype=np.uint64)
_TWO63 = np.uint64(2**63)
# 10**k for k = 0..22 as floats, all exact: 10**k = 5**k * 2**k and 5**22 < 2**53.
_POW10_FLOAT = np.array([float(10**k) for k in range(23)])


def _is_int(a: np.ndarray) -> bool:
    return a.dtype.kind == "i"


def add(cx: Ctx, a: np.ndarray, b: np.ndarray) -> Out:
    with np.errstate(all="ignore"):
        r = a + b
    if not _is_int(a):
        return r, None
    # Two's complement: the sum overflowed iff both operands' signs differ from the result's.
    return r, faults(cx.live, (((a ^ r) & (b ^ r)) < 0, E.OUT_OF_RANGE))


def subtract(cx: Ctx, a: np.ndarray, b: np.ndarray) -> Out:
    with np.errstate(all="ignore"):
        r = a - b
    if not _is_int(a):
        return r, None
    return r, faults(cx.live, (((a ^ b) & (a ^ r)) < 0, E.OUT_OF_RANGE))


def multiply(cx: Ctx, a: np.ndarray, b: np.ndarray) -> Out:
    with np.errstate(all="ignore"):
        r = a * b
        if not _is_int(a):
            return r, None
        # A float64 product is within a few ulps of the exact one, so below 2**62 it cannot have
        # overflowed; only the rows above need the exact (and slower) test.
        near = np.flatnonzero(np.abs(a.astype(np.float64) * b.astype(np.float64)) >= 2.0**62)
        overflow = np.zeros(len(a), bool)
        if near.size:
            x, y, p = a[near], b[near], r[near]
            # The wrapped product is exact iff dividing it back by x gives y with no remainder;
            # (-1) * INT64_MIN wraps to INT64_MIN, whose quotient by -1 wraps back, so test it apart.
            divisor = np.where(x == 0, 1, x)
            overflow[near] = (p // divisor != y) | (p % divisor != 0) | ((x == -1) & (y == _MIN))
    return r, faults(cx.live, (overflow, E.OUT_OF_RANGE))


def divide(cx: Ctx, a: np.ndarray, b: np.ndarray) -> Out:
    with np.errstate(all="ignore"):
        r = a / b
    return r, faults(cx.live, (b == 0, E.DIVISION_BY_ZERO))


def modulo(cx: Ctx, a: np.ndarray, b: np.ndarray) -> Out:
    zero = faults(cx.live, (b == 0, E.DIVISION_BY_ZERO))
    with np.errstate(all="ignore"):
        if not _is_int(a):
            return np.fmod(a, b), zero  # C fmod: sign of the dividend, fmod(inf, y) and fmod(x, nan) are NaN
        divisor = np.where((b == 0) | (b == -1), 1, b)  # x % -1 is 0, and INT64_MIN % -1 must not trap
        return np.where(b == -1, 0, np.fmod(a, divisor)), zero


def negate(cx: Ctx, a: np.ndarray) -> Out:
    with np.errstate(all="ignore"):
        r = np.negative(a)
    return r, (faults(cx.live, (a == _MIN, E.OUT_OF_RANGE)) if _is_int(a) else None)


def div(cx: Ctx, a: np.ndarray, b: np.ndarray) -> Out:
    with np.errstate(all="ignore"):
        divisor = np.where(b == 0, 1, b)
        q = a // divisor  # floors; step back toward zero when the signs differ and it is inexact
        q = np.where((a % divisor != 0) & ((a < 0) != (divisor < 0)), q + 1, q)
    return q, faults(cx.live, (b == 0, E.DIVISION_BY_ZERO), ((a == _MIN) & (b == -1), E.OUT_OF_RANGE))


def abs_(cx: Ctx, a: np.ndarray) -> Out:
    with np.errstate(all="ignore"):
        r = np.abs(a)
    return r, (faults(cx.live, (a == _MIN, E.OUT_OF_RANGE)) if _is_int(a) else None)


def round_half_away(x: np.ndarray) -> np.ndarray:
    """Nearest integral float, ties away from zero, on the exact value; keeps -0.0, NaN and ±inf.
    x - trunc(x) is exact in binary floating point, so the tie test sees the true fraction."""
    with np.errstate(all="ignore"):
        whole = np.trunc(x)
        up = np.abs(x - whole) >= 0.5
        return np.where(up, whole + np.copysign(1.0, x), whole)


def _round_decimal(x: float, digits: int) -> float:
    """round(x, digits) for a finite float and digits != 0, in exact decimal arithmetic."""
    if digits >= 1075:  # a float64 has at most 1074 fraction digits: nothing to round
        return x
    if digits <= -309:  # the largest float64 is below 10**309 / 2, so it rounds to a zero
        return math.copysign(0.0, x)
    # 309 integer digits plus at most 1074 fraction digits fit in 1400 significant digits.
    exact = Decimal(x).quantize(Decimal(1).scaleb(-digits), rounding=ROUND_HALF_UP, context=Context(prec=1400))
    return float(exact)


def round_(cx: Ctx, x: np.ndarray, digits: np.ndarray | None = None) -> Out:
    if _is_int(x):
        return _round_int(cx, x, digits)
    rounded = round_half_away(x)
    if digits is None:
        return rounded, None
    with np.errstate(all="ignore"):
        # Integral and non-finite values are their own rounding to any digits >= 0.
        settled = (digits == 0) | ~np.isfinite(x) | ((digits > 0) & (x == np.trunc(x)))
        rounded = np.where(settled, rounded, np.nan)
        scaled, exact = _round_scaled(np.abs(x), digits)
        rounded = np.where(~settled & exact, np.copysign(scaled, x), rounded)
    rest = ~settled & ~exact
    if not rest.any():
        return rounded, None
    values, _ = rowwise(_round_decimal, cx, x.dtype, x, digits, rows=rest)
    return np.where(rest, values, rounded), None


def _split(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Veltkamp's split of a float64 into two 26-bit halves (exact: hi + lo == v)."""
    c = 134217729.0 * v  # 2**27 + 1
    hi = c - (c - v)
    return hi, v - hi


def _round_scaled(ax: np.ndarray, digits: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """round(|x|, digits) in float arithmetic that is provably exact where the second result is
    true; other rows need decimal arithmetic.

    digits 1..22: 10**digits is an exact float, Dekker's product gives |x| * 10**digits as
    p + err exactly, the tie test (f - 0.5) + err has the sign of the exact sum, and N / 10**digits
    is one correctly rounded division of exact operands. digits -15..-1: fmod is exact, and
    below 2**53 every multiple of 10**-digits in play is an exact float."""
    scale = _POW10_FLOAT[np.abs(np.clip(digits, -15, 22))]
    p = ax * scale
    ah, al = _split(ax)
    sh, sl = _split(scale)
    err = ((ah * sh - p) + ah * sl + al * sh) + al * sl
    whole = np.floor(p)
    up = ((p - whole) - 0.5) + err >= 0
    positive = (whole + up) / scale
    rest = np.fmod(ax, scale)
    negative = (ax - rest) + np.where(rest >= scale / 2, scale, 0.0)
    exact_positive = (digits >= 1) & (digits <= 22) & (p < 2.0**52)
    exact_negative = (digits <= -1) & (digits >= -15) & (ax + scale < 2.0**53)
    return np.where(digits > 0, positive, negative), exact_positive | exact_negative


def _round_int(cx: Ctx, x: np.ndarray, digits: np.ndarray | None) -> Out:
    if digits is None:
        return x, None
    places = -np.clip(digits, -20, 0)  # 0 for digits >= 0, 20 standing for "20 or more"
    unit = _POW10[np.minimum(places, 19)]
    magnitude = np.abs(x).view(np.uint64)  # |INT64_MIN| = 2**63 is exact as uint64
    with np.errstate(all="ignore"):
        q, r = np.divmod(magnitude, unit)
        q = q + (r >= unit - r)  # ties away from zero; unit - r avoids overflowing 2 * r
        rounded = q * unit  # at most 10**19 < 2**64 when it can fit at all
        too_big = (q > np.iinfo(np.uint64).max // unit) | (rounded > np.where(x < 0, _TWO63, _TWO63 - np.uint64(1)))
        signed = np.where(x < 0, (np.uint64(0) - rounded), rounded).view(np.int64)
    result = np.where(places == 0, x, np.where(places >= 20, 0, signed))
    return result, faults(cx.live, ((places > 0) & (places < 20) & too_big, E.OUT_OF_RANGE))


def floor_(cx: Ctx, x: np.ndarray) -> Out:
    return (x, None) if _is_int(x) else (np.floor(x), None)  # IEEE floor keeps the sign of zero


def ceil_(cx: Ctx, x: np.ndarray) -> Out:
    return (x, None) if _is_int(x) else (np.ceil(x), None)


def sqrt(cx: Ctx, x: np.ndarray) -> Out:
    with np.errstate(all="ignore"):
        return np.sqrt(x), faults(cx.live, (x < 0, E.INVALID_ARGUMENT))


def _as_libm(fn: Callable[..., float], numpy_result: np.ndarray, rows: np.ndarray, *args: np.ndarray) -> np.ndarray:
    """``fn`` from Python's math module at ``rows``, NumPy's result elsewhere.

    NumPy's SIMD exp, log and pow differ from the C library's in the last place on some inputs,
    and a chain of such functions magnifies that; the reference calls the C library through
    math, so the backend does too. Where ``fn`` overflows, NumPy's ±inf (C99 F.10) stands."""
    index = np.flatnonzero(rows)
    out = numpy_result.copy()
    if index.size == 0:
        return out
    columns = [a[index].tolist() for a in args]
    try:
        out[index] = list(map(fn, *columns))
    except OverflowError:
        for i, values in zip(index.tolist(), zip(*columns)):
            try:
                out[i] = fn(*values)
            except OverflowError:
                pass
    return out


def power(cx: Ctx, x: np.ndarray, y: np.ndarray) -> Out:
    with np.errstate(all="ignore"):
        r = np.power(x, y)  # C99 pow: ±inf on overflow with the right sign
        one = (y == 0) | (x == 1)
        checked = ~one & ~np.isnan(x) & ~np.isnan(y)
        fractional = np.isfinite(y) & (y != np.floor(y))
        codes = faults(cx.live, (checked & (x == 0) & (y < 0), E.INVALID_ARGUMENT),
                       (checked & (x < 0) & fractional, E.INVALID_ARGUMENT))
        finite = checked & np.isfinite(x) & np.isfinite(y) & (codes is None or codes == 0)
    return np.where(one, 1.0, _as_libm(math.pow, r, cx.live & finite, x, y)), codes


def ln(cx: Ctx, x: np.ndarray) -> Out:
    with np.errstate(all="ignore"):
        r = np.log(x)
        codes = faults(cx.live, (x <= 0, E.INVALID_ARGUMENT))
        return _as_libm(math.log, r, cx.live & (x > 0) & np.isfinite(x), x), codes


def exp(cx: Ctx, x: np.ndarray) -> Out:
    with np.errstate(all="ignore"):
        return _as_libm(math.exp, np.exp(x), cx.live & np.isfinite(x), x), None


def is_nan(cx: Ctx, x: np.ndarray) -> Out:
    return np.isnan(x), None


KERNELS = {
    "add": add, "subtract": subtract, "multiply": multiply, "divide": divide, "modulo": modulo,
    "negate": negate, "div": div, "abs": abs_, "round": round_, "floor": floor_, "ceil": ceil_,
    "sqrt": sqrt, "power": power, "ln": ln, "exp": exp, "is_nan": is_nan,
}
