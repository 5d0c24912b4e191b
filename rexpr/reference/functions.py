"""Reference implementations of every null-propagating catalogue function, one per id.

Each takes already-evaluated, non-null, non-error arguments. The evaluator handles nulls,
errors and the functions whose arguments are not all evaluated (and, or, case, coalesce, ...).
"""

from __future__ import annotations

import math
import re
from decimal import ROUND_HALF_UP, Decimal, localcontext
from typing import Callable

from rexpr.catalogue.model import ErrorClass
from rexpr.types import INT64_MAX, INT64_MIN
from rexpr.values import RowError


def _int(result: int, what: str) -> int | RowError:
    if INT64_MIN <= result <= INT64_MAX:
        return result
    return RowError(ErrorClass.OUT_OF_RANGE, f"{what} overflows int64")


def _is_int(x: object) -> bool:
    return isinstance(x, int) and not isinstance(x, bool)


def add(a, b):
    return _int(a + b, "+") if _is_int(a) else a + b


def subtract(a, b):
    return _int(a - b, "-") if _is_int(a) else a - b


def multiply(a, b):
    return _int(a * b, "*") if _is_int(a) else a * b


def divide(a: float, b: float):
    if b == 0:
        return RowError(ErrorClass.DIVISION_BY_ZERO, "division by zero")
    return a / b


def _trunc_div(a: int, b: int) -> int:
    q = abs(a) // abs(b)
    return q if (a >= 0) == (b >= 0) else -q


def modulo(a, b):
    if b == 0:
        return RowError(ErrorClass.DIVISION_BY_ZERO, "modulo by zero")
    if _is_int(a):
        return a - b * _trunc_div(a, b)
    if math.isinf(a) or math.isnan(a) or math.isnan(b):
        return math.nan
    return math.fmod(a, b)


def negate(a):
    return _int(-a, "unary -") if _is_int(a) else -a


def div(a: int, b: int):
    if b == 0:
        return RowError(ErrorClass.DIVISION_BY_ZERO, "division by zero")
    return _int(_trunc_div(a, b), "div")


def abs_(a):
    return _int(abs(a), "abs") if _is_int(a) else abs(a)


def round_(x, digits: int = 0):
    if _is_int(x):
        if digits >= 0:
            return x
        if digits < -19:  # |x| < 10**19 / 2, so it rounds to 0
            return 0
        unit = 10 ** (-digits)
        q, r = divmod(abs(x), unit)
        if 2 * r >= unit:
            q += 1
        return _int(q * unit if x >= 0 else -q * unit, "round")
    if not math.isfinite(x):
        return x
    if digits > 1100:  # a float64 has at most 1074 fraction digits: nothing to round
        return x
    if digits < -400:
        return math.copysign(0.0, x)
    with localcontext() as ctx:
        ctx.prec = 2000
        result = Decimal(x).quantize(Decimal(1).scaleb(-digits), rounding=ROUND_HALF_UP)
    return float(result)


def floor_(x):
    if _is_int(x) or not math.isfinite(x):
        return x
    r = float(math.floor(x))
    return math.copysign(0.0, x) if r == 0 else r


def ceil_(x):
    if _is_int(x) or not math.isfinite(x):
        return x
    r = float(math.ceil(x))
    return math.copysign(0.0, x) if r == 0 else r


def sqrt(x: float):
    if x < 0:
        return RowError(ErrorClass.INVALID_ARGUMENT, "square root of a negative number")
    return math.sqrt(x)


def power(x: float, y: float):
    if y == 0 or x == 1:
        return 1.0
    if math.isnan(x) or math.isnan(y):
        return math.nan
    if x == 0 and y < 0:
        return RowError(ErrorClass.INVALID_ARGUMENT, "zero raised to a negative power")
    if x < 0 and math.isfinite(y) and not y.is_integer():
        return RowError(ErrorClass.INVALID_ARGUMENT, "negative base with a non-integral exponent")
    try:
        return math.pow(x, y)
    except OverflowError:
        odd = math.isfinite(y) and y.is_integer() and int(y) % 2 == 1
        return -math.inf if (x < 0 and odd) else math.inf


def ln(x: float):
    if x <= 0:
        return RowError(ErrorClass.INVALID_ARGUMENT, "logarithm of zero or a negative number")
    return math.log(x)


def exp(x: float):
    try:
        return math.exp(x)
    except OverflowError:
        return math.inf


def _strip(s: str, chars: str, left: bool, right: bool) -> str:
    if left:
        s = s.lstrip(chars)
    if right:
        s = s.rstrip(chars)
    return s


def substring(s: str, start: int, length: int | None = None):
    if length is not None and length < 0:
        return RowError(ErrorClass.INVALID_ARGUMENT, "negative substring length")
    begin = max(start, 1)
    end = start + length if length is not None else len(s) + 1
    if end <= begin:
        return ""
    return s[begin - 1:end - 1]


def like(s: str, pattern: str, escape: str | None = None):
    regex = like_regex(pattern, escape)
    if isinstance(regex, RowError):
        return regex
    return regex.fullmatch(s) is not None


def like_regex(pattern: str, escape: str | None) -> "re.Pattern[str] | RowError":
    """The regular expression a like pattern means, or the error the pattern raises."""
    if escape is not None and len(escape) != 1:
        return RowError(ErrorClass.INVALID_ESCAPE, "the escape must be exactly one character")
    out = []
    i = 0
    while i < len(pattern):
        ch = pattern[i]
        if escape is not None and ch == escape:
            if i + 1 >= len(pattern) or pattern[i + 1] not in ("%", "_", escape):
                return RowError(ErrorClass.INVALID_ESCAPE, "the escape must precede %, _ or itself")
            out.append(re.escape(pattern[i + 1]))
            i += 2
            continue
        out.append(".*" if ch == "%" else "." if ch == "_" else re.escape(ch))
        i += 1
    return re.compile("".join(out), re.DOTALL)


def replace(s: str, search: str, replacement: str) -> str:
    return s if search == "" else s.replace(search, replacement)


# Null-propagating functions: called only when no argument is null or an error.
PLAIN: dict[str, Callable[..., object]] = {
    "add": add, "subtract": subtract, "multiply": multiply, "divide": divide, "modulo": modulo,
    "negate": negate, "div": div, "abs": abs_, "round": round_, "floor": floor_, "ceil": ceil_,
    "sqrt": sqrt, "power": power, "ln": ln, "exp": exp, "is_nan": math.isnan,
    "eq": lambda a, b: a == b, "ne": lambda a, b: a != b, "lt": lambda a, b: a < b,
    "le": lambda a, b: a <= b, "gt": lambda a, b: a > b, "ge": lambda a, b: a >= b,
    "not": lambda a: not a,
    "like": like,
    "trim": lambda s, chars=" ": _strip(s, chars, True, True),
    "ltrim": lambda s, chars=" ": _strip(s, chars, True, False),
    "rtrim": lambda s, chars=" ": _strip(s, chars, False, True),
    "substring": substring, "upper": str.upper, "lower": str.lower, "length": len,
    "octet_length": lambda s: len(s.encode("utf-8")),
    "concat_op": lambda a, b: a + b, "replace": replace,
    "position": lambda needle, hay: hay.find(needle) + 1,
    "starts_with": lambda s, p: s.startswith(p), "ends_with": lambda s, p: s.endswith(p),
    "year": lambda d: d.year, "month": lambda d: d.month, "day": lambda d: d.day,
}
