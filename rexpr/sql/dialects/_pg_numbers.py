"""IEEE 754 float64 arithmetic on PostgreSQL without its range errors.

PostgreSQL's float8 operators raise 22003 ("value out of range: overflow / underflow") where
IEEE 754 gives ±inf or ±0: on a finite result too large, and on a zero result from non-zero
operands (measured on 15: 1e308*10, 1e-300*1e-300, 5e-324*0.5, exp(-1000), 1/1e-310). The
reference follows IEEE 754, so these helpers decide those two cases first and compute the
native operation only where it cannot raise.

The decision is exact. A cheap test in logarithms settles all but a narrow band around each
limit; inside the band the operands are converted to exact NUMERIC values (from the IEEE 754
bit pattern, ``float8send``), compared against the limits 2^1024 - 2^970 (the least value
that rounds to infinity) and 2^-1075 (the greatest that rounds to zero, a tie to even).

Also here: rounding half away from zero on the exact binary value (float8 ``round`` is half
to even, and NUMERIC conversion keeps only 15 digits), fmod (there is no float8 ``%``), and
float -> int64 with the cast table's rounding.

Arguments are trees that are cheap to repeat (bound values)."""

from __future__ import annotations

import math
from decimal import Decimal
from typing import Callable

from sqlglot import exp as sx

from rexpr.sql.dialects import _trees as t
from rexpr.sql.dialects._binary64 import DBL_MAX, EXP_OVERFLOW_AFTER, EXP_ZERO_UPTO, OVERFLOW_LIMIT, UNDERFLOW_SCALE

Tree = t.Tree
Bind = Callable[..., Tree]
D = "postgres"

TWO_63 = 2.0**63


# ln-space bands: outside them the cheap test is decisive with a margin far above the
# rounding error of ln (|error| < 1e-12 at these magnitudes).
LN_OVER_SURE, LN_OVER_BAND = 709.8, 709.7      # ln(2^1024) = 709.7827...
LN_UNDER_SURE, LN_UNDER_BAND = -745.3, -745.0  # ln(2^-1075) = -745.1332...


def f8(value: float) -> Tree:
    if math.isnan(value):
        text = "NaN"
    elif math.isinf(value):
        text = "Infinity" if value > 0 else "-Infinity"
    else:
        text = repr(value)
    return t.cast(t.string(text), "DOUBLE PRECISION", D)


def i8(value: int | Tree) -> Tree:
    return t.cast(t.number(value) if isinstance(value, int) else value, "BIGINT", D)


def numeric(value: int | str) -> Tree:
    return t.cast(t.string(str(value)), "NUMERIC", D)


def literal_float(x: Tree) -> float | None:
    """The value of a float8 literal as f8() writes it, else None (then x is a row value)."""
    if isinstance(x, sx.Cast) and isinstance(x.this, sx.Literal) and x.this.is_string \
            and x.to.is_type(sx.DataType.Type.DOUBLE):
        return float(x.this.this)
    return None


def fabs(x: Tree) -> Tree:
    return t.call("abs", x)


def finite(x: Tree) -> Tree:
    """False for NaN and ±inf (PostgreSQL orders NaN above +inf), null for null."""
    return t.le(fabs(x), f8(DBL_MAX))


def is_nan(x: Tree) -> Tree:
    return t.eq(x, f8(math.nan))  # PostgreSQL: NaN = NaN is true


def signed(negative: Tree, magnitude: float) -> Tree:
    return t.case((negative, f8(-magnitude)), default=f8(magnitude))


def exact(x: Tree, bind: Bind, magnitude_only: bool = False) -> Tree:
    """The exact value of a finite float8 as NUMERIC (its magnitude when ``magnitude_only``),
    from its bit pattern (a literal's exact decimal is written out directly)."""
    value = literal_float(x)
    if value is not None and math.isfinite(value):
        return numeric(str(Decimal(abs(value) if magnitude_only else value)))
    hexits = t.call("encode", t.call("float8send", x), t.string("hex"))
    bits = t.cast(t.cast(t.call("concat", t.string("x"), hexits), "BIT(64)", D), "BIGINT", D)

    def fields(refs: list[Tree]) -> Tree:
        [b] = refs
        biased = _bit_and(_shift_right(b, 52), 2047)
        mantissa = _bit_and(b, 2**52 - 1)
        return bind([b, biased, mantissa], value)

    def value(refs: list[Tree]) -> Tree:
        b, biased, mantissa = refs
        magnitude = t.case(
            (t.eq(biased, t.number(0)), t.mul(t.cast(mantissa, "NUMERIC", D), _power_of_two(t.number(-1074)))),
            default=t.mul(t.cast(t.add(mantissa, i8(2**52)), "NUMERIC", D),
                          _power_of_two(t.sub(biased, t.number(1075)))))
        if magnitude_only:
            return magnitude
        return t.case((t.lt(b, t.number(0)), t.neg(magnitude)), default=magnitude)

    return bind([bits], fields)


