"""PostgreSQL dialect (sqlglot dialect "postgres"), written against PostgreSQL 15.

What the faithful lowering works around, each measured on the server (PostgreSQL 15.20,
database encoding UTF8, libc locale C.UTF-8, ICU 72):

* float8 NaN: ``NaN = NaN`` is true and NaN sorts above +inf, so ``NaN > x`` is true. The
  reference says every comparison with NaN is false except ``<>``. Comparisons, ``in``,
  ``between`` and ``nullif`` are rewritten; ``is distinct from`` already matches (NaN is not
  distinct from NaN, -0.0 not from 0.0). Guards that compare floats test finiteness first,
  because ``NaN >= 1`` is true here.
* float8 range errors: ``1e308 * 10``, ``1e-300 * 1e-300``, ``exp(-1000)``, ``power(10, 400)``
  and ``'1e-400'::float8`` raise 22003 where IEEE 754 gives ±inf or ±0 (see _pg_numbers).
  ``NaN / 0`` is NaN, but the catalogue makes every zero divisor an error. There is no
  float8 ``%``.
* Rounding: ``round(float8)`` and ``float8::bigint`` round half to even (2.5 -> 2); the
  catalogue rounds half away from zero on the exact binary value (round(2.675, 2) = 2.67).
  ``float8::numeric`` keeps 15 digits, so exact values come from ``float8send`` bits.
* Text: comparisons use ``COLLATE "C"`` (code point order whatever the database collation).
  ``upper``/``lower`` under libc C.UTF-8 are simple mappings (``upper('ß') = 'ß'``,
  ``lower('ΣΑΣ') = 'σασ'``); under the ICU root collation ``"und-x-icu"`` they are the full
  Unicode mappings with final sigma, identical to Python's for every code point assigned
  in Python's Unicode 14 (checked exhaustively by the tests).
* ``LIKE`` escapes with backslash by default; ``ESCAPE ''`` turns escaping off. An escape
  before an ordinary character is accepted silently (``'ab' LIKE '\\ab'`` is true), so the
  catalogue's invalid-escape error is checked before matching. An escape that is a row value
  goes through ``like_escape(pattern, escape)``, which is what ``ESCAPE <expression>`` means.
* A COLLATE clause makes a result's collation explicit, and two different explicit
  collations in one operation are an error (42P21), and so are two different implicit ones;
  the results of upper/lower (ICU) are collated "C" in a scalar subquery, whose output is
  implicit "C" like every column.
* ``'\\t12\\n'::bigint`` is 12 (whitespace is trimmed), ``'-nan'::float8`` is NaN; the cast
  table trims U+0020 only, so strings are validated with regular expressions first.
* float8 text output (extra_float_digits >= 1) is the shortest round-trip digits, but
  formatted ``1e+15`` and ``1`` where Python's repr gives ``1000000000000000.0`` and ``1.0``.
* ``substr`` takes int4 positions; ``extract`` returns numeric; small integer literals are
  int4 (``2147483647 + 1`` overflows int4), so every integer literal is cast to BIGINT.
* Planning constant-folds immutable subexpressions, even in CASE branches no row takes
  (``CASE WHEN x > 0 THEN 1/0 END`` fails while planning). The raise construct therefore
  contains ``random()``, which is volatile and never folded, and constant subtrees are
  lowered to their value, computed by the reference (or to the raise construct).
* Planning also replaces a strict function with a NULL constant argument by NULL, without
  evaluating the other arguments (``NULL::bigint >= abs(i)`` never raises). A call that is
  null on every row while an argument can raise is lowered as "null once every argument ran"
  (``GREATEST`` of their null tests).

Errors are raised as ``CAST('rexpr:<class>;' || left(random()::text, 0) AS <type>)``: the
message is ``invalid input syntax for type ...: "rexpr:<class>;"``, which the runner reads
before the SQLSTATE. Values that are used more than once are bound once with a correlated
scalar subquery over ``(SELECT ... OFFSET 0)`` (the OFFSET keeps the planner from inlining
it back), so guarded SQL grows linearly with the expression.
"""

from __future__ import annotations

import datetime as dt
import math
import sys
from typing import Callable

from sqlglot import exp

from rexpr.catalogue.model import ErrorClass
from rexpr.errors import NotPushable
from rexpr.language.datetime_text import format_date, format_timestamp
from rexpr.reference.functions import like_regex
from rexpr.sql.dialects import _logic, _null_operands as nn, _numeral_text as nt, _pg_numbers as num, _trees as t
from rexpr.sql.dialects._planner_constants import planner_value
from rexpr.sql.profile import Capability, DialectProfile, Divergence, LowerContext, Lowerer
from rexpr.typed import TCall, TLiteral, Typed
from rexpr.types import DataType, Kind
from rexpr.values import RowError

D = "postgres"
Tree = t.Tree
B, I, F, S, DATE, TS = Kind.BOOL, Kind.INT64, Kind.FLOAT64, Kind.STRING, Kind.DATE, Kind.TIMESTAMP

TYPES = {B: "BOOLEAN", I: "BIGINT", F: "DOUBLE PRECISION", S: "TEXT", DATE: "DATE", TS: "TIMESTAMP",
         Kind.NULL: "TEXT"}
