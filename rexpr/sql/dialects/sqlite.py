"""SQLite dialect (sqlglot dialect "sqlite"), written against SQLite 3.40 (Python's sqlite3).

Storage, as the runner lays it out: int64 and bool INTEGER (bool 0/1), float64 REAL, string
TEXT, date TEXT 'YYYY-MM-DD', timestamp TEXT 'YYYY-MM-DD HH:MM:SS.ffffff' (six fraction digits,
so text order is time order). Dates and timestamps are therefore computed on that text.

What the faithful lowering works around, each measured on SQLite 3.40.1:

* No NaN: a NaN is stored as NULL, and an operation whose IEEE 754 result is NaN (inf - inf,
  0 * inf, fmod(inf, y)) gives NULL. Such a result raises the engine-limit tag
  ``rexpr-limit:nan`` (not an error class), so that row is an engine-limit row instead of reading
  as a null. NaN inputs are the runner's business (it reports them as input losses).
* int64 overflow turns ``+ - * /`` results into REAL and ``abs(-2^63)`` raises an untagged
  "integer overflow"; division or modulo by zero gives NULL; ``sqrt(-1)`` and ``ln(0)`` give
  NULL. Each is guarded into the tagged raise.
* ``round`` adds 0.5 and truncates (round(0.49999999999999994) = 1.0) and uses printf
  rounding with digits (round(2.675, 2) = 2.68): round(x) is rebuilt from trunc().
* ``LIKE`` is ASCII case-insensitive by default and the runner keeps it so: matching uses
  ``GLOB`` (case-sensitive, one UTF-8 character per ``?``) with the pattern translated.
* ``substr('abc', -1)`` counts from the end; a negative length counts backwards.
* Text functions stop at U+0000: ``length``, ``substr``, ``GLOB``, and ``replace`` with a NUL
  search. Where that would change the answer the lowering raises ``rexpr-limit:nul``.
* ``upper``/``lower`` map ASCII only; ``CAST(text AS REAL)`` reads a numeric prefix ('1.5x'
  is 1.5); REAL prints with 15 significant digits: none of these is pushed.
* ``coalesce`` needs two or more arguments; there is no ``concat`` before 3.44.

Errors are raised by ``rexpr_raise('rexpr:<class>')``, a function the runner registers on
its connection (not deterministic, so SQLite never evaluates it ahead of the row). The
sqlite3 module replaces the exception text, so the function must hand its tag to the
runner directly.
"""

from __future__ import annotations

import datetime as dt
import math
import sqlite3
import threading

from sqlglot import exp

from rexpr.catalogue.model import ErrorClass
from rexpr.errors import NotPushable
from rexpr.language.datetime_text import format_date
from rexpr.sql.dialects import _embedded as em, _trees as t
from rexpr.sql.profile import Capability, DialectProfile, Divergence, LowerContext, Lowerer
from rexpr.sql.quoting import Quoting, string_literal
from rexpr.typed import TCall
from rexpr.types import INT64_MAX, INT64_MIN, DataType, Kind

D = "sqlite"
Tree = t.Tree
B, I, F, S, DATE, TS = Kind.BOOL, Kind.INT64, Kind.FLOAT64, Kind.STRING, Kind.DATE, Kind.TIMESTAMP
QUOTING = Quoting(D, char_function="char", join="pipes")
RAISE_FUNCTION = "rexpr_raise"
LIMIT_TAG = "rexpr-limit:"  # not an error class: the runner reports an engine-limit row
TWO_52 = 2.0**52  # from here on every double is an integer (IEEE 754 binary64, 52 fraction bits)
TWO_53 = 2.0**53


def i8(value: int) -> Tree:
    return t.number(value)  # SQLite reads -9223372036854775808 as an integer


def f8(value: float) -> Tree:
    if math.isnan(value):
        raise NotPushable("SQLite has no NaN value")
    if math.isinf(value):
        return t.number("9e999" if value > 0 else "-9e999")  # overflows to ±inf when read
    if value.is_integer() and abs(value) < TWO_53:
        return t.number(repr(value))  # integral significand, no scaling: read exactly
    # SQLite's decimal-to-REAL conversion is not always correctly rounded (measured:
    # '-3.1315468202343167e-307' reads one ulp off), so other values are built exactly as
    # m * 2^e: m < 2^53 converts exactly, 2^e >= 2^-1074 is a double, the product is x itself.
    numerator, denominator = value.as_integer_ratio()
    exponent = -(denominator.bit_length() - 1)
    while numerator % 2 == 0 and exponent < 0:  # as_integer_ratio is already in lowest terms
        numerator //= 2
        exponent += 1
    return t.mul(t.cast(t.number(numerator), "REAL", D), t.call("power", t.number("2.0"), t.number(exponent)))


