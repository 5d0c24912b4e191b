"""Decimal numerals as digit strings, in SQL: the parts of the cast table that engines get
wrong when left to their own number parsing and printing.

* Range of a numeral: a finite numeral too large for float64 is an error, and one too small
  becomes 0.0. Both are decided on the digits, exactly, against the two binary64 limits
  (IEEE 754-2019 4.3.1: a value at or above 2^1024 - 2^970 rounds to infinity, and at or below
  2^-1075, half the least subnormal, to zero).
* Python's repr of a float (the cast table's float64 -> string) from an engine's shortest
  round-trip digits: fixed notation when the decimal exponent is in [-4, 16), else
  ``d.ddde+XX``, as CPython's float_repr_style 'short' does.

Every helper takes trees that are cheap to repeat (bound values) and an engine's
:class:`TextOps`."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

from rexpr.sql.dialects import _trees as t
from rexpr.types import Kind

Tree = t.Tree


def _digits_and_exponent(numerator: int, denominator_power_of_ten: int) -> tuple[str, int]:
    """Significant digits (no trailing zeros) and the decimal exponent of the first digit of
    numerator * 10**-denominator_power_of_ten."""
    digits = str(numerator)
    exponent = len(digits) - 1 - denominator_power_of_ten
    return digits.rstrip("0"), exponent


# 2^1024 - 2^970 (an integer) and 2^-1075 = 5^1075 * 10^-1075, exactly.
OVERFLOW_DIGITS, OVERFLOW_EXPONENT = _digits_and_exponent(2**1024 - 2**970, 0)
UNDERFLOW_DIGITS, UNDERFLOW_EXPONENT = _digits_and_exponent(5**1075, 1075)


@dataclass(frozen=True)
class TextOps:
    """The handful of string operations the helpers need, spelled for one engine."""

    length: Callable[[Tree], Tree]                      # code points
    substr: Callable[[Tree, Tree, Tree | None], Tree]   # 1-based start, optional length
    find: Callable[[Tree, str], Tree]                   # position of a literal, 0 when absent
    concat: Callable[..., Tree]
    strip_left: Callable[[Tree, str], Tree]             # drop a leading run of one character
    strip_right: Callable[[Tree, str], Tree]
    repeat: Callable[[Tree, Tree], Tree]
    big_int: Callable[[Tree], Tree]                     # digits with optional sign -> exact integer
    int_text: Callable[[Tree], Tree]                    # integer -> decimal text
    text_compare: Callable[[str, Tree, Tree], Tree]     # eq/lt/le/gt/ge by code point
    bind: Callable[..., Tree]                           # (values, body, kinds), see _logic.Bind


def numeral_parts(ops: TextOps, unsigned: Tree, body: Callable[[Tree, Tree], Tree]) -> Tree:
    """For an unsigned decimal numeral ``I[.F][e[+-]X]``, call ``body(sig, p)`` where ``sig``
    is the significant digits without leading or trailing zeros ('' for zero) and ``p`` the
    decimal exponent of the first of them."""
    e_at = ops.find(unsigned, "e")

    def split(refs: list[Tree]) -> Tree:
        text, epos = refs
        mantissa = t.case((t.gt(epos, t.number(0)), ops.substr(text, t.number(1), t.sub(epos, t.number(1)))),
                          default=text)
        exponent = t.case((t.gt(epos, t.number(0)), ops.big_int(ops.substr(text, t.add(epos, t.number(1)), None))),
                          default=ops.big_int(t.string("0")))
        return ops.bind([mantissa, exponent], point, [Kind.STRING, "decimal"])

    def point(refs: list[Tree]) -> Tree:
        mantissa, exponent = refs
        dot = ops.find(mantissa, ".")
        return ops.bind([mantissa, exponent, dot], digits, [Kind.STRING, "decimal", Kind.INT64])

    def digits(refs: list[Tree]) -> Tree:
        mantissa, exponent, dot = refs
        whole = t.case((t.gt(dot, t.number(0)), t.sub(dot, t.number(1))), default=ops.length(mantissa))
        all_digits = t.case(
            (t.gt(dot, t.number(0)),
             ops.concat(ops.substr(mantissa, t.number(1), t.sub(dot, t.number(1))),
                        ops.substr(mantissa, t.add(dot, t.number(1)), None))),
            default=mantissa)
        return ops.bind([all_digits, whole, exponent], significant, [Kind.STRING, Kind.INT64, "decimal"])

    def significant(refs: list[Tree]) -> Tree:
        all_digits, whole, exponent = refs
        stripped = ops.strip_left(all_digits, "0")
        return ops.bind([stripped, all_digits, whole, exponent], finish,
                        [Kind.STRING, Kind.STRING, Kind.INT64, "decimal"])

    def finish(refs: list[Tree]) -> Tree:
        stripped, all_digits, whole, exponent = refs
        leading = t.sub(ops.length(all_digits), ops.length(stripped))
        first = t.add(t.sub(t.sub(whole, leading), t.number(1)), exponent)
        return ops.bind([ops.strip_right(stripped, "0"), first], lambda r: body(r[0], r[1]), [Kind.STRING, "decimal"])

    return ops.bind([unsigned, e_at], split, [Kind.STRING, Kind.INT64])


def _beyond(ops: TextOps, sig: Tree, p: Tree, exponent: int, digits: str, above: bool) -> Tree:
    far = t.gt(p, t.number(exponent)) if above else t.lt(p, t.number(exponent))
    edge = t.and_(t.eq(p, t.number(exponent)), ops.text_compare("ge" if above else "le", sig, t.string(digits)))
    nonzero = t.not_(ops.text_compare("eq", sig, t.string("")))
    return t.and_(nonzero, t.or_(far, edge))


def overflows(ops: TextOps, sig: Tree, p: Tree) -> Tree:
    """The numeral is finite but rounds to infinity in binary64."""
    return _beyond(ops, sig, p, OVERFLOW_EXPONENT, OVERFLOW_DIGITS, above=True)


def underflows(ops: TextOps, sig: Tree, p: Tree) -> Tree:
    """The numeral is not zero but rounds to zero in binary64."""
    return _beyond(ops, sig, p, UNDERFLOW_EXPONENT, UNDERFLOW_DIGITS, above=False)


def python_repr(ops: TextOps, negative: Tree, sig: Tree, p: Tree) -> Tree:
    """repr() of the float whose shortest digits are ``sig`` with first-digit exponent ``p``."""
    n = ops.length(sig)
    zero = t.string("0")
    fixed = t.case(
        (t.lt(p, t.number(0)),
         ops.concat(t.string("0."), ops.repeat(zero, t.sub(t.neg(p), t.number(1))), sig)),
        (t.le(n, t.add(p, t.number(1))),
         ops.concat(sig, ops.repeat(zero, t.sub(t.add(p, t.number(1)), n)), t.string(".0"))),
        default=ops.concat(ops.substr(sig, t.number(1), t.add(p, t.number(1))), t.string("."),
                           ops.substr(sig, t.add(p, t.number(2)), None)))
    magnitude = t.case((t.lt(p, t.number(0)), t.neg(p)), default=p)
    exponent_text = ops.int_text(magnitude)
    padded = t.case((t.lt(magnitude, t.number(10)), ops.concat(t.string("0"), exponent_text)), default=exponent_text)
    scientific = ops.concat(
        ops.substr(sig, t.number(1), t.number(1)),
        t.case((t.gt(n, t.number(1)), ops.concat(t.string("."), ops.substr(sig, t.number(2), None))),
               default=t.string("")),
        t.case((t.lt(p, t.number(0)), t.string("e-")), default=t.string("e+")),
        padded)
    unsigned = t.case(
        (ops.text_compare("eq", sig, t.string("")), t.string("0.0")),
        (t.and_(t.ge(p, t.number(-4)), t.lt(p, t.number(16))), fixed),
        default=scientific)
    return t.case((negative, ops.concat(t.string("-"), unsigned)), default=unsigned)