CODE_POINT = exp.Identifier(this="C", quoted=True)        # byte order of UTF-8 = code point order
UNICODE_CASE = exp.Identifier(this="und-x-icu", quoted=True)  # ICU root: full case mapping
INT4_MAX = 2**31 - 1


def sql_type(kind: Kind) -> str:
    return TYPES[kind]


def typed_null(kind: Kind) -> Tree:
    return t.cast(t.null(), sql_type(kind), D)


# ---------------------------------------------------------------------------------- raising
def raise_(error: ErrorClass, kind: Kind) -> Tree:
    """A value of ``kind`` whose evaluation raises with the tag ``rexpr:<class>``."""
    text = t.call("concat", t.string(f"rexpr:{error.value};"),
                  t.call("left", t.cast(t.call("random"), "TEXT", D), t.number(0)))
    if kind in (S, Kind.NULL):
        return t.cast(t.cast(text, "BIGINT", D), "TEXT", D)
    return t.cast(text, sql_type(kind), D)


# ---------------------------------------------------------------------------------- binding
def bind(values: list[Tree], body: Callable[[list[Tree]], Tree], kinds: object = None) -> Tree:
    """``body`` over the values, each evaluated once (a correlated scalar subquery; the
    values keep their own types, so ``kinds`` is not needed here)."""
    if all(t.is_simple(v) for v in values):
        return body(values)
    alias = t.scope_alias()
    refs: list[Tree] = []
    columns: list[Tree] = []
    for i, value in enumerate(values):
        if t.is_simple(value):
            refs.append(value)
            continue
        name = f"v{i}"
        columns.append(exp.Alias(this=value, alias=exp.to_identifier(name)))
        refs.append(exp.column(name, table=alias))
    # built with copy=False throughout: the builders copy their arguments by default, which
    # makes nested scopes quadratic
    inner = exp.Select(expressions=columns).offset(0, copy=False)
    source = exp.Subquery(this=inner, alias=exp.TableAlias(this=exp.to_identifier(alias)))
    return exp.Subquery(this=exp.Select(expressions=[t.in_scope(body, refs)]).from_(source, copy=False))


def bound(body: Callable[..., Tree]) -> Callable[[LowerContext, TCall, list[Tree]], Tree]:
    """A lowerer whose body sees every argument bound once."""
    return lambda ctx, node, args: bind(args, lambda refs: body(node, *refs))


# ---------------------------------------------------------------------------------- literals
def literal(value: object, data_type: DataType) -> Tree:
    kind = data_type.kind
    if value is None:
        return t.null() if kind is Kind.NULL else typed_null(kind)
    if kind is B:
        return t.boolean(bool(value))
    if kind is I:
        return num.i8(int(value))  # type: ignore[arg-type]  # int4 literals overflow at 2^31
    if kind is F:
        return num.f8(float(value))  # type: ignore[arg-type]
    if kind is S:
        text = str(value)
        if "\x00" in text:
            raise NotPushable("PostgreSQL text cannot contain U+0000 (NUL)")
        return t.cast(t.string(text), "TEXT", D)
    if kind is DATE:
        return t.cast(t.string(format_date(value)), "DATE", D)  # type: ignore[arg-type]
    if kind is TS:
        assert isinstance(value, dt.datetime)
        return t.cast(t.string(format_timestamp(value)), "TIMESTAMP", D)
    raise NotPushable(f"no PostgreSQL literal for {data_type.name}")


# ---------------------------------------------------------------------------------- comparison
def compare(op: str, kind: Kind, a: Tree, b: Tree) -> Tree:
    """A faithful comparison of two cheap-to-repeat values."""
    plain = t.COMPARE[op]
    if kind is S:
        return plain(t.collate(a, CODE_POINT), b)
    if kind is not F:
        return plain(a, b)
    # PostgreSQL orders NaN as the greatest value and equal to itself; undo exactly the cases
    # where that differs from IEEE 754, keeping null wherever either side is null.
    nan_a, nan_b = num.is_nan(a), num.is_nan(b)
    if op == "ne":
        return t.or_(t.ne(a, b), t.and_(nan_a, nan_b))
    # op is false when the side NaN would wrongly win is NaN (and the other is not null)
    side, other = {"eq": (a, b), "lt": (b, a), "le": (b, a), "gt": (a, b), "ge": (a, b)}[op]
    return t.and_(plain(a, b), t.or_(t.not_(num.is_nan(side)), t.is_null(other)))