def typed_null(kind: Kind) -> Tree:
    return t.null()


def raise_(error: ErrorClass, kind: Kind) -> Tree:
    return t.call(RAISE_FUNCTION, t.string(f"rexpr:{error.value}"))


def limit(reason: str) -> Tree:
    return t.call(RAISE_FUNCTION, t.string(f"{LIMIT_TAG}{reason}"))


def is_raise(node: exp.Expression) -> bool:
    return isinstance(node, exp.Anonymous) and str(node.this).lower() == RAISE_FUNCTION


def timestamp_text(value: dt.datetime) -> str:
    return value.isoformat(sep=" ", timespec="microseconds")


def literal(value: object, data_type: DataType) -> Tree:
    kind = data_type.kind
    if value is None:
        return t.null()
    if kind is B:
        return i8(1 if value else 0)
    if kind is I:
        return i8(int(value))  # type: ignore[call-overload]
    if kind is F:
        return f8(float(value))  # type: ignore[arg-type]
    if kind is S:
        return string_literal(str(value), QUOTING)
    if kind is DATE:
        return t.string(format_date(value))  # type: ignore[arg-type]
    if kind is TS:
        assert isinstance(value, dt.datetime)
        return t.string(timestamp_text(value))
    raise NotPushable(f"no SQLite literal for {data_type.name}")


def compare(op: str, kind: Kind, a: Tree, b: Tree) -> Tree:
    # No NaN, BINARY collation (memcmp of UTF-8 = code point order), dates as canonical text.
    return t.COMPARE[op](a, b)


ENGINE = em.Engine(D, raise_, is_raise, typed_null, i8, "max", int_div=t.div, probe=None, compare=compare)


def _risky(tree: Tree) -> bool:
    return em.may_raise(tree, ENGINE)


def _has_nul(s: Tree) -> Tree:
    return t.gt(t.call("instr", s, t.call("char", t.number(0))), t.number(0))


def _nan_guard(node: TCall, args: list[Tree], value: Tree, checks: list[tuple[Tree, ErrorClass]]) -> Tree:
    """A float result that SQLite turns into NULL (IEEE NaN) raises the engine-limit tag."""
    # Non-null operands give NULL only for NaN; coalesce evaluates the raise only then.
    # The coalesce would also fire for a null operand, so null operands are tested first.
    return em.guarded(ENGINE, node, args, checks, t.call("coalesce", value, limit("nan")), nulls_first=True)


