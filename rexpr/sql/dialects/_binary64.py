"""The binary64 limits the server dialects decide overflow and underflow against (IEEE
754-2019 4.3.1, rounding to nearest, ties to even), and the limits of the C library's exp,
found by bisection once at import."""

from __future__ import annotations

import math
from typing import Callable

DBL_MAX = 1.7976931348623157e308
OVERFLOW_LIMIT = 2**1024 - 2**970  # least real value that rounds to +inf
UNDERFLOW_SCALE = 2**1075          # |v| * 2^1075 <= 1: v rounds to zero (2^-1075 is a tie, to even 0)


def _largest(ok: Callable[[float], bool], lo: float, hi: float) -> float:
    """Largest double in [lo, hi) with ok(x), for ok true at lo and false at hi."""
    while True:
        mid = (lo + hi) / 2
        if mid in (lo, hi):
            return lo
        lo, hi = (mid, hi) if ok(mid) else (lo, mid)


def _finite_exp(x: float) -> bool:
    try:
        math.exp(x)
        return True
    except OverflowError:
        return False


# Largest x with a finite exp(x), and largest x with exp(x) == 0, with the C library's exp
# (the one the servers call on the same platform; Python's math.exp is a thin wrapper).
EXP_OVERFLOW_AFTER = _largest(_finite_exp, 709.0, 710.0)
EXP_ZERO_UPTO = _largest(lambda x: math.exp(x) == 0.0, -800.0, -700.0)