def _compare_lowerer(op: str) -> Lowerer:
    def lower(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
        kind = node.args[0].type.kind
        if kind is F:  # the NaN correction repeats both operands
            return bind(args, lambda r: compare(op, kind, r[0], r[1]))
        return compare(op, kind, args[0], args[1])
    return lower


# ---------------------------------------------------------------------------------- may raise
_RAISING_CASTS = {(S, I), (S, F), (S, B), (S, DATE), (S, TS), (F, I)}


def _literal(node: Typed) -> object:
    return node.value if isinstance(node, TLiteral) else None


def _nonzero_literal(node: Typed) -> bool:
    value = _literal(node)
    return isinstance(value, (int, float)) and not isinstance(value, bool) and value == value and value != 0


def call_may_raise(node: TCall) -> bool:
    """Whether the faithful lowering of this call (children aside) can raise for some row."""
    f, args, kind = node.function, node.args, node.type.kind
    if f in ("add", "subtract", "multiply", "negate", "abs"):
        return kind is I
    if f in ("divide", "modulo"):
        return not _nonzero_literal(args[1])
    if f == "div":
        return not (_nonzero_literal(args[1]) and _literal(args[1]) != -1)
    if f == "round":
        digits = _literal(args[1]) if len(args) == 2 else 0
        return kind is I and not (isinstance(digits, int) and digits >= 0)
    if f in ("sqrt", "ln", "power"):
        return True
    if f == "like":
        return len(args) == 3 and _static_like_error(node) is not False
    if f == "substring":
        length = _literal(args[2]) if len(args) == 3 else 0
        return not (isinstance(length, int) and length >= 0)
    if f == "cast":
        return (args[0].type.kind, kind) in _RAISING_CASTS
    return False


SQL = _logic.ServerSql(D, raise_, bind, compare, call_may_raise)


# ---------------------------------------------------------------------------------- arithmetic
def _arith(int_op: Callable[[Tree, Tree], Tree], float_op: Callable[[Tree, Tree], Tree]) -> Lowerer:
    def lower(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
        if node.type.kind is I:
            return int_op(args[0], args[1])  # bigint operators raise 22003 on overflow
        return bind(args, lambda r: float_op(r[0], r[1]))
    return lower


def _divide(node: TCall, a: Tree, b: Tree) -> Tree:
    if _nonzero_literal(node.args[1]):
        return num.divide_nonzero(a, b, bind)
    return t.case((t.or_(t.is_null(a), t.is_null(b)), typed_null(F)),
                  (t.eq(b, num.f8(0.0)), raise_(ErrorClass.DIVISION_BY_ZERO, F)),
                  default=num.divide_nonzero(a, b, bind))


def _modulo(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    if node.type.kind is I:
        return t.mod(args[0], args[1])  # sign of the dividend; 22012 on zero
    return bind(args, lambda r: num.fmod(r[0], r[1], raise_(ErrorClass.DIVISION_BY_ZERO, F), bind))


def _round(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    digits = node.args[1] if len(node.args) == 2 else None
    if node.type.kind is I:
        if digits is None:
            return args[0]

        def int_body(x: Tree, d: Tree) -> Tree:
            # numeric round is half away from zero; the cast back raises 22003 when it no
            # longer fits; from 10^20 up every int64 rounds to 0.
            rounded = t.call("round", t.cast(x, "NUMERIC", D), t.cast(d, "INTEGER", D))
            return t.case((t.or_(t.is_null(x), t.is_null(d)), typed_null(I)),
                          (t.ge(d, t.number(0)), x),
                          (t.lt(d, t.number(-19)), num.i8(0)),
                          default=t.cast(rounded, "BIGINT", D))
        return bind(args, lambda r: int_body(*r))
    if digits is None or (isinstance(digits, TLiteral) and digits.value == 0):
        return bind(args[:1], lambda r: num.round_integral(r[0]))
    return bind(args, lambda r: t.case((t.or_(t.is_null(r[0]), t.is_null(r[1])), typed_null(F)),
                                       default=num.round_digits(r[0], r[1], bind)))


def _same_kind_identity(fn: str) -> Lowerer:
    return lambda ctx, node, args: args[0] if node.type.kind is I else t.call(fn, args[0])


# ---------------------------------------------------------------------------------- strings
def _trim(fn: str) -> Lowerer:
    return lambda ctx, node, args: t.call(fn, args[0], args[1] if len(args) > 1 else t.string(" "))


def _int4(value: Tree) -> Tree:
    """A non-negative bigint clamped into int4 (a string is shorter than 2^30 characters)."""
    return t.cast(t.case((t.gt(value, t.number(INT4_MAX)), t.number(INT4_MAX)), default=value), "INTEGER", D)


def _substring(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    if len(args) == 2:
        def from_start(s: Tree, start: Tree) -> Tree:
            begin = t.case((t.lt(start, t.number(1)), t.number(1)), default=start)
            return t.call("substr", s, _int4(begin))
        return bind(args, lambda r: from_start(*r))

    def body(s: Tree, start: Tree, length: Tree) -> Tree:
        # ISO/IEC 9075-2 6.30: characters at positions [start, start + length), positions
        # before 1 existing but empty. length + start cannot overflow once start < 1.
        return t.case(
            (t.or_(t.is_null(s), t.is_null(start), t.is_null(length)), typed_null(S)),
            (t.lt(length, t.number(0)), raise_(ErrorClass.INVALID_ARGUMENT, S)),
            (t.ge(start, t.number(1)), t.call("substr", s, _int4(start), _int4(length))),
            (t.le(t.add(length, start), t.number(1)), t.cast(t.string(""), "TEXT", D)),
            default=t.call("substr", s, t.number(1), _int4(t.sub(t.add(length, start), t.number(1)))))
    return bind(args, lambda r: body(*r))


def _case_mapped(fn: str, s: Tree) -> Tree:
    """upper/lower under the ICU root collation, returned as text of the columns' collation.

    The COLLATE clause makes the result's collation explicit, and PostgreSQL refuses to
    combine it with another explicit one (42P21); a scalar subquery's output is implicit
    again, but an implicit ICU collation beside an implicit "C" column is refused too ("could
    not determine which collation to use", generated seed 11: ``starts_with(upper(t), t)``).
    So the mapped text is collated "C" inside the subquery, like every column."""
    mapped = t.collate(t.call(fn, t.collate(s, UNICODE_CASE)), CODE_POINT)
    return exp.Subquery(this=exp.Select(expressions=[mapped]))


def _ends_with(node: TCall, s: Tree, suffix: Tree) -> Tree:
    return t.eq(t.collate(t.call("right", s, t.call("char_length", suffix)), CODE_POINT), suffix)


# ---------------------------------------------------------------------------------- like
def _static_like_error(node: TCall) -> bool | None:
    """For a literal pattern and escape: whether the reference raises (None: not literal)."""
    if len(node.args) < 3:
        return False
    pattern, escape = node.args[1], node.args[2]
    if not (isinstance(pattern, TLiteral) and isinstance(escape, TLiteral)):
        return None
    if pattern.value is None or escape.value is None:
        return False
    return isinstance(like_regex(pattern.value, escape.value), RowError)  # type: ignore[arg-type]


def _like(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    if len(args) == 2:
        return t.like(args[0], args[1], t.string(""))  # ESCAPE '': no escape character at all
    static = _static_like_error(node)
    if static is True:
        return bind(args[:1], lambda r: t.case((t.is_null(r[0]), typed_null(B)),
                                               default=raise_(ErrorClass.INVALID_ESCAPE, B)))
    if static is False:
        return t.like(*args)

    def body(s: Tree, p: Tree, e: Tree) -> Tree:
        # Drop escaped pairs left to right (ee first: a run of k escapes leaves k mod 2); any
        # escape left over precedes an ordinary character or ends the pattern: an error.
        rest = t.call("replace", p, t.call("concat", e, e), t.string(""))
        rest = t.call("replace", rest, t.call("concat", e, t.string("%")), t.string(""))
        rest = t.call("replace", rest, t.call("concat", e, t.string("_")), t.string(""))
        invalid = t.or_(t.ne(t.call("char_length", e), t.number(1)), t.gt(t.call("strpos", rest, e), t.number(0)))
        # like_escape rewrites the pattern to backslash escapes, LIKE's default (this is
        # what ESCAPE <expression> means; written as a call, the SQL also reads back)
        matched = exp.Like(this=t.paren(s), expression=t.call("like_escape", p, e))
        return t.case((t.or_(t.is_null(s), t.is_null(p), t.is_null(e)), typed_null(B)),
                      (invalid, raise_(ErrorClass.INVALID_ESCAPE, B)),
                      default=matched)
    return bind(args, lambda r: body(*r))


# ---------------------------------------------------------------------------------- text ops
def _substr(s: Tree, start: Tree, length: Tree | None) -> Tree:
    parts = [s, t.cast(start, "INTEGER", D)] + ([t.cast(length, "INTEGER", D)] if length is not None else [])
    return t.call("substr", *parts)


OPS = nt.TextOps(
    length=lambda s: t.call("char_length", s),
    substr=_substr,
    find=lambda s, lit: t.call("strpos", s, t.string(lit)),
    concat=lambda *parts: t.call("concat", *parts),
    strip_left=lambda s, ch: t.call("ltrim", s, t.string(ch)),
    strip_right=lambda s, ch: t.call("rtrim", s, t.string(ch)),
    repeat=lambda s, n: t.call("repeat", s, t.cast(n, "INTEGER", D)),
    big_int=lambda s: t.cast(s, "NUMERIC", D),
    int_text=lambda n: t.cast(n, "TEXT", D),
    text_compare=lambda op, a, b: t.COMPARE[op](t.collate(a, CODE_POINT), b),
    bind=bind,
)


def _matches(s: Tree, regex: str) -> Tree:
    return exp.RegexpLike(this=t.paren(s), expression=t.string(regex))  # s ~ 'regex'


def _spaces_trimmed(s: Tree) -> Tree:
    return t.call("btrim", s, t.string(" "))  # the cast table strips U+0020 only


# ---------------------------------------------------------------------------------- casts
_INT_TEXT = r"^[+-]?[0-9]+$"
_FLOAT_TEXT = (r"^[+-]?(([0-9]+(\.[0-9]*)?|\.[0-9]+)([eE][+-]?[0-9]+)?|[iI][nN][fF]([iI][nN][iI][tT][yY])?"
               r"|[nN][aA][nN])$")
_DATE_TEXT = r"^[0-9]{4}-[0-9]{2}-[0-9]{2}$"
_TIMESTAMP_TEXT = r"^[0-9]{4}-[0-9]{2}-[0-9]{2}([ Tt][0-9]{2}:[0-9]{2}:[0-9]{2}(\.[0-9]{1,6})?)?$"


def _valid_date(y: Tree, m: Tree, d: Tree) -> Tree:
    """Proleptic Gregorian validity of year/month/day integers (years 1-9999)."""
    leap = t.or_(t.and_(t.eq(t.mod(y, t.number(4)), t.number(0)), t.ne(t.mod(y, t.number(100)), t.number(0))),
                 t.eq(t.mod(y, t.number(400)), t.number(0)))
    days = t.case((t.in_list(m, [t.number(4), t.number(6), t.number(9), t.number(11)]), t.number(30)),
                  (t.eq(m, t.number(2)), t.case((leap, t.number(29)), default=t.number(28))),
                  default=t.number(31))
    return t.and_(t.ge(y, t.number(1)), t.ge(m, t.number(1)), t.le(m, t.number(12)),
                  t.ge(d, t.number(1)), t.le(d, days))


def _field(s: Tree, start: int, length: int) -> Tree:
    return t.cast(t.call("substr", s, t.number(start), t.number(length)), "INTEGER", D)


def _string_to_date(b: Tree, target: Kind) -> Tree:
    bad = raise_(ErrorClass.INVALID_DATETIME, target)
    has_time = t.gt(t.call("char_length", b), t.number(10))

    def check(refs: list[Tree]) -> Tree:
        y, m, d, h, mi, sec = refs
        ok = _valid_date(y, m, d)
        if target is TS:
            ok = t.and_(ok, t.le(h, t.number(23)), t.le(mi, t.number(59)), t.le(sec, t.number(59)))
            text = t.case((has_time, t.call("concat", t.call("substr", b, t.number(1), t.number(10)), t.string(" "),
                                              t.call("substr", b, t.number(12)))), default=b)
        else:
            text = b
        return t.case((ok, t.cast(text, sql_type(target), D)), default=bad)

    time = [t.case((has_time, _field(b, start, 2)), default=t.number(0)) for start in (12, 15, 18)]
    fields = [_field(b, 1, 4), _field(b, 6, 2), _field(b, 9, 2)] + time
    regex = _DATE_TEXT if target is DATE else _TIMESTAMP_TEXT
    return t.case((t.is_null(b), typed_null(target)),
                  (t.not_(_matches(b, regex)), bad),
                  default=bind(fields, check))


def _string_to_float(b: Tree) -> Tree:
    def numeral(refs: list[Tree]) -> Tree:
        [lowered] = refs
        unsigned = t.call("regexp_replace", lowered, t.string("^[+-]"), t.string(""))
        negative = _matches(lowered, "^-")
        zero = num.signed(negative, 0.0)
        # float8in raises 22003 for a numeral that rounds to zero; IEEE 754 gives zero
        return nt.numeral_parts(OPS, unsigned, lambda sig, p: t.case(
            (nt.underflows(OPS, sig, p), zero), default=t.cast(lowered, "DOUBLE PRECISION", D)))

    return t.case(
        (t.is_null(b), typed_null(F)),
        (t.not_(_matches(b, _FLOAT_TEXT)), raise_(ErrorClass.INVALID_CAST, F)),
        (_matches(b, "[aA]"), num.f8(math.nan)),
        (_matches(b, "[iI]"), num.signed(_matches(b, "^-"), math.inf)),
        default=bind([t.call("lower", t.collate(b, CODE_POINT))], numeral))  # overflow: float8in's 22003


def _shortest(x: Tree, unsigned: Tree) -> Tree:
    """The shortest numeral that reads back as |x|, from float8out's ``unsigned`` text.

    float8out (Ryu) gives the shortest digits except where the shortest numeral lies exactly on
    the edge of x's rounding interval, which Python's repr counts as inside for an even
    significand: 2.111966241167932e+17 prints as 2.1119662411679322e+17 (generated seed 12, case
    2065). An edge is a short numeral only from 2^53 up, where every float8 is an integer and
    the edges are integers too; there the fewest digits k whose rounding of the printed value
    reads back as x are taken (rounding to k digits is the nearest k-digit numeral, so it is in
    the interval whenever any k-digit numeral is)."""
    def candidates(r: list[Tree]) -> Tree:
        value, first = r  # the printed value as NUMERIC, the exponent of its first digit
        branches = []
        for k in range(1, 17):
            rounded = t.call("round", value, t.cast(t.sub(t.number(k - 1), first), "INT", D))
            # Above the largest float8 the cast would fail; no candidate there reads back (a
            # CASE, because AND may evaluate its operands in either order).
            reads_back = t.case((t.gt(rounded, num.numeric(int(sys.float_info.max))), t.boolean(False)),
                                default=t.eq(t.cast(rounded, "DOUBLE PRECISION", D), num.fabs(x)))
            branches.append((reads_back, t.cast(rounded, "TEXT", D)))
        return t.case(*branches, default=unsigned)

    def exponent(r: list[Tree]) -> Tree:
        digits = t.call("char_length", t.cast(t.call("trunc", r[0]), "TEXT", D))
        return bind([r[0], t.sub(digits, t.number(1))], candidates)

    return t.case((t.ge(num.fabs(x), num.f8(2.0 ** 53)), bind([t.cast(unsigned, "NUMERIC", D)], exponent)),
                  default=unsigned)


def _float_to_string(x: Tree, text: Tree) -> Tree:
    negative = _matches(text, "^-")
    unsigned = t.case((negative, t.call("substr", text, t.number(2))), default=text)
    return t.case((t.is_null(text), typed_null(S)),
                  (t.in_list(text, [t.string("NaN"), t.string("Infinity"), t.string("-Infinity")]), text),
                  default=nt.numeral_parts(OPS, _shortest(x, unsigned),
                                           lambda sig, p: nt.python_repr(OPS, negative, sig, p)))


def _timestamp_to_string(ts: Tree) -> Tree:
    micros = t.call("to_char", ts, t.string("US"))
    fraction = t.case((t.eq(micros, t.string("000000")), t.string("")),
                      default=t.call("concat", t.string("."), t.call("rtrim", micros, t.string("0"))))
    return t.case((t.is_null(ts), typed_null(S)),
                  default=t.call("concat", t.call("to_char", ts, t.string("YYYY-MM-DD HH24:MI:SS")), fraction))


def _cast(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    source, target = node.args[0].type.kind, node.type.kind
    x = args[0]
    if source is target:
        return x
    pair = (source, target)
    if pair == (I, F):
        return t.cast(x, "DOUBLE PRECISION", D)
    if pair == (F, I):
        return bind([x], lambda r: num.to_int64(r[0], raise_(ErrorClass.OUT_OF_RANGE, I)))
    if pair == (B, I):
        return t.cast(t.cast(x, "INTEGER", D), "BIGINT", D)
    if pair == (I, B):
        return t.ne(x, num.i8(0))
    if pair == (S, I):
        return bind([_spaces_trimmed(x)], lambda r: t.case(
            (t.is_null(r[0]), typed_null(I)),
            (_matches(r[0], _INT_TEXT), t.cast(r[0], "BIGINT", D)),  # out of range: int8in's 22003
            default=raise_(ErrorClass.INVALID_CAST, I)))
    if pair == (S, F):
        return bind([_spaces_trimmed(x)], lambda r: _string_to_float(r[0]))
    if pair == (S, B):
        # lower() under COLLATE "C" maps ASCII only, which is all 'true'/'false' can be
        return bind([t.call("lower", t.collate(_spaces_trimmed(x), CODE_POINT))], lambda r: t.case(
            (t.is_null(r[0]), typed_null(B)),
            (t.eq(r[0], t.string("true")), t.boolean(True)),
            (t.eq(r[0], t.string("false")), t.boolean(False)),
            default=raise_(ErrorClass.INVALID_CAST, B)))
    if pair in ((S, DATE), (S, TS)):
        return bind([_spaces_trimmed(x)], lambda r: _string_to_date(r[0], target))
    if pair == (I, S):
        return t.cast(x, "TEXT", D)
    if pair == (F, S):
        return bind([x, t.cast(x, "TEXT", D)], lambda r: _float_to_string(r[0], r[1]))
    if pair == (B, S):
        return bind([x], lambda r: t.case((r[0], t.string("TRUE")), (t.not_(r[0]), t.string("FALSE")),
                                          default=typed_null(S)))
    if pair == (DATE, S):
        return t.call("to_char", x, t.string("YYYY-MM-DD"))
    if pair == (TS, S):
        return bind([x], lambda r: _timestamp_to_string(r[0]))
    if pair == (DATE, TS):
        return t.cast(x, "TIMESTAMP", D)
    if pair == (TS, DATE):
        return t.cast(x, "DATE", D)
    ctx.refuse(node, f"no cast from {source.value} to {target.value}")
    raise AssertionError("unreachable")


def _extract(field: str) -> Lowerer:
    return lambda ctx, node, args: t.cast(exp.Extract(this=exp.Var(this=field), expression=args[0]), "BIGINT", D)


# ---------------------------------------------------------------------------------- tables
def _guarded(lowerer: Lowerer) -> Lowerer:
    """A constant subtree becomes its value, or the raise construct when the reference says
    it raises: planning-time folding then has nothing left that could fail.

    A call that is null on every row while an argument can raise becomes "null once every
    argument ran": the planner replaces a strict function with a NULL constant argument by
    NULL without evaluating the others (``NULL::bigint >= abs(i)`` plans as NULL), which
    would lose the error the reference gives (see _null_operands). GREATEST evaluates each
    argument, in order, and is not folded."""
    def lower(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
        constant, value = planner_value(node)
        if constant:
            if isinstance(value, RowError):
                return raise_(value.error, node.type.kind)
            return literal(value, node.type)
        if (len(args) > 1 and node.function not in nn.LAZY and any(_logic.may_raise(a, SQL) for a in node.args)
                and nn.always_null(node)):
            null = typed_null(node.type.kind)
            return t.case((t.call("greatest", *[t.is_null(a) for a in args]), null), default=null)
        return lowerer(ctx, node, args)
    return lower


def _case(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    pairs = [(args[i], args[i + 1]) for i in range(0, len(args) - 1, 2)]
    return t.case(*pairs, default=args[-1])


def _nullif(node: TCall, a: Tree, b: Tree) -> Tree:
    return t.case((compare("eq", node.args[0].type.kind, a, b), typed_null(node.type.kind)), default=a)


def _call(fn: str, cast_to: str | None = None) -> Lowerer:
    def lower(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
        out = t.call(fn, *args)
        return t.cast(out, cast_to, D) if cast_to else out
    return lower


_FAITHFUL: dict[str, Lowerer] = {
    "add": _arith(t.add, lambda a, b: num.add(a, b, bind)),
    "subtract": _arith(t.sub, lambda a, b: num.add(a, t.neg(b), bind)),
    "multiply": _arith(t.mul, lambda a, b: num.multiply(a, b, bind)),
    "divide": bound(_divide),
    "modulo": _modulo,
    "negate": lambda ctx, node, args: t.neg(args[0]),
    "div": lambda ctx, node, args: t.div(args[0], args[1]),  # bigint / bigint truncates; 22012, 22003
    "abs": _call("abs"),
    "round": _round,
    "floor": _same_kind_identity("floor"),
    "ceil": _same_kind_identity("ceil"),
    "sqrt": _call("sqrt"),  # 2201F below zero; sqrt(-0.0) = -0.0
    "power": bound(lambda node, x, y: num.power(x, y, raise_(ErrorClass.INVALID_ARGUMENT, F), bind)),
    "ln": _call("ln"),  # 2201E for zero and below; ln(NaN) = NaN
    "exp": bound(lambda node, x: num.exp(x)),
    "is_nan": lambda ctx, node, args: num.is_nan(args[0]),
    **{op: _compare_lowerer(op) for op in t.COMPARE},
    "is_distinct_from": lambda ctx, node, args: exp.NullSafeNEQ(this=t.paren(args[0]), expression=t.paren(args[1])),
    "is_null": lambda ctx, node, args: t.is_null(args[0]),
    "and": lambda ctx, node, args: _logic.chain(ctx, node, args, SQL, conjunction=True),
    "or": lambda ctx, node, args: _logic.chain(ctx, node, args, SQL, conjunction=False),
    "not": lambda ctx, node, args: t.not_(args[0]),
    "coalesce": _call("coalesce"),
    "nullif": bound(_nullif),
    "case": _case,
    "in": lambda ctx, node, args: _logic.in_list(ctx, node, args, SQL),
    "between": lambda ctx, node, args: _logic.between(ctx, node, args, SQL),
    "like": _like,
    "trim": _trim("btrim"),
    "ltrim": _trim("ltrim"),
    "rtrim": _trim("rtrim"),
    "substring": _substring,
    "upper": lambda ctx, node, args: _case_mapped("upper", args[0]),
    "lower": lambda ctx, node, args: _case_mapped("lower", args[0]),
    "length": _call("char_length", "BIGINT"),
    "octet_length": _call("octet_length", "BIGINT"),
    "concat_op": lambda ctx, node, args: exp.DPipe(this=t.paren(args[0]), expression=t.paren(args[1])),
    "concat": _call("concat"),
    "replace": _call("replace"),
    "position": lambda ctx, node, args: t.cast(t.call("strpos", args[1], args[0]), "BIGINT", D),
    "starts_with": _call("starts_with"),
    "ends_with": bound(_ends_with),
    "cast": _cast,
    "year": _extract("YEAR"),
    "month": _extract("MONTH"),
    "day": _extract("DAY"),
}
FAITHFUL: dict[str, Lowerer] = {fid: _guarded(lowerer) for fid, lowerer in _FAITHFUL.items()}


# The plain mapping a person would write; docs/engines.md lists where it differs.
def _native_cast(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    if node.args[0].type.kind is node.type.kind:
        return args[0]
    return t.cast(args[0], sql_type(node.type.kind), D)


def _native_binary(kind: type[exp.Binary]) -> Lowerer:
    return lambda ctx, node, args: kind(this=t.paren(args[0]), expression=t.paren(args[1]))


NATIVE: dict[str, Lowerer] = {
    "add": _native_binary(exp.Add), "subtract": _native_binary(exp.Sub), "multiply": _native_binary(exp.Mul),
    "divide": lambda ctx, node, args: t.div(args[0], args[1]),
    "modulo": _native_binary(exp.Mod),
    "negate": lambda ctx, node, args: t.neg(args[0]),
    "div": lambda ctx, node, args: t.call("div", args[0], args[1]),
    "abs": _call("abs"), "round": _call("round"), "floor": _call("floor"), "ceil": _call("ceil"),
    "sqrt": _call("sqrt"), "power": _call("power"), "ln": _call("ln"), "exp": _call("exp"),
    "is_nan": lambda ctx, node, args: t.eq(args[0], num.f8(math.nan)),
    **{op: (lambda fn: lambda ctx, node, args: fn(args[0], args[1]))(fn) for op, fn in t.COMPARE.items()},
    "is_distinct_from": FAITHFUL["is_distinct_from"],
    "is_null": FAITHFUL["is_null"],
    "and": lambda ctx, node, args: t.and_(*args),
    "or": lambda ctx, node, args: t.or_(*args),
    "not": FAITHFUL["not"],
    "coalesce": _call("coalesce"),
    "nullif": _call("nullif"),
    "case": _case,
    "in": lambda ctx, node, args: t.in_list(args[0], args[1:]),
    "between": lambda ctx, node, args: exp.Between(this=t.paren(args[0]), low=t.paren(args[1]), high=t.paren(args[2])),
    "like": lambda ctx, node, args: (t.like(*args) if len(args) == 3
                                     else exp.Like(this=t.paren(args[0]), expression=t.paren(args[1]))),
    "trim": lambda ctx, node, args: t.call("btrim", *args) if len(args) == 2 else t.call("trim", args[0]),
    "ltrim": _call("ltrim"), "rtrim": _call("rtrim"),
    "substring": _call("substr"),
    "upper": _call("upper"), "lower": _call("lower"),
    "length": _call("length"), "octet_length": _call("octet_length"),
    "concat_op": FAITHFUL["concat_op"], "concat": _call("concat"), "replace": _call("replace"),
    "position": lambda ctx, node, args: t.call("strpos", args[1], args[0]),
    "starts_with": _call("starts_with"),
    "ends_with": lambda ctx, node, args: t.eq(t.call("right", args[0], t.call("length", args[1])), args[1]),
    "cast": _native_cast,
    "year": _extract("YEAR"), "month": _extract("MONTH"), "day": _extract("DAY"),
}


_CONDITIONAL = {
    "and": "faithful when at most one operand can raise an error",
    "or": "faithful when at most one operand can raise an error",
    "in": "faithful when at most one list item can raise an error",
    "between": "faithful unless both bounds can raise an error",
    "upper": "needs the ICU collation \"und-x-icu\" (PostgreSQL built with ICU); characters "
             "assigned after Python's Unicode version may map differently",
    "lower": "needs the ICU collation \"und-x-icu\" (PostgreSQL built with ICU); characters "
             "assigned after Python's Unicode version may map differently",
}

CAPABILITIES: dict[str, Capability] = {
    fid: Capability("conditional", _CONDITIONAL[fid]) if fid in _CONDITIONAL else Capability("faithful")
    for fid in FAITHFUL
}

# Measured on PostgreSQL 15 (tests/test_sql_servers.py runs each one).
_X = (("x", "float64"),)
_XY = (("x", "float64"), ("y", "float64"))
_S = (("s", "string"),)
_SA = (("s", "string"), ("a", "int64"))
DIVERGENCES: tuple[Divergence, ...] = (
    Divergence("eq", "x = x", "NaN = NaN is true in float8; IEEE 754 comparison makes it false", _X, ((math.nan,),)),
    Divergence("gt", "x > 1.0", "NaN sorts above every number, so NaN > 1 is true", _X, ((math.nan,),)),
    Divergence("in", "x in (1.0, x)", "IN uses float8 equality, so NaN is found in the list", _X, ((math.nan,),)),
    Divergence("nullif", "nullif(x, x)", "nullif(NaN, NaN) is null, where the reference keeps NaN", _X, ((math.nan,),)),
    Divergence("divide", "x / 0.0", "NaN / 0 is NaN instead of a division_by_zero error", _X, ((math.nan,),)),
    Divergence("multiply", "x * x", "an overflowing product raises 22003 instead of giving inf", _X, ((1e300,),)),
    Divergence("multiply", "x * y", "a product that rounds to zero raises 22003 (underflow) instead of 0.0", _XY,
               ((1e-300, 1e-300),)),
    Divergence("exp", "exp(x)", "exp(-1000) raises 22003 (underflow) instead of 0.0", _X, ((-1000.0,),)),
    Divergence("power", "power(x, y)", "an overflowing power raises 22003 instead of giving inf", _XY,
               ((10.0, 400.0),)),
    Divergence("round", "round(x)", "float8 round is half to even (2.5 -> 2)", _X, ((2.5,), (-0.5,))),
    Divergence("cast", "cast(x as int64)", "float8 to bigint rounds half to even (2.5 -> 2)", _X, ((2.5,),)),
    Divergence("cast", "cast(s as int64)", "tabs and newlines around the digits are accepted", _S, (("\t12\n",),)),
    Divergence("cast", "cast(s as float64)", "a numeral that rounds to zero raises 22003 instead of giving 0.0", _S,
               (("1e-400",),)),
    Divergence("cast", "cast(s as bool)", "'t', 'yes' and 'on' are accepted as true", _S, (("t",), ("yes",))),
    Divergence("cast", "cast(s as date)", "'2024-5-1' is accepted as a date", _S, (("2024-5-1",),)),
    Divergence("cast", "cast(x as string)", "float8 text is '1' and '1e+15', not Python's '1.0' and "
               "'1000000000000000.0'", _X, ((1.0,), (1e15,))),
    Divergence("cast", "cast(s = 'a' as string)", "a boolean prints as 'true', not 'TRUE'", _S, (("a",),)),
    Divergence("upper", "upper(s)", "under the column's C collation only ASCII letters change case", _S,
               (("Straße",), ("é",))),
    Divergence("lower", "lower(s)", "under the column's C collation 'ΣΑΣ' stays as it is", _S, (("ΣΑΣ",),)),
    Divergence("like", "s like 'a\\b'", "backslash is LIKE's default escape, so the pattern means 'ab'", _S,
               (("a\\b",),)),
    Divergence("substring", "substring(s, a)", "a start beyond int4 raises 'integer out of range'", _SA,
               (("abc", 2**40),)),
)

PROFILE = DialectProfile(
    name="postgres",
    sqlglot_dialect=D,
    session_settings=(  # applied by the runner, in this order
        "SET TIME ZONE 'UTC'",
        "SET extra_float_digits = 3",            # float8 text is the shortest round-trip digits
        "SET standard_conforming_strings = on",  # a backslash in a literal is just a backslash
        "SET DateStyle = 'ISO, YMD'",
        "SET IntervalStyle = 'iso_8601'",
        "SET client_encoding = 'UTF8'",
    ),
    faithful=FAITHFUL,
    native=NATIVE,
    capabilities=CAPABILITIES,
    literal=literal,
    notes=(
        "The database encoding must be UTF8 (octet_length counts UTF-8 bytes).",
        "upper/lower use the ICU collation \"und-x-icu\"; text comparisons use COLLATE \"C\".",
        "Errors are raised with a 'rexpr:<class>' tag in an invalid-input message; the "
        "construct calls random() so that planning never folds it.",
        "Text cannot contain U+0000; literals with it are refused.",
    ),
    divergences=DIVERGENCES,
)
