"""DuckDB dialect (sqlglot dialect "duckdb"), written against DuckDB 2.0.

What the faithful lowering works around, each measured on DuckDB v2.0.1:

* NaN: ``NaN = NaN`` is true and NaN sorts above +inf (``NaN > 1`` is true); the reference
  makes every comparison with NaN false except ``<>``. Comparisons, ``in``, ``between`` and
  ``nullif`` test ``isnan`` first. ``IS DISTINCT FROM`` already matches (NaN is not distinct
  from NaN, -0.0 not from 0.0). Guards only use ``x < c`` and ``x <= c`` on floats, which are
  false for NaN here as in IEEE 754.
* Silent IEEE results where the catalogue has errors: ``1.0 / 0.0`` is inf, ``2.0 % 0.0`` NaN,
  ``sqrt(-1)`` NaN, ``ln(0)`` -inf, ``power(0, -1)`` inf.
* Native errors carry no tag (int64 overflow, ``//`` by zero): every one is guarded into the
  raise construct, so the only errors the SQL raises are tagged.
* Casts: ``2.5::BIGINT`` is 2 (half to even); ``'1e3'``, ``'0x10'``, ``'1_000'`` and ``' 12\\t'``
  cast to BIGINT; ``'1e400'::DOUBLE`` is inf; ``'t'``/``'yes'`` cast to true; ``true::VARCHAR``
  is 'true'; NaN prints as 'nan'; ``'2024-5-1'`` is a date and ``'... 24:00:00'`` the next day.
  Strings are checked against the cast table's grammar before DuckDB converts them.
* ``substring('abc', -1)`` counts from the end and a negative length gives ''; lengths above
  2^32 - 1 are an error. ``upper('ß')`` is 'ẞ' (simple case mapping) and ``lower('ΣΑΣ')`` has
  no final sigma: upper and lower are not pushed.
* ``LIKE ... ESCAPE '$'`` accepts an escape before any character; the pattern is checked first.
* ``TRY(x)`` is null where ``x`` raises, for each row; it refuses volatile functions, so the
  raise construct is a cast of a constant string (not ``error()``). DuckDB's constant folding
  leaves a constant that fails to fold for run time, so an untaken raise never fires.

* Null operands: the optimizer folds a strict operator or function with a NULL constant (or
  all-null CASE) operand to NULL, and at run time skips the later operands once an earlier one
  is a constant NULL vector; both drop an error the reference gives. A strict call whose
  operand can raise while another can be null tests every operand for null first
  (``greatest``, which evaluates them all).
* Common subexpressions: a subtree that occurs twice inside COALESCE (or any function or
  operator, but not inside CASE) is computed once for every row before the COALESCE runs, so
  ``coalesce(y, r + r)`` raises where ``r`` raises even on rows where y is not null, and it
  changes which of two errors comes first (the hoisted subtree runs before the operands left
  of it). The SQL assumes the pass is disabled (a session setting).
* Statistics: ``x IS NULL``, comparisons and ``coalesce`` are folded from what DuckDB knows of
  x's values, without evaluating x. A null test of an x that can raise is written
  ``x IS NOT DISTINCT FROM NULL`` (not folded), and a CASE whose conditions can raise gets a
  branch no row takes valued with a failing cast, so its statistics are unknown.

Errors are raised as ``CAST('rexpr:<class>' AS <type>)``; DuckDB's message quotes the string
("Could not convert string 'rexpr:out_of_range' to INT64"), which the runner reads.
"""

from __future__ import annotations

import datetime as dt
import math

from sqlglot import exp

from rexpr.catalogue.model import ErrorClass
from rexpr.errors import NotPushable
from rexpr.language.datetime_text import format_date, format_timestamp
from rexpr.reference.evaluator import evaluate_row
from rexpr.sql.dialects import _embedded as em, _null_operands as nn, _trees as t
from rexpr.sql.dialects._planner_constants import planner_value
from rexpr.sql.profile import Capability, DialectProfile, Divergence, LowerContext, Lowerer
from rexpr.sql.quoting import Quoting, column, string_literal
from rexpr.typed import TCall, TField, walk
from rexpr.types import INT64_MAX, INT64_MIN, DataType, Kind
from rexpr.values import RowError

D = "duckdb"
Tree = t.Tree
B, I, F, S, DATE, TS = Kind.BOOL, Kind.INT64, Kind.FLOAT64, Kind.STRING, Kind.DATE, Kind.TIMESTAMP
TYPES = {B: "BOOLEAN", I: "BIGINT", F: "DOUBLE", S: "VARCHAR", DATE: "DATE", TS: "TIMESTAMP", Kind.NULL: "VARCHAR"}
QUOTING = Quoting(D, char_function="chr", join="pipes")
SUBSTRING_MAX = 2**32 - 1  # DuckDB: "Substring length outside of supported range (> 4294967295)"
TAG = "rexpr:"