def _shift_right(a: Tree, n: int) -> Tree:
    return sx.Paren(this=sx.BitwiseRightShift(this=t.paren(a), expression=t.number(n)))


def _bit_and(a: Tree, mask: int) -> Tree:
    return sx.Paren(this=sx.BitwiseAnd(this=t.paren(a), expression=i8(mask)))


def _power_of_two(k: Tree) -> Tree:
    """2^k as an exact NUMERIC: 2^k for k >= 0, 5^-k * 10^k otherwise (10^k from text, which
    NUMERIC reads exactly; power() with a negative exponent rounds)."""
    negative = t.mul(t.call("power", numeric(5), t.neg(k)),
                     t.cast(t.call("concat", t.string("1e"), t.cast(k, "TEXT", D)), "NUMERIC", D))
    return t.case((t.ge(k, t.number(0)), t.call("power", numeric(2), k)), default=negative)


def add(a: Tree, b: Tree, bind: Bind) -> Tree:
    """a + b, giving ±inf where PostgreSQL raises overflow. Halving is exact for |x| >= 1, and
    round((a+b)/2) >= 2^1023 exactly when round(a+b) overflows (the midpoint below 2^1023
    rounds up to it, ties to even)."""
    half = t.add(t.mul(a, f8(0.5)), t.mul(b, f8(0.5)))
    safe_to_halve = t.and_(t.ge(fabs(a), f8(1.0)), t.ge(fabs(b), f8(1.0)), finite(a), finite(b))

    def body(refs: list[Tree]) -> Tree:
        [h] = refs
        return t.case((t.ge(fabs(h), f8(2.0**1023)), signed(t.lt(h, f8(0.0)), math.inf)), default=t.add(a, b))

    return t.case((safe_to_halve, bind([half], body)), default=t.add(a, b))


def _banded(ln_value: Tree, exact_values: list[Tree], over: Callable[..., Tree], under: Callable[..., Tree],
            negative: Tree, native: Tree, bind: Bind) -> Tree:
    """±inf or ±0 where the result overflows or underflows, else ``native``: decided by ln
    outside the bands, and by ``over``/``under`` of the exact operand magnitudes inside."""
    def exactly(refs: list[Tree]) -> Tree:
        return t.case((over(*refs), signed(negative, math.inf)), (under(*refs), signed(negative, 0.0)),
                      default=native)

    def body(refs: list[Tree]) -> Tree:
        [ln] = refs
        return t.case(
            (t.gt(ln, f8(LN_OVER_SURE)), signed(negative, math.inf)),
            (t.lt(ln, f8(LN_UNDER_SURE)), signed(negative, 0.0)),
            (t.and_(t.lt(ln, f8(LN_OVER_BAND)), t.gt(ln, f8(LN_UNDER_BAND))), native),
            default=bind(exact_values, exactly))

    return bind([ln_value], body)


def _regular(x: Tree) -> Tree | bool:
    """x is finite and not zero; a Python bool for a literal."""
    value = literal_float(x)
    if value is not None:
        return math.isfinite(value) and value != 0
    return t.and_(finite(x), t.ne(x, f8(0.0)))


def _negative(x: Tree) -> Tree:
    value = literal_float(x)
    return t.boolean(value < 0) if value is not None else t.lt(x, f8(0.0))


def _ln_abs(x: Tree) -> Tree:
    value = literal_float(x)
    if value is not None and math.isfinite(value) and value != 0:
        return f8(math.log(abs(value)))  # only compared against bands with wide margins
    return t.call("ln", fabs(x))


