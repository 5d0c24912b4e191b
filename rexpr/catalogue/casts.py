"""Which casts exist, and what each one means. Pairs not listed are type errors."""

from __future__ import annotations

from dataclasses import dataclass

from rexpr.catalogue.model import ErrorClass
from rexpr.types import Kind

B, I, F, S, D, T = Kind.BOOL, Kind.INT64, Kind.FLOAT64, Kind.STRING, Kind.DATE, Kind.TIMESTAMP


@dataclass(frozen=True)
class CastRule:
    source: Kind
    target: Kind
    semantics: str
    errors: tuple[ErrorClass, ...] = ()


_SPACES = "after removing leading and trailing spaces (U+0020 only; ISO/IEC 9075-2 6.13)"

CAST_RULES: tuple[CastRule, ...] = (
    CastRule(I, F, "Nearest float64 (round to nearest even beyond 2^53; IEEE 754 5.4.1 convertFromInt)."),
    CastRule(F, I, "Round half away from zero to an integer; NaN, ±inf and values outside int64 are errors.",
             (ErrorClass.OUT_OF_RANGE,)),
    CastRule(B, I, "true is 1, false is 0."),
    CastRule(I, B, "0 is false, any other value true."),
    CastRule(S, I, f"An optional sign and ASCII digits, {_SPACES}; anything else is an error; values "
                   "outside int64 are errors.", (ErrorClass.INVALID_CAST, ErrorClass.OUT_OF_RANGE)),
    CastRule(S, F, f"A decimal or exponent numeral, or inf, infinity, nan in any case with an optional "
                   f"sign, {_SPACES}; correctly rounded (IEEE 754 5.12.2); anything else is an error. "
                   "A finite numeral too large for float64 is an error, not inf.",
             (ErrorClass.INVALID_CAST, ErrorClass.OUT_OF_RANGE)),
    CastRule(S, B, f"'true' or 'false' in any case, {_SPACES}; anything else is an error.",
             (ErrorClass.INVALID_CAST,)),
    CastRule(S, D, f"'YYYY-MM-DD' (RFC 3339 full-date), {_SPACES}; anything else is an error.",
             (ErrorClass.INVALID_DATETIME,)),
    CastRule(S, T, f"'YYYY-MM-DD', 'YYYY-MM-DD HH:MM:SS' or with 'T', with up to 6 fraction digits, "
                   f"{_SPACES}; no time zone; anything else is an error.", (ErrorClass.INVALID_DATETIME,)),
    CastRule(I, S, "Decimal digits with a leading '-' when negative."),
    CastRule(F, S, "The shortest decimal that reads back to the same float64 (IEEE 754 5.12.2), as "
                   "Python's repr: '1.0', '1e+20', '-0.0'; 'NaN', 'Infinity', '-Infinity'."),
    CastRule(B, S, "'TRUE' or 'FALSE' (ISO/IEC 9075-2 6.13, from memory)."),
    CastRule(D, S, "'YYYY-MM-DD'."),
    CastRule(T, S, "'YYYY-MM-DD HH:MM:SS', with '.ffffff' (trailing zeros dropped) when there are microseconds."),
    CastRule(D, T, "Midnight at the start of the day."),
    CastRule(T, D, "The date part (time of day dropped)."),
)

_BY_PAIR = {(r.source, r.target): r for r in CAST_RULES}


def cast_rule(source: Kind, target: Kind) -> CastRule | None:
    """The rule for a cast, or None when the cast does not exist. Same-kind casts are identity."""
    if source is target:
        return CastRule(source, target, "Identity.")
    return _BY_PAIR.get((source, target))