def cast(node: Tree, kind: Kind) -> Tree:
    return t.cast(node, TYPES[kind], D)


def typed_null(kind: Kind) -> Tree:
    return t.null() if kind is Kind.NULL else cast(t.null(), kind)


def i8(value: int) -> Tree:
    return cast(t.number(value), I)


def f8(value: float) -> Tree:
    if math.isnan(value):
        text = "nan"
    elif math.isinf(value):
        text = "inf" if value > 0 else "-inf"
    else:
        text = repr(value)
    return cast(t.string(text), F)  # the string parse is correctly rounded; a decimal literal is DECIMAL


def raise_(error: ErrorClass, kind: Kind) -> Tree:
    text = t.string(f"{TAG}{error.value}")
    if kind in (S, Kind.NULL):
        return cast(cast(text, I), S)
    return cast(text, kind)


def is_raise(node: exp.Expression) -> bool:
    inner = node.this if isinstance(node, exp.Cast) else None
    return (isinstance(inner, exp.Literal) and inner.is_string and str(inner.this).startswith(TAG))


UNREACHABLE = "rexpr-unreachable"


def unreachable(kind: Kind) -> Tree:
    """A value of ``kind`` for a CASE branch no row takes: a failing cast like the raise
    construct, whose statistics DuckDB cannot know. Its text is no error class, so were it
    ever evaluated the statement would fail loudly rather than give a wrong answer."""
    text = t.string(UNREACHABLE)
    return cast(cast(text, I), S) if kind in (S, Kind.NULL) else cast(text, kind)


def literal(value: object, data_type: DataType) -> Tree:
    kind = data_type.kind
    if value is None:
        return typed_null(kind)
    if kind is B:
        return t.boolean(bool(value))
    if kind is I:
        return i8(int(value))  # type: ignore[call-overload]  # a bare 5 is INTEGER and overflows at 2^31
    if kind is F:
        return f8(float(value))  # type: ignore[arg-type]
    if kind is S:
        return string_literal(str(value), QUOTING)
    if kind is DATE:
        return cast(t.string(format_date(value)), DATE)  # type: ignore[arg-type]
    if kind is TS:
        assert isinstance(value, dt.datetime)
        return cast(t.string(format_timestamp(value)), TS)
    raise NotPushable(f"no DuckDB literal for {data_type.name}")


def is_null(x: Tree) -> Tree:
    """``x IS NULL``, and for an ``x`` that can raise ``x IS NOT DISTINCT FROM NULL``: DuckDB
    replaces ``x IS NULL`` by a constant when its statistics say x is always (or never) null,
    without evaluating x, so an error raised inside x (in a CASE condition, say) is lost. The
    null-safe comparison is not folded (measured on v2.0.1; see _null_operands)."""
    if not em.may_raise(x, ENGINE):
        return t.is_null(x)
    return exp.NullSafeEQ(this=t.paren(x), expression=exp.Null())


def compare(op: str, kind: Kind, a: Tree, b: Tree) -> Tree:
    """Faithful comparison of two values that are each evaluated in order first."""
    plain = t.COMPARE[op](a, b)
    if kind is not F:
        return plain
    nan = t.or_(t.call("isnan", a), t.call("isnan", b))
    return t.case((t.call("greatest", is_null(a), is_null(b)), t.null()),
                  (nan, t.boolean(op == "ne")), default=plain)


def _compare_both_run(op: str, kind: Kind, a: Tree, b: Tree) -> Tree:
    """:func:`compare` for the comparison operators, ``in`` and ``between``: when one side can
    raise, both sides are tested for null first, because DuckDB skips the other side of a
    comparison with a null one (see _null_operands; generated seed 6 case 6703: ``cast(x as
    int64) >= <a CASE DuckDB knows is null>`` lost the cast's out_of_range)."""
    tree = compare(op, kind, a, b)
    if kind is F or not (_risky(a) or _risky(b)):
        return tree  # the float comparison already starts with that test
    return t.case((t.call("greatest", is_null(a), is_null(b)), t.null()), default=tree)


ENGINE = em.Engine(D, raise_, is_raise, typed_null, i8, "greatest",
                   int_div=lambda a, b: exp.IntDiv(this=t.paren(a), expression=t.paren(b)),
                   probe=lambda x: t.call("TRY", x), compare=_compare_both_run, is_null=is_null)


def _risky(tree: Tree) -> bool:
    return em.may_raise(tree, ENGINE)