def _guarded(a: Tree, b: Tree, guarded: Callable[[], Tree], native: Tree) -> Tree:
    tests = [test for test in (_regular(a), _regular(b)) if test is not True]
    if any(test is False for test in tests):
        return native  # a zero, infinite or NaN literal operand: the native operation never raises
    return t.case((t.and_(*tests), guarded()), default=native) if tests else guarded()


def multiply(a: Tree, b: Tree, bind: Bind) -> Tree:
    negative = t.ne(_negative(a), _negative(b))
    ln = t.add(_ln_abs(a), _ln_abs(b))
    over = lambda p: t.ge(p, numeric(OVERFLOW_LIMIT))  # noqa: E731
    under = lambda p: t.le(t.mul(p, numeric(UNDERFLOW_SCALE)), numeric(1))  # noqa: E731
    native = t.mul(a, b)
    return _guarded(a, b, lambda: _banded(
        ln, [t.mul(exact(a, bind, magnitude_only=True), exact(b, bind, magnitude_only=True))],
        over, under, negative, native, bind), native)


def divide_nonzero(a: Tree, b: Tree, bind: Bind) -> Tree:
    """a / b for b <> 0 (the zero divisor is the caller's error)."""
    negative = t.ne(_negative(a), _negative(b))
    ln = t.sub(_ln_abs(a), _ln_abs(b))
    over = lambda m, n: t.ge(m, t.mul(numeric(OVERFLOW_LIMIT), n))  # noqa: E731
    under = lambda m, n: t.le(t.mul(m, numeric(UNDERFLOW_SCALE)), n)  # noqa: E731
    native = t.div(a, b)
    return _guarded(a, b, lambda: _banded(
        ln, [exact(a, bind, magnitude_only=True), exact(b, bind, magnitude_only=True)],
        over, under, negative, native, bind), native)


def exp(x: Tree) -> Tree:
    return t.case((is_nan(x), x),
                  (t.gt(x, f8(EXP_OVERFLOW_AFTER)), f8(math.inf)),
                  (t.le(x, f8(EXP_ZERO_UPTO)), f8(0.0)),
                  default=t.call("exp", x))


def odd_integer(y: Tree) -> Tree:
    """y is an odd integer (y finite); halving is exact, and every float above 2^53 is even."""
    return t.and_(t.eq(y, t.call("trunc", y)),
                  t.ne(t.sub(t.call("trunc", y), t.mul(f8(2.0), t.call("trunc", t.div(y, f8(2.0))))), f8(0.0)))


def power(x: Tree, y: Tree, invalid: Tree, bind: Bind) -> Tree:
    """The catalogue's power: 1 for y = 0 or x = 1 (NaN included), errors for 0 to a negative
    power and a negative base with a finite non-integral exponent, IEEE 754 9.2.1 pow
    otherwise. PostgreSQL's overflow/underflow errors are avoided in ln-space; inside the
    band at each limit, NUMERIC power of the exact operands decides."""
    negative = t.and_(t.lt(x, f8(0.0)), odd_integer(y))

    def regular(refs: list[Tree]) -> Tree:
        [lx] = refs
        # y * ln|x| against a limit, compared as y against limit / ln|x| so nothing overflows.
        def beyond(limit: float, above: bool) -> Tree:
            ratio = t.div(f8(limit), lx)
            pos, neg = (t.gt, t.lt) if above else (t.lt, t.gt)
            return t.case((t.gt(lx, f8(0.0)), pos(y, ratio)), (t.lt(lx, f8(0.0)), neg(y, ratio)),
                          default=t.boolean(False))
        native = t.call("power", x, y)
        exact_power = lambda: t.call("power", exact(x, bind, magnitude_only=True), exact(y, bind))  # noqa: E731
        over = t.ge(exact_power(), numeric(OVERFLOW_LIMIT))
        # NUMERIC power keeps 16 significant digits of a result this small, so an exact tie
        # (0.25^537.5 = 2^-1075) can come out a hair above: treat [2^-1075, 2^-1075 (1 + 2^-40)]
        # as zero. The true result there is 0 or the least subnormal, one unit in the last place
        # apart, within the documented tolerance of power (rexpr.compare, rule 5).
        under = t.le(t.mul(exact_power(), numeric(UNDERFLOW_SCALE)), numeric(str(Decimal(1 + 2.0**-40))))
        return t.case(
            (beyond(LN_OVER_SURE, True), signed(negative, math.inf)),
            (beyond(LN_OVER_BAND, True), t.case((over, signed(negative, math.inf)), default=native)),
            (beyond(LN_UNDER_SURE, False), signed(negative, 0.0)),
            (beyond(LN_UNDER_BAND, False), t.case((under, signed(negative, 0.0)), default=native)),
            default=native)

    return t.case(
        (t.or_(t.is_null(x), t.is_null(y)), t.cast(t.null(), "DOUBLE PRECISION", D)),
        (t.or_(t.eq(y, f8(0.0)), t.eq(x, f8(1.0))), f8(1.0)),
        (t.or_(is_nan(x), is_nan(y)), f8(math.nan)),
        (t.and_(t.eq(x, f8(0.0)), t.lt(y, f8(0.0))), invalid),
        (t.and_(t.lt(x, f8(0.0)), finite(y), t.ne(y, t.call("trunc", y))), invalid),
        (t.and_(finite(x), finite(y), t.ne(x, f8(0.0))), bind([t.call("ln", fabs(x))], regular)),
        default=t.call("power", x, y))