# ---------------------------------------------------------------------------------- arithmetic
def _arith(op: str) -> Lowerer:
    def lower(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
        if node.type.kind is I:
            return em.int_arith(ENGINE, node, args, op)
        value = {"add": t.add, "subtract": t.sub, "multiply": t.mul}[op](*args)
        return _nan_guard(node, args, value, [])
    return lower


def _zero_checks(node: TCall, divisor: Tree) -> list[tuple[Tree, ErrorClass]]:
    if em.nonzero_literal(node.args[1]):
        return []
    zero = i8(0) if node.args[1].type.kind is I else f8(0.0)
    return [(t.eq(divisor, zero), ErrorClass.DIVISION_BY_ZERO)]


def _divide(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    a, b = args
    is_literal, divisor = em.literal_of(node.args[1])
    if em.nonzero_literal(node.args[1]) and math.isfinite(divisor):  # type: ignore[arg-type]
        return t.div(a, b)  # x / finite non-zero is never NaN here (x is never NaN in SQLite)
    return _nan_guard(node, args, t.div(a, b), _zero_checks(node, b))


def _modulo(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    a, b = args
    if node.type.kind is I:
        if em.literal_of(node.args[1]) == (True, -1):
            return t.case((t.is_null(a), t.null()), default=i8(0))
        value = t.mod(a, b) if em.nonzero_literal(node.args[1]) else \
            t.case((t.eq(b, i8(-1)), i8(0)), default=t.mod(a, b))  # % keeps the dividend's sign
        return em.guarded(ENGINE, node, args, _zero_checks(node, b), value)
    # '%' converts REAL operands to INTEGER; mod() is C fmod (fmod(inf, y) is NaN).
    return _nan_guard(node, args, t.call("mod", a, b), _zero_checks(node, b))


def _negate(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    if node.type.kind is F:
        return t.neg(args[0])
    return em.guarded(ENGINE, node, args, [(t.eq(args[0], i8(INT64_MIN)), ErrorClass.OUT_OF_RANGE)], t.neg(args[0]))


def _div(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    a, b = args
    checks = _zero_checks(node, b)
    if em.literal_of(node.args[1]) == (True, -1):
        checks.append((t.eq(a, i8(INT64_MIN)), ErrorClass.OUT_OF_RANGE))
    elif not em.nonzero_literal(node.args[1]):
        checks.append((t.and_(t.eq(a, i8(INT64_MIN)), t.eq(b, i8(-1))), ErrorClass.OUT_OF_RANGE))
    return em.guarded(ENGINE, node, args, checks, t.div(a, b))  # INTEGER / INTEGER truncates toward zero


def _abs(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    if node.type.kind is F:
        return t.call("abs", args[0])
    return em.guarded(ENGINE, node, args, [(t.eq(args[0], i8(INT64_MIN)), ErrorClass.OUT_OF_RANGE)],
                      t.call("abs", args[0]))


def round_integral(x: Tree) -> Tree:
    """Half away from zero on the exact value: x - trunc(x) is exact, so compare it with 1/2."""
    whole = t.call("trunc", x)
    fraction = t.sub(x, whole)
    nearest = t.case((t.ge(fraction, f8(0.5)), t.add(whole, f8(1.0))),
                     (t.le(fraction, f8(-0.5)), t.sub(whole, f8(1.0))), default=whole)
    return t.case((t.ge(t.call("abs", x), f8(TWO_52)), x), default=nearest)


def _round(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    if node.type.kind is I:
        return em.round_int(ctx, ENGINE, node, args)
    if len(node.args) == 2:
        is_literal, digits = em.literal_of(node.args[1])
        if not is_literal:
            ctx.refuse(node, "digits must be the literal 0 (or absent)")
        if digits is None:
            return em.null_after(ENGINE, args)
        if digits != 0:
            ctx.refuse(node, "digits other than 0: SQLite rounds through printf's decimal text, not the exact value")
    return round_integral(args[0])


def _floor_ceil(fn: str) -> Lowerer:
    return lambda ctx, node, args: args[0] if node.type.kind is I else t.call(fn, args[0])


def _sqrt(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    return em.guarded(ENGINE, node, args, [(t.lt(args[0], f8(0.0)), ErrorClass.INVALID_ARGUMENT)],
                      t.call("sqrt", args[0]))


def _ln(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    return em.guarded(ENGINE, node, args, [(t.le(args[0], f8(0.0)), ErrorClass.INVALID_ARGUMENT)],
                      t.call("ln", args[0]))


def _power(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    x, y = args
    zero = f8(0.0)
    finite = t.and_(t.gt(y, f8(-math.inf)), t.lt(y, f8(math.inf)))
    checks = [(t.and_(t.eq(x, zero), t.lt(y, zero)), ErrorClass.INVALID_ARGUMENT),
              (t.and_(t.lt(x, zero), finite, t.ne(y, t.call("trunc", y))), ErrorClass.INVALID_ARGUMENT)]
    return em.guarded(ENGINE, node, args, checks, t.call("pow", x, y))


def _is_nan(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    # SQLite holds no NaN: a stored NaN is NULL (an input loss the runner reports) and a NaN
    # result raises rexpr-limit:nan, so every value that reaches here is a number.
    return t.case((t.is_null(args[0]), t.null()), default=i8(0))


# ---------------------------------------------------------------------------------- logic
def _chain(conjunction: bool) -> Lowerer:
    def lower(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
        return em.chain(ctx, node, [(a, _risky(a)) for a in args], ENGINE, conjunction)
    return lower


def _nullif(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    a, b = args
    return t.case((em.any_null(ENGINE, args), a), (t.eq(a, b), t.null()), default=a)


def _case(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    pairs = [(args[i], args[i + 1]) for i in range(0, len(args) - 1, 2)]
    return t.case(*pairs, default=args[-1])


def _coalesce(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    return args[0] if len(args) == 1 else t.call("coalesce", *args)


# ---------------------------------------------------------------------------------- strings
def _glob_text(pattern: str) -> str:
    """A like pattern with no escapes as a GLOB pattern (compile time)."""
    out = []
    for ch in pattern:
        out.append({"%": "*", "_": "?", "*": "[*]", "?": "[?]", "[": "[[]"}.get(ch, ch))
    return "".join(out)


def _glob_of_escaped(pattern: str, escape: str) -> str:
    out, i = [], 0
    while i < len(pattern):
        ch = pattern[i]
        if ch == escape:
            literal_ch = pattern[i + 1]  # validated: one of %, _ or the escape
            out.append({"*": "[*]", "?": "[?]", "[": "[[]"}.get(literal_ch, literal_ch))
            i += 2
            continue
        out.append({"%": "*", "_": "?", "*": "[*]", "?": "[?]", "[": "[[]"}.get(ch, ch))
        i += 1
    return "".join(out)


def _glob_runtime(pattern: Tree) -> Tree:
    """The same translation in SQL, for a pattern known only per row: bracket GLOB's own
    metacharacters first (the brackets added contain no % or _), then map % and _."""
    out = t.call("replace", pattern, t.string("["), t.string("[[]"))
    for ch, glob in (("*", "[*]"), ("?", "[?]"), ("%", "*"), ("_", "?")):
        out = t.call("replace", out, t.string(ch), t.string(glob))
    return out


def _like(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    s, p = args[0], args[1]

    def glob(pattern: Tree) -> Tree:
        # GLOB stops at NUL in either operand.
        match = exp.Glob(this=t.paren(s), expression=t.paren(pattern))
        return t.case((t.or_(_has_nul(s), _has_nul(p)), limit("nul")), default=match)

    if len(args) == 2:
        is_literal, pattern = em.literal_of(node.args[1])
        translated = t.string(_glob_text(str(pattern))) if is_literal and pattern is not None else _glob_runtime(p)
        return em.guarded(ENGINE, node, args, [], glob(translated))
    (p_literal, pattern), (e_literal, escape) = em.literal_of(node.args[1]), em.literal_of(node.args[2])
    if not e_literal:
        ctx.refuse(node, "the escape must be a literal")
    if escape is None:
        return em.null_after(ENGINE, args)
    escape = str(escape)
    if len(escape) != 1:
        return em.guarded(ENGINE, node, args, [(t.boolean(True), ErrorClass.INVALID_ESCAPE)], t.null())
    if not p_literal:
        ctx.refuse(node, "with an escape, the pattern must be a literal (GLOB has no escape character)")
    if pattern is None:
        return em.null_after(ENGINE, args)
    static = em.static_like_error(node)
    if isinstance(static, ErrorClass):
        return em.guarded(ENGINE, node, args, [(t.boolean(True), static)], t.null())
    return em.guarded(ENGINE, node, args, [], glob(t.string(_glob_of_escaped(str(pattern), escape))))


def _trim(fn: str) -> Lowerer:
    return lambda ctx, node, args: t.call(fn, args[0], args[1] if len(args) > 1 else t.string(" "))


def _substr(s: Tree, start: Tree, count: Tree | None = None) -> Tree:
    # substr's own position arithmetic overflows for starts or counts near 2^53 and beyond
    # (substr('abc', 2^53) is 'abc'); past the end the answer is '' and no count exceeds the length.
    n = t.call("length", s)
    taken = t.call("substr", s, start) if count is None else \
        t.call("substr", s, start, t.call("min", count, n))
    return t.case((t.gt(start, n), t.string("")), default=taken)


def _substring(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    return em.substring(ENGINE, node, args, _substr)


def _length(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    return t.case((_has_nul(args[0]), limit("nul")), default=t.call("length", args[0]))


def _substring_checked(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    return t.case((_has_nul(args[0]), limit("nul")), default=_substring(ctx, node, args))


def _replace(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    # replace() treats a search that starts with NUL as empty, and returns the text unchanged
    # for an empty search even when the replacement is NULL: nulls are decided first. The NUL
    # test comes after that clause, which evaluates every argument in order whenever one of
    # them can raise, so an error in the text is not preceded by the search's NUL limit or error.
    value = t.case((_has_nul(args[1]), limit("nul")), default=t.call("replace", *args))
    return em.guarded(ENGINE, node, args, [], value, nulls_first=True)


def _blob(x: Tree) -> Tree:
    return t.cast(x, "BLOB", D)


def _affix(suffix: bool) -> Lowerer:
    """starts_with / ends_with on the bytes: a UTF-8 prefix (suffix) is a code point prefix
    (suffix), NUL included. substr of an empty blob is NULL, hence the length tests first."""
    def lower(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
        s, p = (_blob(a) for a in args)
        ns, np_ = t.call("length", s), t.call("length", p)
        start = t.add(t.sub(ns, np_), t.number(1)) if suffix else t.number(1)
        value = t.case((t.eq(np_, t.number(0)), i8(1)), (t.lt(ns, np_), i8(0)),
                       default=t.eq(t.call("substr", s, start, np_), p))
        return em.guarded(ENGINE, node, args, [], value, nulls_first=True)
    return lower


def _position(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    needle, haystack = args
    return em.ordered(ENGINE, node, args, t.call("instr", haystack, needle))  # code points; NUL-safe


def _concat(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    pieces = [t.call("coalesce", a, t.string("")) for a in args]
    out = pieces[0]
    for piece in pieces[1:]:
        out = exp.DPipe(this=t.paren(out), expression=piece)
    return out


def _call(fn: str) -> Lowerer:
    return lambda ctx, node, args: t.call(fn, *args)


# ---------------------------------------------------------------------------------- casts
def _spaces_trimmed(x: Tree) -> Tree:
    return t.call("trim", x, t.string(" "))


def _string_to_int(x: Tree) -> Tree:
    s = _spaces_trimmed(x)
    invalid, out_of_range = em.integer_text_checks(
        s, lambda v, n: t.call("substr", v, t.number(1), t.number(n)), lambda v: t.call("substr", v, t.number(2)),
        lambda v: t.call("length", v))
    return t.case((t.is_null(x), t.null()), (_has_nul(x), raise_(ErrorClass.INVALID_CAST, I)),
                  (invalid, raise_(ErrorClass.INVALID_CAST, I)), (out_of_range, raise_(ErrorClass.OUT_OF_RANGE, I)),
                  default=t.cast(s, "INTEGER", D))


def _string_to_bool(x: Tree) -> Tree:
    s = t.call("lower", _spaces_trimmed(x))  # ASCII lower: 'true'/'false' are ASCII
    return t.case((t.is_null(x), t.null()), (t.eq(s, t.string("true")), i8(1)), (t.eq(s, t.string("false")), i8(0)),
                  default=raise_(ErrorClass.INVALID_CAST, B))


_DIGITS_DATE = "[0-9][0-9][0-9][0-9]-[0-9][0-9]-[0-9][0-9]"
_DIGITS_TIME = "[0-9][0-9]:[0-9][0-9]:[0-9][0-9]"


def _valid_date_text(d: Tree) -> Tree:
    """d is 'YYYY-MM-DD' naming a day of the proleptic Gregorian calendar, year 1 to 9999:
    SQLite's date(d, '+0 days') normalises an impossible day (2024-02-30 -> 2024-03-01)."""
    return t.and_(exp.Glob(this=t.paren(d), expression=t.string(_DIGITS_DATE)),
                  t.ne(t.call("substr", d, t.number(1), t.number(4)), t.string("0000")),
                  t.eq(t.call("date", d, t.string("+0 days")), d))


def _string_to_date(x: Tree) -> Tree:
    s = _spaces_trimmed(x)
    valid = t.and_(t.eq(t.call("length", _blob(s)), t.number(10)), _valid_date_text(s))
    return t.case((t.is_null(x), t.null()), (t.not_(valid), raise_(ErrorClass.INVALID_DATETIME, DATE)), default=s)


def _string_to_timestamp(x: Tree) -> Tree:
    s = _spaces_trimmed(x)
    n = t.call("length", _blob(s))
    date_part = t.call("substr", s, t.number(1), t.number(10))
    time_part = t.call("substr", s, t.number(12), t.number(8))
    fraction = t.call("substr", s, t.number(21))
    time_ok = t.and_(t.in_list(t.call("substr", s, t.number(11), t.number(1)), [t.string(" "), t.string("T"), t.string("t")]),
                     exp.Glob(this=t.paren(time_part), expression=t.string(_DIGITS_TIME)),
                     t.le(t.call("substr", s, t.number(12), t.number(2)), t.string("23")),
                     t.le(t.call("substr", s, t.number(15), t.number(2)), t.string("59")),
                     t.le(t.call("substr", s, t.number(18), t.number(2)), t.string("59")))
    fraction_ok = t.and_(t.eq(t.call("substr", s, t.number(20), t.number(1)), t.string(".")),
                         t.not_(exp.Glob(this=t.paren(fraction), expression=t.string("*[^0-9]*"))))
    shape = t.case((t.eq(n, t.number(10)), t.boolean(True)), (t.eq(n, t.number(19)), time_ok),
                   (t.and_(t.ge(n, t.number(21)), t.le(n, t.number(26))), t.and_(time_ok, fraction_ok)),
                   default=t.boolean(False))
    valid = t.and_(shape, _valid_date_text(date_part))
    micros = t.call("substr", exp.DPipe(this=t.paren(fraction), expression=t.string("000000")), t.number(1), t.number(6))
    time_text = t.case((t.eq(n, t.number(10)), t.string("00:00:00")), default=time_part)
    micros_text = t.case((t.le(n, t.number(19)), t.string("000000")), default=micros)
    text = exp.DPipe(this=exp.DPipe(this=exp.DPipe(this=exp.DPipe(this=date_part, expression=t.string(" ")),
                                                   expression=time_text), expression=t.string(".")),
                     expression=micros_text)
    return t.case((t.is_null(x), t.null()), (t.not_(valid), raise_(ErrorClass.INVALID_DATETIME, TS)), default=text)


def _float_to_int(x: Tree) -> Tree:
    r = round_integral(x)
    fits = t.and_(t.ge(r, f8(float(INT64_MIN))), t.lt(r, f8(2.0**63)))
    return t.case((t.is_null(x), t.null()), (t.not_(fits), raise_(ErrorClass.OUT_OF_RANGE, I)),
                  default=t.cast(r, "INTEGER", D))


def _timestamp_to_string(x: Tree) -> Tree:
    return t.case((t.eq(t.call("substr", x, t.number(21)), t.string("000000")), t.call("substr", x, t.number(1), t.number(19))),
                  default=t.call("rtrim", x, t.string("0")))


def _cast(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    source, target = node.args[0].type.kind, node.type.kind
    x = args[0]
    if source is target or source is Kind.NULL:
        return x
    pair = (source, target)
    if pair == (I, F):
        return t.cast(x, "REAL", D)
    if pair in ((B, I), (DATE, S)):
        return x  # already 0/1, already 'YYYY-MM-DD'
    if pair == (I, B):
        return t.ne(x, i8(0))
    if pair == (I, S):
        return t.cast(x, "TEXT", D)
    if pair == (B, S):
        return t.case((t.is_null(x), t.null()), (x, t.string("TRUE")), default=t.string("FALSE"))
    if pair == (DATE, TS):
        return exp.DPipe(this=t.paren(x), expression=t.string(" 00:00:00.000000"))
    if pair == (TS, DATE):
        return t.call("substr", x, t.number(1), t.number(10))
    builders = {(F, I): _float_to_int, (S, I): _string_to_int, (S, B): _string_to_bool,
                (S, DATE): _string_to_date, (S, TS): _string_to_timestamp, (TS, S): _timestamp_to_string}
    if pair in builders:
        return builders[pair](x)
    reasons = {
        (S, F): "SQLite cannot check the numeral grammar (no regular expressions) and CAST reads a numeric "
                "prefix ('1.5x' is 1.5)",
        (F, S): "SQLite prints REAL with 15 significant digits (0.1 + 0.2 prints as '0.3'), not the shortest "
                "round-trip digits",
    }
    ctx.refuse(node, reasons.get(pair, f"no cast from {source.value} to {target.value}"))
    raise AssertionError("unreachable")


def _part(start: int, length: int) -> Lowerer:
    return lambda ctx, node, args: t.cast(t.call("substr", args[0], t.number(start), t.number(length)), "INTEGER", D)


# ---------------------------------------------------------------------------------- tables
FAITHFUL: dict[str, Lowerer] = {
    "add": _arith("add"),
    "subtract": _arith("subtract"),
    "multiply": _arith("multiply"),
    "divide": _divide,
    "modulo": _modulo,
    "negate": _negate,
    "div": _div,
    "abs": _abs,
    "round": _round,
    "floor": _floor_ceil("floor"),
    "ceil": _floor_ceil("ceil"),
    "sqrt": _sqrt,
    "power": _power,
    "ln": _ln,
    "exp": _call("exp"),
    "is_nan": _is_nan,
    **{op: (lambda fn: lambda ctx, node, args: fn(*args))(fn) for op, fn in t.COMPARE.items()},
    "is_distinct_from": lambda ctx, node, args: exp.NullSafeNEQ(this=t.paren(args[0]), expression=t.paren(args[1])),
    "is_null": lambda ctx, node, args: t.is_null(args[0]),
    "and": _chain(True),
    "or": _chain(False),
    "not": lambda ctx, node, args: t.not_(args[0]),
    "coalesce": _coalesce,
    "nullif": _nullif,
    "case": _case,
    "in": lambda ctx, node, args: em.in_list(ctx, node, args, ENGINE),
    "between": lambda ctx, node, args: em.between(ctx, node, args, ENGINE),
    "like": _like,
    "trim": _trim("trim"),
    "ltrim": _trim("ltrim"),
    "rtrim": _trim("rtrim"),
    "substring": _substring_checked,
    "length": _length,
    "octet_length": lambda ctx, node, args: t.call("length", _blob(args[0])),
    "concat_op": lambda ctx, node, args: exp.DPipe(this=t.paren(args[0]), expression=t.paren(args[1])),
    "concat": _concat,
    "replace": _replace,
    "position": _position,
    "starts_with": _affix(False),
    "ends_with": _affix(True),
    "cast": _cast,
    "year": _part(1, 4),
    "month": _part(6, 2),
    "day": _part(9, 2),
}

_ONE_RISKY = ("at most one operand may raise an error: SQLite has no way to evaluate an operand without its "
              "error, and the reference lets a decisive operand absorb it")
_CASE_MAPPING = "SQLite's upper/lower map ASCII letters only (upper('ß') is 'ß')"
CAPABILITIES: dict[str, Capability] = {
    "and": Capability("conditional", _ONE_RISKY),
    "or": Capability("conditional", _ONE_RISKY),
    "in": Capability("conditional", "at most one list item may raise an error (as for or)"),
    "between": Capability("conditional", "at most one of the two bounds may raise an error (as for and)"),
    "upper": Capability("not_pushable", _CASE_MAPPING),
    "lower": Capability("not_pushable", _CASE_MAPPING),
    "round": Capability("conditional", "int64: digits a literal; float64: digits absent or the literal 0"),
    "like": Capability("conditional", "with escape: pattern and escape literals (matching uses GLOB); "
                                      "NUL in the text or pattern makes the row an engine-limit row"),
    "cast": Capability("conditional", "every cast except string -> float64 and float64 -> string"),
    "length": Capability("faithful", "NUL in the text makes the row an engine-limit row, never a wrong count"),
    "substring": Capability("faithful", "NUL in the text makes the row an engine-limit row"),
    "replace": Capability("faithful", "NUL in the search text makes the row an engine-limit row"),
    "add": Capability("faithful", "a float64 NaN result is an engine-limit row (SQLite has no NaN)"),
    "subtract": Capability("faithful", "a float64 NaN result is an engine-limit row (SQLite has no NaN)"),
    "multiply": Capability("faithful", "a float64 NaN result is an engine-limit row (SQLite has no NaN)"),
    "divide": Capability("faithful", "a NaN result (inf / inf) is an engine-limit row (SQLite has no NaN)"),
    "modulo": Capability("faithful", "a float64 NaN result is an engine-limit row (SQLite has no NaN)"),
    "is_nan": Capability("faithful", "SQLite holds no NaN: NaN inputs are input losses, NaN results fail"),
}


# ---------------------------------------------------------------------------------- native
def _native_like(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    if len(args) == 3:
        return t.like(args[0], args[1], args[2])
    return exp.Like(this=t.paren(args[0]), expression=t.paren(args[1]))


def _native_cast(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    names = {B: "INTEGER", I: "INTEGER", F: "REAL", S: "TEXT", DATE: "DATE", TS: "TIMESTAMP"}
    return t.cast(args[0], names[node.type.kind], D)


def _native_concat(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    out = args[0]
    for arg in args[1:]:
        out = exp.DPipe(this=t.paren(out), expression=t.paren(arg))
    return out


def _native_prefix(suffix: bool) -> Lowerer:
    def lower(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
        pattern = exp.DPipe(this=t.string("%"), expression=t.paren(args[1])) if suffix else \
            exp.DPipe(this=t.paren(args[1]), expression=t.string("%"))
        return exp.Like(this=t.paren(args[0]), expression=exp.Paren(this=pattern))
    return lower


NATIVE: dict[str, Lowerer] = {
    "add": lambda ctx, node, args: t.add(*args),
    "subtract": lambda ctx, node, args: t.sub(*args),
    "multiply": lambda ctx, node, args: t.mul(*args),
    "divide": lambda ctx, node, args: t.div(*args),
    "modulo": lambda ctx, node, args: t.mod(*args),
    "negate": lambda ctx, node, args: t.neg(args[0]),
    "div": lambda ctx, node, args: t.div(*args),
    "abs": _call("abs"),
    "round": _call("round"),
    "floor": _call("floor"),
    "ceil": _call("ceil"),
    "sqrt": _call("sqrt"),
    "power": _call("power"),
    "ln": _call("ln"),
    "exp": _call("exp"),
    "is_nan": lambda ctx, node, args: t.ne(args[0], args[0]),
    **{op: FAITHFUL[op] for op in t.COMPARE},
    "is_distinct_from": FAITHFUL["is_distinct_from"],
    "is_null": FAITHFUL["is_null"],
    "and": lambda ctx, node, args: t.and_(*args),
    "or": lambda ctx, node, args: t.or_(*args),
    "not": FAITHFUL["not"],
    "coalesce": _coalesce,
    "nullif": _call("nullif"),
    "case": _case,
    "in": lambda ctx, node, args: t.in_list(args[0], args[1:]),
    "between": lambda ctx, node, args: exp.Between(this=t.paren(args[0]), low=t.paren(args[1]), high=t.paren(args[2])),
    "like": _native_like,
    "trim": _call("trim"),
    "ltrim": _call("ltrim"),
    "rtrim": _call("rtrim"),
    "substring": _call("substr"),
    "upper": _call("upper"),
    "lower": _call("lower"),
    "length": _call("length"),
    "octet_length": FAITHFUL["octet_length"],
    "concat_op": FAITHFUL["concat_op"],
    "concat": _native_concat,
    "replace": _call("replace"),
    "position": lambda ctx, node, args: t.call("instr", args[1], args[0]),
    "starts_with": _native_prefix(False),
    "ends_with": _native_prefix(True),
    "cast": _native_cast,
    "year": lambda ctx, node, args: t.cast(t.call("strftime", t.string("%Y"), args[0]), "INTEGER", D),
    "month": lambda ctx, node, args: t.cast(t.call("strftime", t.string("%m"), args[0]), "INTEGER", D),
    "day": lambda ctx, node, args: t.cast(t.call("strftime", t.string("%d"), args[0]), "INTEGER", D),
}

_S = (("s", "string"),)
_X = (("x", "float64"),)
_A = (("a", "int64"),)
DIVERGENCES: tuple[Divergence, ...] = (
    Divergence("like", "s like 'abc'", "LIKE is ASCII case-insensitive: 'ABC' matches 'abc'", _S, (("ABC",),)),
    Divergence("starts_with", "starts_with(s, 'a')", "written as LIKE prefix || '%', it ignores ASCII case", _S,
               (("ABC",),)),
    Divergence("add", "a + 1", "int64 overflow gives a REAL instead of an error", _A, ((INT64_MAX,),)),
    Divergence("divide", "x / 0.0", "division by zero gives NULL instead of an error", _X, ((1.0,),)),
    Divergence("modulo", "x % 2.0", "'%' converts REAL operands to INTEGER (7.5 % 2 is 1.0)", _X, ((7.5,),)),
    Divergence("sqrt", "sqrt(x)", "sqrt of a negative number is NULL instead of an error", _X, ((-1.0,),)),
    Divergence("ln", "ln(x)", "ln(0) is NULL instead of an error", _X, ((0.0,),)),
    Divergence("round", "round(x)", "round adds 0.5 and truncates: round(0.49999999999999994) is 1.0", _X,
               ((0.49999999999999994,),)),
    Divergence("round", "round(x, 2)", "rounding through printf text: round(2.675, 2) is 2.68", _X, ((2.675,),)),
    Divergence("substring", "substring(s, -1)", "a start before 1 counts from the end of the string", _S, (("abc",),)),
    Divergence("upper", "upper(s)", "ASCII-only case mapping: 'ß' stays 'ß'", _S, (("Straße",),)),
    Divergence("length", "length(s)", "length stops at the first NUL", _S, (("a\x00b",),)),
    Divergence("concat", "concat(s, 'x')", "written with ||, a null argument makes the result null", _S, ((None,),)),
    Divergence("cast", "cast(s as int64)", "CAST reads a numeric prefix: 'abc' is 0 and '1e3' is 1", _S,
               (("abc",), ("1e3",))),
    Divergence("cast", "cast(x as int64)", "REAL to INTEGER truncates (2.5 -> 2) and clamps out-of-range values", _X,
               ((2.5,), (1e19,))),
    Divergence("cast", "cast(s = 'a' as string)", "a bool is the integer 1, so it prints as '1', not 'TRUE'", _S,
               (("a",),)),
    Divergence("cast", "cast(s as date)", "SQLite has no DATE type; CAST AS DATE prints as date(), which keeps "
               "'2024-02-30' and makes '2024-5-1' NULL", _S, (("2024-02-30",), ("2024-5-1",))),
    Divergence("cast", "cast(x as string)", "REAL prints with 15 significant digits", _X, ((0.30000000000000004,),)),
)

_PARSER = threading.local()
# What SQLite 3.40 says when a statement is nested deeper than its parser takes.
_PARSER_LIMITS = ("parser stack overflow", "Expression tree is too large")


def parse_problem(text: str) -> str | None:
    """SQLite's parser stack is fixed (100 entries in 3.40.1: as few as 18 nested CASE or 31
    nested calls, depending on the shape), so no nesting depth says what it takes: Python's
    sqlite3, the runners' library, compiles the statement on an empty in-memory database.
    Names are unknown there, so only a parser limit counts."""
    connection = getattr(_PARSER, "connection", None)
    if connection is None:
        connection = _PARSER.connection = sqlite3.connect(":memory:")
    try:
        connection.execute("EXPLAIN " + text)
    except sqlite3.Error as exc:
        message = str(exc)
        return message if any(limit in message for limit in _PARSER_LIMITS) else None
    return None


PROFILE = DialectProfile(
    name="sqlite",
    sqlglot_dialect=D,
    session_settings=(
        "create_function('rexpr_raise', 1, f, deterministic=False): f raises, handing its tag to the runner",
        "math functions present (sqrt, ln, exp, pow, floor, ceil, trunc, mod; SQLite 3.35+ built with them)",
        "tables as the runner lays them out: INTEGER, REAL, TEXT; bool 0/1; dates and timestamps as ISO text",
        "no COLLATE clauses and no case_sensitive_like pragma needed: text compares with BINARY, LIKE is GLOB",
    ),
    faithful=FAITHFUL,
    native=NATIVE,
    capabilities=CAPABILITIES,
    literal=literal,
    notes=(
        "Errors are raised by rexpr_raise('rexpr:<class>'); engine limits by rexpr_raise('rexpr-limit:nan') and "
        "rexpr_raise('rexpr-limit:nul'), which are not error classes: such rows are engine-limit rows.",
        "A NaN literal is refused: SQLite has no NaN.",
        "NUL (U+0000) in a string literal is written as char(0).",
    ),
    quoting=QUOTING,
    divergences=DIVERGENCES,
    parse_problem=parse_problem,
)