# ---------------------------------------------------------------------------------- arguments first
def _tests_first(tree: Tree, tested: list[Tree]) -> bool:
    """``tree`` is a CASE whose first condition already tests each of ``tested`` for null
    (a guard's own null clause), so every argument is evaluated before anything else."""
    if not isinstance(tree, exp.Case) or not tree.args.get("ifs"):
        return False
    condition = tree.args["ifs"][0].this
    greatest = isinstance(condition, exp.Anonymous) and str(condition.this).lower() == "greatest"
    tests = condition.expressions if greatest else [condition]
    seen = [x.this for x in tests if isinstance(x, (exp.Is, exp.NullSafeEQ)) and isinstance(x.expression, exp.Null)]
    return all(any(s is a or (isinstance(s, exp.Paren) and s.this is a) for s in seen) for a in tested)


def _first_column(node: TCall) -> Tree | None:
    for current in walk(node):
        if isinstance(current, TField):
            return column(current.dotted)
    return None


def _statistics_hidden(node: TCall, tree: Tree) -> Tree:
    """``tree``, a CASE whose conditions can raise, with a last branch no row takes whose value
    is :func:`unreachable`. DuckDB's statistics of a CASE come from its values only; when they
    are known it folds what consumes the CASE (``x > 3`` to true from the value range,
    ``coalesce`` dropping an always-null x) without evaluating the conditions, and their error
    is lost. ``c IS DISTINCT FROM c`` is false on every row (nulls and NaN included) and,
    reading a column, is not folded away. A constant CASE that raises is the raise construct."""
    if not isinstance(tree, exp.Case):
        return tree
    col = _first_column(node)
    if col is None:
        value = evaluate_row(node, {})
        return raise_(value.error, node.type.kind) if isinstance(value, RowError) else tree
    never = exp.NullSafeNEQ(this=col, expression=col.copy())
    tree.set("ifs", [*tree.args["ifs"], exp.If(this=never, true=unreachable(node.type.kind))])
    return tree


# Functions whose SQL takes the arguments in another order: position(needle, haystack) is
# strpos(haystack, needle), so a null haystack skips the needle at run time (generated seed 6,
# case 30553: the needle's negative substring length was lost).
_SQL_ORDER_DIFFERS = frozenset({"position"})