def round_integral(x: Tree) -> Tree:
    """round(x) half away from zero, exactly: x - trunc(x) is exact in binary64."""
    frac = t.sub(x, t.call("trunc", x))
    whole = t.call("trunc", x)
    return t.case((t.not_(finite(x)), x),
                  (t.ge(frac, f8(0.5)), t.add(whole, f8(1.0))),
                  (t.le(frac, f8(-0.5)), t.sub(whole, f8(1.0))),
                  default=whole)


def round_digits(x: Tree, digits: Tree, bind: Bind) -> Tree:
    """round(x, digits) half away from zero on the exact binary value (decimal.ROUND_HALF_UP)."""
    def body(refs: list[Tree]) -> Tree:
        [r] = refs
        return t.case((t.eq(r, numeric(0)), t.mul(x, f8(0.0))),
                      (t.ge(t.call("abs", r), numeric(OVERFLOW_LIMIT)), signed(t.lt(x, f8(0.0)), math.inf)),
                      default=t.cast(r, "DOUBLE PRECISION", D))

    rounded = t.call("round", exact(x, bind), t.cast(digits, "INTEGER", D))
    return t.case((t.or_(t.not_(finite(x)), t.eq(x, f8(0.0))), x),
                  # a float64 has at most 1074 fraction digits; below -400 everything rounds to 0
                  (t.gt(digits, t.number(1100)), x),
                  (t.lt(digits, t.number(-400)), t.mul(x, f8(0.0))),
                  default=bind([rounded], body))


def fmod(a: Tree, b: Tree, by_zero: Tree, bind: Bind) -> Tree:
    """math.fmod semantics with the catalogue's errors: exact, through NUMERIC (mod is
    truncating there), with the dividend's sign on a zero result."""
    def body(refs: list[Tree]) -> Tree:
        [r] = refs
        return t.case((t.eq(r, numeric(0)), t.mul(a, f8(0.0))), default=t.cast(r, "DOUBLE PRECISION", D))

    return t.case(
        (t.or_(t.is_null(a), t.is_null(b)), t.cast(t.null(), "DOUBLE PRECISION", D)),
        (t.eq(b, f8(0.0)), by_zero),
        (t.or_(t.not_(finite(a)), is_nan(b)), f8(math.nan)),
        (t.or_(t.not_(finite(b)), t.lt(fabs(a), fabs(b))), a),
        default=bind([t.call("mod", exact(a, bind), exact(b, bind))], body))


def to_int64(x: Tree, out_of_range: Tree) -> Tree:
    """float64 -> int64: half away from zero; NaN, ±inf and values outside int64 are errors.
    Doubles next to 2^63 are integers, so [-2^63, 2^63) is exactly the range that fits."""
    fits = t.and_(t.ge(x, f8(-TWO_63)), t.lt(x, f8(TWO_63)))  # NaN: the second test is false
    frac = t.sub(x, t.call("trunc", x))
    step = t.case((t.ge(frac, f8(0.5)), i8(1)), (t.le(frac, f8(-0.5)), i8(-1)), default=i8(0))
    return t.case((t.is_null(x), t.cast(t.null(), "BIGINT", D)),
                  (t.not_(fits), out_of_range),
                  default=t.add(t.cast(t.call("trunc", x), "BIGINT", D), step))