def _arguments_first(lowerer: Lowerer) -> Lowerer:
    """A strict function whose argument can raise while another can be null evaluates every
    argument first, in ``greatest(a IS NULL, ...)``: DuckDB otherwise folds the call to NULL
    (a NULL constant or all-null CASE argument) or skips the later arguments at run time (an
    earlier argument that is a constant NULL vector), and the error the reference gives is
    lost. Only later arguments are skipped at run time, so an argument that can be null but
    comes after the one that can raise counts only when it is always null."""
    def lower(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
        tree = lowerer(ctx, node, args)
        if len(args) < 2:
            return tree
        risky = [_risky(a) for a in args]
        if not any(risky):
            return tree
        nullable = [a.type.nullable for a in node.args]
        reordered = node.function in _SQL_ORDER_DIFFERS

        def exposed(k: int) -> bool:
            return any(nullable[j] and (j < k or reordered or nn.always_null(node.args[j]))
                       for j in range(len(args)) if j != k)

        if not any(risky[k] and exposed(k) for k in range(len(args))):
            return tree
        tested = [a for a, r, n in zip(args, risky, nullable) if r or n]
        test, null = em.any_null(ENGINE, tested), typed_null(node.type.kind)
        if any(nn.always_null(a) for a in node.args):
            # Null once the arguments ran; the test is true on every row, so the ELSE is never
            # taken, and being unreachable() it keeps DuckDB from knowing the result is null.
            return t.case((test, null), default=unreachable(node.type.kind))
        if _tests_first(tree, tested):
            return tree
        if isinstance(tree, exp.Case) and not any(tree is a for a in args):
            tree.set("ifs", [exp.If(this=test, true=null), *tree.args["ifs"]])  # same as nesting, shorter
            return tree
        return t.case((test, null), default=tree)
    return lower


# ---------------------------------------------------------------------------------- arithmetic
def _arith(op: str, float_op) -> Lowerer:
    def lower(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
        if node.type.kind is I:
            return _hugeint_checked(node, args, op)
        return float_op(*args)
    return lower


def _hugeint_checked(node: TCall, args: list[Tree], op: str) -> Tree:
    def outside(a: Tree, b: Tree) -> Tree:  # the exact result in 128 bits, then its range
        wide = {"add": t.add, "subtract": t.sub, "multiply": t.mul}[op](t.cast(a, "HUGEINT", D), t.cast(b, "HUGEINT", D))
        return t.not_(exp.Between(this=t.paren(wide), low=i8(INT64_MIN), high=i8(INT64_MAX)))
    return em.int_arith(ENGINE, node, args, op, outside)


def _zero(kind: Kind) -> Tree:
    return i8(0) if kind is I else f8(0.0)


def _zero_checks(node: TCall, divisor: Tree) -> list[tuple[Tree, ErrorClass]]:
    if em.nonzero_literal(node.args[1]):
        return []
    return [(t.eq(divisor, _zero(node.args[1].type.kind)), ErrorClass.DIVISION_BY_ZERO)]


def _divide(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    a, b = args
    return em.guarded(ENGINE, node, args, _zero_checks(node, b), t.div(a, b))


def _modulo(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    a, b = args
    kind = node.type.kind
    if kind is I and em.literal_of(node.args[1]) == (True, -1):
        value: Tree = t.case((is_null(a), typed_null(I)), default=i8(0))
    elif kind is I:  # -2^63 % -1 is 0 in the reference; DuckDB computes it through the overflowing quotient
        value = t.mod(a, b) if em.nonzero_literal(node.args[1]) else \
            t.case((t.eq(b, i8(-1)), i8(0)), default=t.mod(a, b))
    else:
        value = t.mod(a, b)  # DOUBLE % is fmod: sign of the dividend, inf % y is NaN
    return em.guarded(ENGINE, node, args, _zero_checks(node, b), value)


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
    return em.guarded(ENGINE, node, args, checks, ENGINE.int_div(a, b))  # BIGINT // truncates toward zero


def _abs(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    if node.type.kind is F:
        return t.call("abs", args[0])
    return em.guarded(ENGINE, node, args, [(t.eq(args[0], i8(INT64_MIN)), ErrorClass.OUT_OF_RANGE)],
                      t.call("abs", args[0]))


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
            ctx.refuse(node, "digits other than 0: DuckDB rounds x * 10^d in binary, not the exact value")
    return t.call("round", args[0])  # half away from zero on the exact value; inf and NaN unchanged


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
    fractional = t.and_(t.call("isfinite", y), t.ne(y, t.call("trunc", y)))
    checks = [(t.and_(t.eq(x, zero), t.lt(y, zero)), ErrorClass.INVALID_ARGUMENT),
              (t.and_(t.lt(x, zero), fractional), ErrorClass.INVALID_ARGUMENT)]
    # C pow gives pow(NaN, 0) = pow(1, NaN) = 1 for a quiet NaN only; a signaling NaN gives NaN
    # (IEEE 754-2019 6.2), where the catalogue's power is 1 for any NaN (generated seed 6, case
    # 45244: a NaN with payload 0x7ff669cdce9946a0).
    one = t.or_(t.eq(y, f8(0.0)), t.eq(x, f8(1.0)))
    return em.guarded(ENGINE, node, args, checks, t.case((one, f8(1.0)), default=t.call("power", x, y)))


# ---------------------------------------------------------------------------------- comparison
def _compare(op: str) -> Lowerer:
    def lower(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
        return _compare_both_run(op, node.args[0].type.kind, *args)
    return lower


def _nullif(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    a, b = args
    equal = t.eq(a, b)
    if node.args[0].type.kind is F:
        equal = t.and_(t.not_(t.call("isnan", a)), equal)
    tree = t.case((em.any_null(ENGINE, args), a), (equal, typed_null(node.type.kind)), default=a)
    return _statistics_hidden(node, tree) if _risky(b) else tree  # b's error sits in conditions only


def _chain(conjunction: bool) -> Lowerer:
    def lower(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
        return em.chain(ctx, node, [(a, _risky(a)) for a in args], ENGINE, conjunction)
    return lower


def _case(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    pairs = [(args[i], args[i + 1]) for i in range(0, len(args) - 1, 2)]
    tree = t.case(*pairs, default=args[-1])  # THEN branches run only for the rows that take them
    return _statistics_hidden(node, tree) if any(_risky(c) for c, _ in pairs) else tree


def _coalesce(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    # Lazy: later arguments only where needed (with the common-subexpression pass off, which
    # otherwise hoists repeated subtrees out of COALESCE and runs them on every row).
    return args[0] if len(args) == 1 else t.call("coalesce", *args)


# ---------------------------------------------------------------------------------- strings
def _like(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    if len(args) == 2:
        return exp.Like(this=t.paren(args[0]), expression=t.paren(args[1]))  # no default escape here
    is_literal, escape = em.literal_of(node.args[2])
    if not is_literal:
        ctx.refuse(node, "the escape must be a literal")
    if escape is None:
        return em.null_after(ENGINE, args)
    escape = str(escape)
    if len(escape) != 1:
        return em.guarded(ENGINE, node, args, [(t.boolean(True), ErrorClass.INVALID_ESCAPE)], typed_null(B))
    if escape in "%_":
        ctx.refuse(node, "an escape of % or _ is ambiguous in DuckDB's LIKE")
    if ord(escape) > 0x7F:  # measured on v2.0.1: 'é', '€' and U+1F600 are all a syntax error
        ctx.refuse(node, "DuckDB's LIKE takes only a one-byte (ASCII) escape character")
    static = em.static_like_error(node)
    if isinstance(static, ErrorClass):
        return em.guarded(ENGINE, node, args, [(t.boolean(True), static)], typed_null(B))
    match = t.like(args[0], args[1], string_literal(escape, QUOTING))
    checks = [] if static is None else [(em.escape_pattern_invalid(args[1], escape), ErrorClass.INVALID_ESCAPE)]
    return em.guarded(ENGINE, node, args, checks, match)


def _trim(fn: str) -> Lowerer:
    # An explicit set always: the default set is U+0020 only.
    return lambda ctx, node, args: t.call(fn, args[0], args[1] if len(args) > 1 else t.string(" "))


def _substr(s: Tree, start: Tree, count: Tree | None = None) -> Tree:
    # DuckDB refuses offsets and lengths above 2^32 - 1; past the end the answer is '' anyway.
    far = t.gt(start, t.call("length", s))
    if count is None:
        return t.case((far, t.string("")), default=t.call("substring", s, start))
    capped = t.case((t.gt(count, i8(SUBSTRING_MAX)), i8(SUBSTRING_MAX)), default=count)
    return t.case((far, t.string("")), default=t.call("substring", s, start, capped))


def _substring(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    return em.substring(ENGINE, node, args, _substr)


def _position(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    needle, haystack = args
    return em.ordered(ENGINE, node, args, t.call("strpos", haystack, needle))


def _call(fn: str) -> Lowerer:
    return lambda ctx, node, args: t.call(fn, *args)


# ---------------------------------------------------------------------------------- casts
_FLOAT_TEXT = r"[+-]?(?:(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?|(?i:inf|infinity|nan))"
_DATE_TEXT = r"[0-9]{4}-[0-9]{2}-[0-9]{2}"
_TIMESTAMP_TEXT = _DATE_TEXT + r"(?:[ Tt][0-9]{2}:[0-9]{2}:[0-9]{2}(?:\.[0-9]{1,6})?)?"


def _matches(text: Tree, regex: str) -> Tree:
    return t.call("regexp_full_match", text, t.string(regex))


def _spaces_trimmed(x: Tree) -> Tree:
    return t.call("trim", x, t.string(" "))  # the cast table trims U+0020 only


def _string_to_int(x: Tree) -> Tree:
    s = _spaces_trimmed(x)
    invalid, out_of_range = em.integer_text_checks(
        s, lambda v, n: t.call("left", v, t.number(n)), lambda v: t.call("substring", v, t.number(2)),
        lambda v: t.call("length", v))
    return t.case((is_null(x), typed_null(I)), (invalid, raise_(ErrorClass.INVALID_CAST, I)),
                  (out_of_range, raise_(ErrorClass.OUT_OF_RANGE, I)), default=cast(s, I))


def _string_to_float(x: Tree) -> Tree:
    s = _spaces_trimmed(x)
    value = cast(s, F)  # correctly rounded; a finite numeral too large becomes inf, which is an error here
    too_large = t.and_(t.call("isinf", value), t.not_(t.call("contains", t.call("lower", s), t.string("inf"))))
    return t.case((is_null(x), typed_null(F)), (t.not_(_matches(s, _FLOAT_TEXT)), raise_(ErrorClass.INVALID_CAST, F)),
                  (too_large, raise_(ErrorClass.OUT_OF_RANGE, F)), default=value)


def _string_to_bool(x: Tree) -> Tree:
    s = t.call("lower", _spaces_trimmed(x))
    return t.case((is_null(x), typed_null(B)), (t.eq(s, t.string("true")), t.boolean(True)),
                  (t.eq(s, t.string("false")), t.boolean(False)), default=raise_(ErrorClass.INVALID_CAST, B))


def _string_to_date(x: Tree) -> Tree:
    s = _spaces_trimmed(x)
    parsed = exp.TryCast(this=s, to=exp.DataType.build("DATE", dialect=D))
    valid = t.and_(_matches(s, _DATE_TEXT), t.ne(t.call("left", s, t.number(4)), t.string("0000")),
                   t.not_(is_null(parsed)))
    return t.case((is_null(x), typed_null(DATE)), (t.not_(valid), raise_(ErrorClass.INVALID_DATETIME, DATE)),
                  default=parsed)


def _string_to_timestamp(x: Tree) -> Tree:
    s = _spaces_trimmed(x)
    # DuckDB reads hour 24 as the next day and accepts other forms; check the fields, then
    # give DuckDB the date and time with a space between them.
    spaced = t.case((t.gt(t.call("length", s), t.number(10)),
                     exp.DPipe(this=exp.DPipe(this=t.call("left", s, t.number(10)), expression=t.string(" ")),
                               expression=t.call("substring", s, t.number(12)))), default=s)
    parsed = exp.TryCast(this=spaced, to=exp.DataType.build("TIMESTAMP", dialect=D))
    fields_ok = t.or_(t.eq(t.call("length", s), t.number(10)),
                      t.and_(t.le(t.call("substring", s, t.number(12), t.number(2)), t.string("23")),
                             t.le(t.call("substring", s, t.number(15), t.number(2)), t.string("59")),
                             t.le(t.call("substring", s, t.number(18), t.number(2)), t.string("59"))))
    valid = t.and_(_matches(s, _TIMESTAMP_TEXT), t.ne(t.call("left", s, t.number(4)), t.string("0000")), fields_ok,
                   t.not_(is_null(parsed)))
    return t.case((is_null(x), typed_null(TS)), (t.not_(valid), raise_(ErrorClass.INVALID_DATETIME, TS)),
                  default=parsed)


def _float_to_int(x: Tree) -> Tree:
    r = t.call("round", x)  # half away from zero on the exact value
    fits = t.and_(t.ge(r, f8(float(INT64_MIN))), t.lt(r, f8(2.0**63)))  # NaN >= ... is true here, NaN < ... false
    return t.case((is_null(x), typed_null(I)), (t.not_(fits), raise_(ErrorClass.OUT_OF_RANGE, I)), default=cast(r, I))


def _float_to_string(x: Tree) -> Tree:
    # DuckDB prints the shortest round-trip digits in Python's repr layout (checked by the tests
    # on random doubles); only the non-finite spellings differ.
    return t.case((t.call("isnan", x), t.string("NaN")), (t.eq(x, f8(math.inf)), t.string("Infinity")),
                  (t.eq(x, f8(-math.inf)), t.string("-Infinity")), default=cast(x, S))


def _cast(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    source, target = node.args[0].type.kind, node.type.kind
    x = args[0]
    if source is target or source is Kind.NULL:
        return x if source is target else cast(x, target)
    pair = (source, target)
    simple = {(I, F): F, (B, I): I, (I, S): S, (DATE, S): S, (TS, S): S, (DATE, TS): TS, (TS, DATE): DATE}
    if pair in simple:
        return cast(x, simple[pair])
    if pair == (I, B):
        return t.ne(x, i8(0))
    if pair == (B, S):
        return t.call("upper", cast(x, S))
    builders = {(F, I): _float_to_int, (S, I): _string_to_int, (S, F): _string_to_float, (S, B): _string_to_bool,
                (S, DATE): _string_to_date, (S, TS): _string_to_timestamp, (F, S): _float_to_string}
    if pair in builders:
        return builders[pair](x)
    ctx.refuse(node, f"no cast from {source.value} to {target.value}")
    raise AssertionError("unreachable")


# ---------------------------------------------------------------------------------- tables
_FAITHFUL: dict[str, Lowerer] = {
    "add": _arith("add", t.add),
    "subtract": _arith("subtract", t.sub),
    "multiply": _arith("multiply", t.mul),
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
    "exp": _call("exp"),  # overflow gives inf, as IEEE 754
    "is_nan": _call("isnan"),
    **{op: _compare(op) for op in t.COMPARE},
    "is_distinct_from": lambda ctx, node, args: exp.NullSafeNEQ(this=t.paren(args[0]), expression=t.paren(args[1])),
    "is_null": lambda ctx, node, args: is_null(args[0]),
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
    "substring": _substring,
    "length": _call("length"),  # code points
    "octet_length": _call("strlen"),  # bytes of the UTF-8 text
    "concat_op": lambda ctx, node, args: exp.DPipe(this=t.paren(args[0]), expression=t.paren(args[1])),
    "concat": _call("concat"),  # skips nulls; concat(NULL) is ''
    "replace": _call("replace"),  # an empty search leaves the string unchanged
    "position": _position,
    "starts_with": _call("starts_with"),
    "ends_with": _call("ends_with"),
    "cast": _cast,
    "year": _call("year"),
    "month": _call("month"),
    "day": _call("day"),
}

def _constants_folded(lowerer: Lowerer) -> Lowerer:
    """A subtree whose value is known without a row (see _planner_constants) is its value,
    computed by the reference, or the raise construct. DuckDB folds constants its own way: the binder types the negation of a constant
    -2^63 as HUGEINT, which no BIGINT parameter takes (generated seed 6, case 12335:
    ``substring(VARCHAR, HUGEINT)``), and a constant CASE condition that raises gave null
    (case 31875: ``case when null between null and cast('' as date) then ts end``). Measured
    on v2.0.1."""
    def lower(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
        known, value = planner_value(node)  # also coalesce(0.0, x) and the like
        if not known:
            return lowerer(ctx, node, args)
        return raise_(value.error, node.type.kind) if isinstance(value, RowError) else literal(value, node.type)
    return lower


FAITHFUL: dict[str, Lowerer] = {
    fid: _constants_folded(_arguments_first(lowerer) if fid in nn.STRICT else lowerer)
    for fid, lowerer in _FAITHFUL.items()}

_CASE_MAPPING = ("DuckDB's upper/lower use simple one-to-one case mappings (upper('ß') is 'ẞ', lower('ΣΑΣ') "
                 "is 'σασ'); the catalogue uses the full Unicode mappings ('SS', final sigma)")

CAPABILITIES: dict[str, Capability] = {
    "upper": Capability("not_pushable", _CASE_MAPPING),
    "lower": Capability("not_pushable", _CASE_MAPPING),
    "round": Capability("conditional", "int64: digits a literal; float64: digits absent or the literal 0"),
    "like": Capability("conditional", "with escape: the escape an ASCII literal other than % and _"),
    "and": Capability("faithful", "operands that can raise are probed with TRY, so a false operand absorbs their errors"),
    "or": Capability("faithful", "operands that can raise are probed with TRY, so a true operand absorbs their errors"),
}


# ---------------------------------------------------------------------------------- native
def _native_cast(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    return cast(args[0], node.type.kind)


def _native_like(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    if len(args) == 3:
        return t.like(args[0], args[1], args[2])
    return exp.Like(this=t.paren(args[0]), expression=t.paren(args[1]))


NATIVE: dict[str, Lowerer] = {
    "add": lambda ctx, node, args: t.add(*args),
    "subtract": lambda ctx, node, args: t.sub(*args),
    "multiply": lambda ctx, node, args: t.mul(*args),
    "divide": lambda ctx, node, args: t.div(*args),
    "modulo": lambda ctx, node, args: t.mod(*args),
    "negate": lambda ctx, node, args: t.neg(args[0]),
    "div": lambda ctx, node, args: ENGINE.int_div(*args),
    "abs": _call("abs"),
    "round": _call("round"),
    "floor": _call("floor"),
    "ceil": _call("ceil"),
    "sqrt": _call("sqrt"),
    "power": _call("power"),
    "ln": _call("ln"),
    "exp": _call("exp"),
    "is_nan": _call("isnan"),
    **{op: (lambda fn: lambda ctx, node, args: fn(*args))(fn) for op, fn in t.COMPARE.items()},
    "is_distinct_from": _FAITHFUL["is_distinct_from"],
    "is_null": lambda ctx, node, args: t.is_null(args[0]),
    "and": lambda ctx, node, args: t.and_(*args),
    "or": lambda ctx, node, args: t.or_(*args),
    "not": _FAITHFUL["not"],
    "coalesce": _coalesce,
    "nullif": _call("nullif"),
    "case": lambda ctx, node, args: t.case(*[(args[i], args[i + 1]) for i in range(0, len(args) - 1, 2)],
                                           default=args[-1]),
    "in": lambda ctx, node, args: t.in_list(args[0], args[1:]),
    "between": lambda ctx, node, args: exp.Between(this=t.paren(args[0]), low=t.paren(args[1]), high=t.paren(args[2])),
    "like": _native_like,
    "trim": _call("trim"),
    "ltrim": _call("ltrim"),
    "rtrim": _call("rtrim"),
    "substring": _call("substring"),
    "upper": _call("upper"),
    "lower": _call("lower"),
    "length": _call("length"),
    "octet_length": lambda ctx, node, args: t.call("octet_length", t.call("encode", args[0])),
    "concat_op": _FAITHFUL["concat_op"],
    "concat": _call("concat"),
    "replace": _call("replace"),
    "position": lambda ctx, node, args: t.call("strpos", args[1], args[0]),
    "starts_with": _call("starts_with"),
    "ends_with": _call("ends_with"),
    "cast": _native_cast,
    "year": _call("year"),
    "month": _call("month"),
    "day": _call("day"),
}

# ---------------------------------------------------------------------------------- divergences
_X = (("x", "float64"),)
_S = (("s", "string"),)
DIVERGENCES: tuple[Divergence, ...] = (
    Divergence("eq", "x = x", "NaN = NaN is true in DuckDB; IEEE 754 comparison makes it false", _X, ((math.nan,),)),
    Divergence("gt", "x > 1.0", "NaN sorts above every number, so NaN > 1 is true", _X, ((math.nan,),)),
    Divergence("in", "x in (1.0, x)", "IN uses DuckDB's NaN = NaN, so NaN is found in the list", _X, ((math.nan,),)),
    Divergence("nullif", "nullif(x, x)", "nullif(NaN, NaN) is null, where the reference keeps NaN", _X, ((math.nan,),)),
    Divergence("divide", "x / 0.0", "division by zero gives ±inf instead of an error", _X, ((1.0,),)),
    Divergence("modulo", "x % 0.0", "a zero float divisor gives NaN instead of an error", _X, ((2.0,),)),
    Divergence("sqrt", "sqrt(x)", "sqrt of a negative number is NaN instead of an error", _X, ((-1.0,),)),
    Divergence("ln", "ln(x)", "ln(0) is -inf instead of an error", _X, ((0.0,),)),
    Divergence("power", "power(x, -1.0)", "0 to a negative power is inf instead of an error", _X, ((0.0,),)),
    Divergence("substring", "substring(s, -1)", "a start before 1 counts from the end of the string", _S, (("abc",),)),
    Divergence("substring", "substring(s, 1, -1)", "a negative length gives '' instead of an error", _S, (("abc",),)),
    Divergence("upper", "upper(s)", "simple case mapping: 'ß' does not become 'SS'", _S, (("Straße",),)),
    Divergence("lower", "lower(s)", "no final sigma: 'ΣΑΣ' becomes 'σασ', not 'σας'", _S, (("ΣΑΣ",),)),
    Divergence("like", "s like 'a$b' escape '$'", "an escape before an ordinary character is accepted", _S,
               (("ab",),)),
    Divergence("cast", "cast(x as int64)", "DOUBLE to BIGINT rounds half to even (2.5 -> 2)", _X, ((2.5,),)),
    Divergence("cast", "cast(s as int64)", "'1e3', '0x10' and '1.5' are accepted as integers", _S,
               (("1e3",), ("0x10",), ("1.5",))),
    Divergence("cast", "cast(s as float64)", "a numeral too large for float64 becomes inf instead of an error", _S,
               (("1e400",),)),
    Divergence("cast", "cast(s as bool)", "'t', 'yes' and '1' are accepted as true", _S, (("t",), ("yes",), ("1",))),
    Divergence("cast", "cast(s = 'a' as string)", "a bool prints as 'true', not 'TRUE'", _S, (("a",),)),
    Divergence("cast", "cast(x as string)", "NaN and infinity print as 'nan' and 'inf'", _X, ((math.nan,), (math.inf,))),
    Divergence("cast", "cast(s as date)", "'2024-5-1' and a timestamp text are accepted as dates", _S,
               (("2024-5-1",), ("2024-05-01 10:00:00",))),
    Divergence("cast", "cast(s as timestamp)", "hour 24 is read as midnight of the next day", _S,
               (("2024-05-01 24:00:00",),)),
)

PROFILE = DialectProfile(
    name="duckdb",
    sqlglot_dialect=D,
    session_settings=(  # applied by the runner, in this order
        "SET TimeZone = 'UTC'",  # timestamps are zone-less UTC; casts never shift them
        "SET default_collation = ''",  # binary: text compares by UTF-8 bytes, which is code point order
        "SET integer_division = false",  # '/' on integers is not used, but keep its meaning fixed
        # Hoisted repeated subtrees are evaluated first, so an operand's error could beat an
        # earlier operand's (ln(y) <> power(0.0, 0.0 % 0.0) gave division_by_zero).
        "SET disabled_optimizers = 'common_subexpressions'",
    ),
    faithful=FAITHFUL,
    native=NATIVE,
    capabilities=CAPABILITIES,
    literal=literal,
    notes=(
        "Errors are raised as CAST('rexpr:<class>' AS <type>); the message quotes the tag.",
        "TRY() probes let a decisive and/or operand absorb errors in the others.",
        "Integer literals are cast to BIGINT and float literals parsed from text as DOUBLE.",
        "NUL (U+0000) in a string literal is written as chr(0).",
    ),
    quoting=QUOTING,
    divergences=DIVERGENCES,
)
