"""MariaDB dialect (sqlglot dialect "mysql"), written against MariaDB 10.11.

What the faithful lowering works around, each measured on the server (10.11.19, utf8mb4):

* DOUBLE holds no NaN and no ±inf at all, and a stored -0.0 becomes 0.0 (text output drops
  the sign too; ``atan2(x, -1)`` still sees it in a computed value). A result that would be
  ±inf raises 1690 "DOUBLE value is out of range" (``1e308 * 10``, ``exp(1000)``,
  ``pow(10, 400)``), and so does a NaN (``pow(-8, 1/3)``). These are the engine's domain
  limits, not errors of the semantics: where the lowering sees such a value coming (a
  non-finite constant, ``cast('inf' as float64)``) it raises the engine-limit tag
  ``rexpr-limit:non_finite``, and the runner reads the engine's own DOUBLE 1690 as the same
  limit. Such rows are engine-limit rows, never a guess. The capability table marks the
  affected functions conditional.
* ``x / 0``, ``x DIV 0``, ``x % 0``, ``sqrt(-1)`` and ``ln(0)`` are NULL with a warning in a
  SELECT (ERROR_FOR_DIVISION_BY_ZERO only affects writes); every such case is guarded.
* BIGINT ``+ - * DIV``, ``abs`` and unary minus raise 1690 on overflow, except one case:
  ``0 - x`` with x = -2^63 wraps to -2^63 (measured), so that subtraction is guarded.
* Text: utf8mb4_bin is a PAD SPACE collation ('a' = 'a ' is true); comparisons use
  ``COLLATE utf8mb4_nopad_bin`` (code point order, trailing spaces significant).
* ``UPPER``/``LOWER`` under utf8mb4_bin use old tables (ƀ stays ƀ); under
  ``utf8mb4_uca1400_as_cs`` they are the Unicode 14 simple mappings, identical to Python's
  for every character whose full mapping is one character (checked exhaustively by the
  tests). The 102 characters with longer full uppercase ('ß' -> 'SS'), 'İ' -> 'i̇' and the
  final sigma are added explicitly (see _case_mapping).
* ``LIKE``'s default escape is backslash, and ``ESCAPE ''`` still means backslash; ESCAPE
  must be a constant. Every pattern is therefore rewritten to backslash escapes (literal
  patterns while lowering, column patterns with REGEXP_REPLACE) and matched with
  ``ESCAPE '\\\\'``.
* ``TRIM(BOTH 'xy' FROM s)`` removes the string 'xy', not the set {x, y}: sets of several
  characters go through REGEXP_REPLACE. PCRE's ``$`` also matches before a final newline,
  so patterns anchor with ``\\A`` and ``\\z``.
* ``SUBSTRING(s, 0, 2)`` is '' and ``SUBSTRING(s, -1)`` counts from the end; positions are
  rewritten to the ISO rule.
* ``CAST('abc' AS SIGNED)`` is 0 and ``CAST('1e400' AS DOUBLE)`` is DBL_MAX, with warnings;
  ``CAST(2.5e0 AS SIGNED)`` is 2; ``ROUND(2.675e0, 2)`` is 2.68 and ``ROUND(2.5e0)`` is 2.
  Strings are validated with regular expressions and range-checked on their digits.
* ``CONCAT(NULL, <error>)`` is NULL without evaluating the second argument, where the
  reference raises (errors before nulls); when a later argument can raise, every argument is
  evaluated first.
* A derived table cannot see the outer row (no LATERAL), so a value used several times is
  bound once through a correlated ``JSON_TABLE(JSON_ARRAY(...))``, which can.
* The optimizer may evaluate constant subexpressions before the rows; constant subtrees are
  lowered to their value, computed by the reference (or to the raise construct).

Errors are raised with ``(RAND() >= 0) + ('rexpr:<class>' <> '') + 9223372036854775807``
(engine limits the same way with ``'rexpr-limit:<reason>'``):
BIGINT overflow raises 1690 even in a SELECT, and the message quotes the expression, tag
included. RAND() keeps the optimizer from evaluating it ahead of the rows. Because a native
1690 quotes its whole expression too, an overflowing operation whose operands contain a tag
(a guard, or a user literal or column name with 'rexpr:' in it) decides its overflow itself
and raises its own out_of_range, so the message cannot carry a foreign tag.
"""

from __future__ import annotations

import datetime as dt
import math
from typing import Callable

from sqlglot import exp

from rexpr.catalogue.model import ErrorClass
from rexpr.errors import NotPushable
from rexpr.language.datetime_text import format_date, format_timestamp
from rexpr.reference.functions import like_regex
from rexpr.sql.dialects import _case_mapping as cm, _logic, _numeral_text as nt, _trees as t
from rexpr.sql.dialects._planner_constants import planner_value

from rexpr.sql.profile import Capability, DialectProfile, Divergence, LowerContext, Lowerer
from rexpr.typed import TCall, TLiteral, Typed
from rexpr.types import INT64_MAX, INT64_MIN, DataType, Kind
from rexpr.values import RowError

D = "mysql"
# NO_BACKSLASH_ESCAPES is deliberately absent: the lowering (sqlglot's mysql dialect) escapes
# backslashes in string literals, and PyMySQL's own escaping assumes the same.
SQL_MODE = "STRICT_ALL_TABLES,ERROR_FOR_DIVISION_BY_ZERO,NO_ZERO_DATE,NO_ZERO_IN_DATE,NO_ENGINE_SUBSTITUTION"
Tree = t.Tree
B, I, F, S, DATE, TS = Kind.BOOL, Kind.INT64, Kind.FLOAT64, Kind.STRING, Kind.DATE, Kind.TIMESTAMP
CAST_TYPES = {B: "SIGNED", I: "SIGNED", F: "DOUBLE", S: "CHAR", DATE: "DATE", TS: "DATETIME(6)", Kind.NULL: "CHAR"}
NO_PAD = exp.Var(this="utf8mb4_nopad_bin")          # code point order, trailing spaces count
BINARY_TEXT = exp.Var(this="utf8mb4_bin")           # code point matching for LIKE, LOCATE, regexps
UNICODE_CASE = exp.Var(this="utf8mb4_uca1400_as_cs")  # Unicode 14 simple case mappings


def typed_null(kind: Kind) -> Tree:
    return t.cast(t.null(), CAST_TYPES[kind], D)


LIMIT_TAG = "rexpr-limit:"  # an engine limit, not an error class (rexpr.engines.failures.limit_of)


def _raising(tag: str, kind: Kind) -> Tree:
    overflow = t.add(t.add(t.ge(t.call("RAND"), t.number(0)), t.ne(t.string(tag), t.string(""))),
                     t.number(INT64_MAX))
    return t.case((t.gt(overflow, t.number(0)), typed_null(kind)))


def raise_(error: ErrorClass, kind: Kind) -> Tree:
    return _raising(f"rexpr:{error.value}", kind)


def limit(reason: str, kind: Kind) -> Tree:
    """Raise the engine limit ``reason`` (``non_finite``: DOUBLE cannot hold NaN or ±inf)."""
    return _raising(f"{LIMIT_TAG}{reason}", kind)


_JSON_COLUMN = {B: "BIGINT", I: "BIGINT", F: "DOUBLE", S: "LONGTEXT", DATE: "DATE", TS: "DATETIME(6)",
                "decimal": "DECIMAL(65, 0)"}


def bind(values: list[Tree], body: Callable[[list[Tree]], Tree], kinds: list | None = None,
         always: bool = False) -> Tree:
    """``body`` over the values, each evaluated once.

    A derived table cannot see the outer row here, but JSON_TABLE can: the values travel as
    one JSON array and come back as typed columns (exact for every type used: doubles print
    with round-trip digits, text is escaped losslessly, checked by the tests). JSON_TABLE
    text is utf8mb4_general_ci, so text comes back through CAST(... AS CHAR), which takes
    the connection's utf8mb4_bin like the input columns. Without ``kinds`` the body repeats
    the values; values cheap to repeat stay inline unless ``always``."""
    if kinds is None or (not always and all(t.is_simple(v) for v in values)):
        return body(values)
    alias = t.scope_alias()
    refs: list[Tree] = []
    array: list[Tree] = []
    columns: list[exp.Expression] = []
    for i, (value, kind) in enumerate(zip(values, kinds)):
        if t.is_simple(value) and not always:
            refs.append(value)
            continue
        name = f"v{i}"
        column_type = exp.DataType.build(_JSON_COLUMN[kind], dialect=D)
        columns.append(exp.JSONColumnDef(this=exp.to_identifier(name), kind=column_type,
                                         path=t.string(f"$[{len(array)}]")))
        array.append(value)
        ref = exp.column(name, table=alias)
        refs.append(t.cast(ref, "CHAR", D) if kind is S else ref)
    table = exp.JSONTable(this=t.call("JSON_ARRAY", *array), path=t.string("$"),
                          schema=exp.JSONSchema(expressions=columns))
    source = exp.Table(this=table, alias=exp.TableAlias(this=exp.to_identifier(alias)))
    # copy=False: the builders copy their arguments by default, which makes nesting quadratic
    return exp.Subquery(this=exp.Select(expressions=[t.in_scope(body, refs)]).from_(source, copy=False))


def bound(body: Callable[..., Tree]) -> Lowerer:
    """A lowerer whose body sees every argument evaluated once (all of them bound when one
    quotes a tag, so that no native error message can quote it; see _tag_free)."""
    return lambda ctx, node, args: bind(args, lambda refs: body(node, *refs), [a.type.kind for a in node.args],
                                        always=quotes_a_tag(args))


def _int(value: int) -> Tree:
    if value == INT64_MIN:  # -9223372036854775808 would be read as -(unsigned 2^63)
        return t.sub(t.number(-INT64_MAX), t.number(1))
    return t.number(value)


def _double(value: float) -> Tree:
    if not math.isfinite(value):
        raise NotPushable(f"MariaDB DOUBLE cannot hold {value!r}")
    text = repr(value)
    return t.number(text if "e" in text else text + "e0")  # the e makes it a DOUBLE, not a DECIMAL


def literal(value: object, data_type: DataType) -> Tree:
    kind = data_type.kind
    if value is None:
        return t.null() if kind is Kind.NULL else typed_null(kind)
    if kind is B:
        return t.boolean(bool(value))
    if kind is I:
        return _int(int(value))  # type: ignore[arg-type]
    if kind is F:
        return _double(float(value))  # type: ignore[arg-type]
    if kind is S:
        return t.string(str(value))  # sqlglot escapes quotes, backslashes, NUL, CR, LF, ^Z
    if kind is DATE:
        return t.cast(t.string(format_date(value)), "DATE", D)  # type: ignore[arg-type]
    if kind is TS:
        assert isinstance(value, dt.datetime)
        return t.cast(t.string(format_timestamp(value)), "DATETIME(6)", D)
    raise NotPushable(f"no MariaDB literal for {data_type.name}")


def _text(a: Tree, collation: exp.Expression = NO_PAD) -> Tree:
    return t.collate(a, collation)


def _implicit(text: Tree) -> Tree:
    """A text result whose collation a COLLATE inside made explicit, back to the connection's
    utf8mb4_bin with implicit coercibility (CAST AS CHAR does that), like a column: two
    different explicit collations in one operation are an error (1267)."""
    return t.cast(text, "CHAR", D)


def compare(op: str, kind: Kind, a: Tree, b: Tree) -> Tree:
    plain = t.COMPARE[op]
    return plain(_text(a), b) if kind is S else plain(a, b)  # DOUBLE has no NaN to correct for


def _matches(s: Tree, regex: str) -> Tree:
    return t.gt(t.call("REGEXP_INSTR", _text(s, BINARY_TEXT), t.string(regex)), t.number(0))


# ---------------------------------------------------------------------------------- may raise
_RAISING_CASTS = {(S, I), (S, F), (S, B), (S, DATE), (S, TS), (F, I)}


def _literal(node: Typed) -> object:
    return node.value if isinstance(node, TLiteral) else None


def _constant_int(node: Typed) -> int | None:
    """The value of an int64 subtree known without a row that does not raise, else None."""
    constant, value = planner_value(node)
    return value if constant and isinstance(value, int) and not isinstance(value, bool) else None


def _nonzero_literal(node: Typed) -> bool:
    value = _literal(node)
    return isinstance(value, (int, float)) and not isinstance(value, bool) and value != 0


def call_may_raise(node: TCall) -> bool:
    """Whether this call's faithful lowering (children aside) can raise for a row whose floats
    stay finite (a non-finite float result raises anyway: the engine's domain limit)."""
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


def _evaluated_null_test(value: Tree) -> Tree:
    """``value IS NULL``, evaluated on every row. MariaDB makes ``v IS NULL`` a constant 0
    without evaluating v when it infers v cannot be null (``COALESCE(x, FALSE)``), so a raise
    inside v would be skipped (generated seed 14, case 2203); a CASE with no ELSE is always
    nullable, and RAND() keeps it from being folded."""
    return t.is_null(t.case((t.ge(t.call("RAND"), t.number(0)), value)))


def evaluate_all(values: list[Tree], tree: Tree) -> Tree:
    """``tree`` after evaluating every value left to right (+ evaluates both operands)."""
    total = _evaluated_null_test(values[0])
    for value in values[1:]:
        total = t.add(total, _evaluated_null_test(value))
    return t.case((t.lt(total, t.number(0)), t.null()), default=tree)


SQL = _logic.ServerSql(D, raise_, bind, compare, call_may_raise, evaluate_all)


# ---------------------------------------------------------------------------------- numbers
def quotes_a_tag(trees: list[Tree]) -> bool:
    """Would a message quoting these trees contain 'rexpr:' or 'rexpr-limit:' (a guard's raise
    construct, or a user literal or column name with it)?"""
    for tree in trees:
        for node in tree.walk():
            text = node.this if isinstance(node, (exp.Literal, exp.Identifier)) else None
            if isinstance(text, str) and ("rexpr:" in text or LIMIT_TAG in text):
                return True
    return False


def _tag_free(node: TCall, args: list[Tree], native: Callable[..., Tree]) -> Tree:
    """``native(*args)``, whose own overflow raises 1690. That message quotes the expression,
    so operands that contain a tag are bound first: the message then quotes only the bound
    columns and is read by its error number, out_of_range."""
    if not quotes_a_tag(args):
        return native(*args)
    return bind(args, lambda refs: native(*refs), [a.type.kind for a in node.args], always=True)


def _native_arith(op: Callable[[Tree, Tree], Tree]) -> Lowerer:
    return lambda ctx, node, args: _tag_free(node, args, op)


def _nulls(*values: Tree) -> Tree:
    return t.or_(*[t.is_null(v) for v in values])


def _zero_guarded(op: Callable[[Tree, Tree], Tree], result: Kind) -> Lowerer:
    """a op b with a zero divisor raised as division_by_zero (MariaDB returns NULL)."""
    def lower(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
        if _nonzero_literal(node.args[1]):
            return _tag_free(node, args, op)
        zero = _double(0.0) if node.args[1].type.kind is F else t.number(0)
        return bind(args, lambda r: t.case((_nulls(*r), typed_null(result)),
                                           (t.eq(r[1], zero), raise_(ErrorClass.DIVISION_BY_ZERO, result)),
                                           default=op(*r)),
                    [a.type.kind for a in node.args], always=quotes_a_tag(args))
    return lower


def _modulo(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    return _zero_guarded(t.mod, node.type.kind)(ctx, node, args)  # sign of the dividend; fmod for DOUBLE


def _subtract(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    """a - b; BIGINT subtraction misses one overflow (0 - -2^63 gives -2^63, measured)."""
    if node.type.kind is not I:
        return _tag_free(node, args, t.sub)
    return bind(args, lambda r: t.case(
        (t.and_(t.eq(r[1], _int(INT64_MIN)), t.ge(r[0], t.number(0))), raise_(ErrorClass.OUT_OF_RANGE, I)),
        default=t.sub(*r)), [I, I], always=quotes_a_tag(args))


def _negate(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    return _tag_free(node, args, t.neg)  # BIGINT raises 1690 for -(-2^63)


def _truncated(x: Tree) -> Tree:
    return t.case((t.lt(x, _double(0.0)), t.call("CEIL", x)), default=t.call("FLOOR", x))


def _round_half_away(x: Tree) -> Tree:
    """round(x) half away from zero, exactly: x - trunc(x) is exact in binary64."""
    whole = _truncated(x)
    frac = t.sub(x, whole)
    return t.case((t.ge(frac, _double(0.5)), t.add(whole, _double(1.0))),
                  (t.le(frac, _double(-0.5)), t.sub(whole, _double(1.0))),
                  default=whole)


def _round(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    digits = node.args[1] if len(node.args) == 2 else None
    if node.type.kind is F:
        if digits is not None and not (isinstance(digits, TLiteral) and digits.value == 0):
            ctx.refuse(node, "round(float64, digits) with digits other than a literal 0: MariaDB's ROUND "
                             "rounds 2.675 to 2.68, not on the exact binary value, and no exact decimal "
                             "form of a DOUBLE is available")
        return _round_half_away(args[0])
    if digits is None:
        return args[0]

    def body(n: TCall, x: Tree, d: Tree) -> Tree:
        # ROUND on an integer is half away from zero and gives a DECIMAL; from 10^20 up every
        # int64 rounds to 0.
        rounded = t.call("ROUND", x, d)
        fits = t.and_(t.ge(rounded, t.number(INT64_MIN)), t.le(rounded, t.number(INT64_MAX)))
        return t.case((_nulls(x, d), typed_null(I)),
                      (t.ge(d, t.number(0)), x),
                      (t.lt(d, t.number(-19)), t.number(0)),
                      (t.not_(fits), raise_(ErrorClass.OUT_OF_RANGE, I)),
                      default=t.cast(rounded, "SIGNED", D))
    return bound(body)(ctx, node, args)


def _same_kind_identity(fn: str) -> Lowerer:
    return lambda ctx, node, args: args[0] if node.type.kind is I else t.call(fn, args[0])


def _guard_below(fn: str, strict: bool) -> Lowerer:
    """fn(x) with x < 0 (or <= 0) raised as invalid_argument (MariaDB returns NULL)."""
    def body(node: TCall, x: Tree) -> Tree:
        bad = t.lt(x, _double(0.0)) if strict else t.le(x, _double(0.0))
        return t.case((bad, raise_(ErrorClass.INVALID_ARGUMENT, F)), default=t.call(fn, x))
    return bound(body)


def _power(node: TCall, x: Tree, y: Tree) -> Tree:
    invalid = raise_(ErrorClass.INVALID_ARGUMENT, F)
    native = t.call("POW", x, y)  # x and y are bound columns here, so an overflow quotes no tag
    return t.case((_nulls(x, y), typed_null(F)),
                  (t.or_(t.eq(y, _double(0.0)), t.eq(x, _double(1.0))), _double(1.0)),
                  (t.and_(t.eq(x, _double(0.0)), t.lt(y, _double(0.0))), invalid),
                  (t.and_(t.lt(x, _double(0.0)), t.ne(y, t.call("FLOOR", y))), invalid),
                  default=native)


# ---------------------------------------------------------------------------------- strings
def _regex_class_literal(chars: str) -> str:
    return "[" + "".join(f"\\x{{{ord(c):X}}}" for c in dict.fromkeys(chars)) + "]"


_SIDES = {"trim": ("BOTH", True, True), "ltrim": ("LEADING", True, False), "rtrim": ("TRAILING", False, True)}


def _trim_pattern(char_class: Tree | str, left: bool, right: bool) -> Tree | str:
    """\\A[set]+ and/or [set]+\\z (PCRE's $ would also match before a final newline)."""
    parts: list[Tree | str] = []
    if left:
        parts += ["\\A", char_class, "+"]
    if right:
        parts += (["|"] if left else []) + [char_class, "+\\z"]
    if all(isinstance(p, str) for p in parts):
        return "".join(parts)  # type: ignore[arg-type]
    return t.call("CONCAT", *[t.string(p) if isinstance(p, str) else p for p in parts])


def _trim(fid: str) -> Lowerer:
    position, left, right = _SIDES[fid]

    def lower(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
        s = args[0]
        chars = node.args[1] if len(node.args) == 2 else None
        if chars is None:
            return exp.Trim(this=s, expression=t.string(" "), position=position)  # spaces only
        # A constant set counts as a literal: MariaDB compiles a constant pattern while preparing,
        # even in a branch no row takes, and '[]+' from an empty set is no pattern (generated
        # seed 12: ltrim(t, rtrim(cast(j as string), ltrim('  ')))).
        known, value = planner_value(chars)
        if known and isinstance(value, str):
            if value == "":
                return s
            if len(value) == 1:
                return exp.Trim(this=s, expression=t.string(value), position=position)
            pattern = _trim_pattern(_regex_class_literal(value), left, right)
            return _implicit(t.call("REGEXP_REPLACE", _text(s, BINARY_TEXT), t.string(pattern),  # type: ignore[arg-type]
                                    t.string("")))

        def runtime(s_: Tree, c: Tree) -> Tree:
            # a backslash makes any non-alphanumeric character literal in PCRE, inside a class
            # too (unescaped, '[.' or '[=' would start a POSIX collating element)
            escaped = t.call("REGEXP_REPLACE", _text(c, BINARY_TEXT), t.string("([^a-zA-Z0-9])"), t.string("\\\\\\1"))
            klass = t.call("CONCAT", t.string("["), escaped, t.string("]"))
            pattern = _trim_pattern(klass, left, right)
            return t.case((t.eq(t.call("CHAR_LENGTH", c), t.number(0)), s_),
                          default=_implicit(t.call("REGEXP_REPLACE", _text(s_, BINARY_TEXT), pattern, t.string(""))))
        return bind(args, lambda r: runtime(*r), [S, S])
    return lower


def _substring(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    if len(args) == 2:
        return bound(lambda n, s, start: t.call(
            "SUBSTRING", s, t.case((t.lt(start, t.number(1)), t.number(1)), default=start)))(ctx, node, args)

    first, count = _constant_int(node.args[1]), _constant_int(node.args[2])
    if first is not None and count is not None:
        # Both constant: decided here. MariaDB folds a constant length + start while preparing,
        # even in a branch no row takes, and 2^63 - 1 + 1 overflows there (generated seed 12,
        # cases 1709 and 2812).
        def constant(n: TCall, s: Tree, start: Tree, length: Tree) -> Tree:
            if count < 0:
                value = raise_(ErrorClass.INVALID_ARGUMENT, S)
            elif first >= 1:
                value = t.call("SUBSTRING", s, start, length)
            elif count + first <= 1:
                value = t.string("")
            else:
                value = t.call("SUBSTRING", s, t.number(1), t.number(count + first - 1))
            return t.case((t.is_null(s), typed_null(S)), default=value)
        return bound(constant)(ctx, node, args)

    def body(n: TCall, s: Tree, start: Tree, length: Tree) -> Tree:
        # ISO/IEC 9075-2 6.30; length + start cannot overflow once start < 1 (and one of them
        # is a row value, so nothing is folded while preparing).
        return t.case(
            (_nulls(s, start, length), typed_null(S)),
            (t.lt(length, t.number(0)), raise_(ErrorClass.INVALID_ARGUMENT, S)),
            (t.ge(start, t.number(1)), t.call("SUBSTRING", s, start, length)),
            (t.le(t.add(length, start), t.number(1)), t.string("")),
            default=t.call("SUBSTRING", s, t.number(1), t.sub(t.add(length, start), t.number(1))))
    return bound(body)(ctx, node, args)


def _replace_all(s: Tree, pairs: tuple[tuple[str, str], ...]) -> Tree:
    for old, new in pairs:
        s = t.call("REPLACE", s, t.string(old), t.string(new))
    return s


_SENTINEL = "\U0010ffff"  # a noncharacter: where the appended dictionary starts


def _expand_specials(s: Tree, pairs: tuple[tuple[str, str], ...]) -> Tree:
    """Replace each character of ``pairs`` by its expansion in one REGEXP_REPLACE (a chain of
    100 nested REPLACE calls is deeper than SQL tooling reads back): a dictionary
    '|<char><expansion>|...' is appended after a sentinel, each special character finds its
    expansion with a lookahead, and the dictionary is cut off again by length. Nothing in the
    dictionary is replaced, for no sentinel follows it. The lookahead skips to the first
    sentinel (fast); text that holds the sentinel itself takes a greedy lookahead instead,
    which finds the last one, the appended one."""
    dictionary = _SENTINEL + "".join(f"|{c}{expansion}" for c, expansion in pairs)
    keys = "[" + "".join(f"\\x{{{ord(c):X}}}" for c, _ in pairs) + "]"
    fast = f"(?s)({keys})(?=[^{_SENTINEL}]*{_SENTINEL}(?:[^|]*\\|)*?\\1([^|]*))"
    robust = f"(?s)({keys})(?=.*{_SENTINEL}.*?\\|\\1([^|]*))"

    def cut(refs: list[Tree]) -> Tree:
        [r] = refs
        return t.call("LEFT", r, t.sub(t.call("CHAR_LENGTH", r), t.number(len(dictionary))))

    def replaced(text: Tree, pattern: str) -> Tree:
        joined = _text(t.call("CONCAT", text, t.string(dictionary)), BINARY_TEXT)
        return bind([t.call("REGEXP_REPLACE", joined, t.string(pattern), t.string("\\2"))], cut, [S])

    def body(refs: list[Tree]) -> Tree:
        [text] = refs
        # the lookup costs a regular expression over the dictionary: only for text that needs it
        has_key = t.gt(t.call("REGEXP_INSTR", _text(text, BINARY_TEXT), t.string(keys)), t.number(0))
        has_sentinel = t.gt(t.call("LOCATE", _text(t.string(_SENTINEL), BINARY_TEXT), text), t.number(0))
        return t.case((t.not_(has_key), text), (has_sentinel, replaced(text, robust)), default=replaced(text, fast))
    return bind([s], body, [S])


def _upper(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    expanded = _expand_specials(args[0], cm.special("upper"))
    return _implicit(t.call("UPPER", _text(expanded, UNICODE_CASE)))


def _lower(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    def body(n: TCall, s: Tree) -> Tree:
        expanded = _replace_all(_text(s, BINARY_TEXT), cm.special("lower"))
        sigma = t.call("REGEXP_REPLACE", expanded, t.string(cm.final_sigma_pattern()),
                       t.string("\\1" + cm.FINAL_SIGMA))
        has_sigma = t.gt(t.call("LOCATE", _text(t.string(cm.SIGMA), BINARY_TEXT), s), t.number(0))
        return _implicit(t.call("LOWER", _text(t.case((has_sigma, sigma), default=expanded), UNICODE_CASE)))
    return bound(body)(ctx, node, args)


def _edge_match(fn: str) -> Lowerer:
    return bound(lambda node, s, part: t.eq(_text(t.call(fn, s, t.call("CHAR_LENGTH", part))), part))


# ---------------------------------------------------------------------------------- like
def _static_like_error(node: TCall) -> bool | None:
    if len(node.args) < 3:
        return False
    pattern, escape = node.args[1], node.args[2]
    if not (isinstance(pattern, TLiteral) and isinstance(escape, TLiteral)):
        return None
    if pattern.value is None or escape.value is None:
        return False
    return isinstance(like_regex(pattern.value, escape.value), RowError)  # type: ignore[arg-type]


def backslash_pattern(pattern: str, escape: str | None) -> str:
    """The same LIKE pattern written with backslash as its escape (the pattern is valid)."""
    out = []
    i = 0
    while i < len(pattern):
        ch = pattern[i]
        if escape is not None and ch == escape:
            nxt = pattern[i + 1]
            out.append("\\" + nxt if nxt in "%_\\" else nxt)
            i += 2
            continue
        out.append("\\\\" if ch == "\\" else ch)
        i += 1
    return "".join(out)


def _like_match(s: Tree, pattern: Tree) -> Tree:
    return t.like(_text(s, BINARY_TEXT), pattern, t.string("\\"))


def _like(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    known, value = _logic.literal_value(node.args[1])
    if len(args) == 2:
        if known and isinstance(value, str):
            return _like_match(args[0], t.string(backslash_pattern(value, None)))
        return _like_match(args[0], t.call("REPLACE", args[1], t.string("\\"), t.string("\\\\")))
    static = _static_like_error(node)
    if isinstance(node.args[1], TLiteral) and isinstance(node.args[2], TLiteral) and \
            (node.args[1].value is None or node.args[2].value is None):
        return t.case((t.is_null(args[0]), typed_null(B)), default=typed_null(B))  # null pattern or escape
    if static is True:
        return t.case((t.is_null(args[0]), typed_null(B)), default=raise_(ErrorClass.INVALID_ESCAPE, B))
    if static is False:
        escape = node.args[2].value  # type: ignore[union-attr]
        return _like_match(args[0], t.string(backslash_pattern(value, escape)))  # type: ignore[arg-type]

    def body(n: TCall, s: Tree, p: Tree, e: Tree) -> Tree:
        rest = t.call("REPLACE", p, t.call("CONCAT", e, e), t.string(""))
        rest = t.call("REPLACE", rest, t.call("CONCAT", e, t.string("%")), t.string(""))
        rest = t.call("REPLACE", rest, t.call("CONCAT", e, t.string("_")), t.string(""))
        invalid = t.or_(t.ne(t.call("CHAR_LENGTH", e), t.number(1)),
                        t.gt(t.call("LOCATE", _text(e, BINARY_TEXT), rest), t.number(0)))
        doubled = t.call("REPLACE", p, t.string("\\"), t.string("\\\\"))
        # E(.) -> \1 left to right (the validated pattern pairs every escape with its successor)
        rewritten = t.call("REGEXP_REPLACE", _text(doubled, BINARY_TEXT),
                           t.call("CONCAT", t.string("(?s)\\Q"), e, t.string("\\E(.)")), t.string("\\\\\\1"))
        converted = t.case((t.eq(_text(e, BINARY_TEXT), t.string("\\")), p), default=rewritten)
        return t.case((_nulls(s, p, e), typed_null(B)),
                      (invalid, raise_(ErrorClass.INVALID_ESCAPE, B)),
                      default=_like_match(s, converted))
    return bound(body)(ctx, node, args)


# ---------------------------------------------------------------------------------- casts
OPS = nt.TextOps(
    length=lambda s: t.call("CHAR_LENGTH", s),
    substr=lambda s, start, length: t.call("SUBSTRING", s, start, *([length] if length is not None else [])),
    find=lambda s, lit: t.call("LOCATE", _text(t.string(lit), BINARY_TEXT), s),
    concat=lambda *parts: t.call("CONCAT", *parts),
    strip_left=lambda s, ch: exp.Trim(this=s, expression=t.string(ch), position="LEADING"),
    strip_right=lambda s, ch: exp.Trim(this=s, expression=t.string(ch), position="TRAILING"),
    repeat=lambda s, n: t.call("REPEAT", s, n),
    big_int=lambda s: t.cast(s, "DECIMAL(65, 0)", D),
    int_text=lambda n: t.cast(n, "CHAR", D),
    text_compare=lambda op, a, b: t.COMPARE[op](_text(a), b),
    bind=bind,
)

_INT_TEXT = r"\A[+-]?[0-9]+\z"
_FLOAT_TEXT = (r"\A[+-]?(([0-9]+(\.[0-9]*)?|\.[0-9]+)([eE][+-]?[0-9]+)?|[iI][nN][fF]([iI][nN][iI][tT][yY])?"
               r"|[nN][aA][nN])\z")
_DATE_TEXT = r"\A[0-9]{4}-[0-9]{2}-[0-9]{2}\z"
_TIMESTAMP_TEXT = r"\A[0-9]{4}-[0-9]{2}-[0-9]{2}([ Tt][0-9]{2}:[0-9]{2}:[0-9]{2}(\.[0-9]{1,6})?)?\z"


def _spaces_trimmed(s: Tree) -> Tree:
    return exp.Trim(this=s, expression=t.string(" "), position="BOTH")


def _string_to_int(b: Tree) -> Tree:
    digits = t.call("REGEXP_REPLACE", b, t.string("^[+-]"), t.string(""))
    significant = exp.Trim(this=digits, expression=t.string("0"), position="LEADING")
    limit = t.case((_matches(b, "^-"), t.string(str(-INT64_MIN))), default=t.string(str(INT64_MAX)))
    too_big = t.or_(t.gt(t.call("CHAR_LENGTH", significant), t.number(19)),
                    t.and_(t.eq(t.call("CHAR_LENGTH", significant), t.number(19)), t.gt(_text(significant), limit)))
    return t.case((t.is_null(b), typed_null(I)),
                  (t.not_(_matches(b, _INT_TEXT)), raise_(ErrorClass.INVALID_CAST, I)),
                  (too_big, raise_(ErrorClass.OUT_OF_RANGE, I)),
                  default=t.cast(b, "SIGNED", D))


def _string_to_float(b: Tree) -> Tree:
    lowered = t.call("LOWER", _text(b, BINARY_TEXT))
    unsigned = t.call("REGEXP_REPLACE", lowered, t.string("^[+-]"), t.string(""))
    checked = nt.numeral_parts(OPS, unsigned, lambda sig, p: t.case(
        (nt.overflows(OPS, sig, p), raise_(ErrorClass.OUT_OF_RANGE, F)), default=t.cast(b, "DOUBLE", D)))
    return t.case((t.is_null(b), typed_null(F)),
                  (t.not_(_matches(b, _FLOAT_TEXT)), raise_(ErrorClass.INVALID_CAST, F)),
                  # 'inf' and 'nan' are valid but DOUBLE cannot hold them: the engine limit
                  (_matches(b, "[iInN]"), limit("non_finite", F)),
                  default=checked)


def _valid_date(y: Tree, m: Tree, d: Tree) -> Tree:
    leap = t.or_(t.and_(t.eq(t.mod(y, t.number(4)), t.number(0)), t.ne(t.mod(y, t.number(100)), t.number(0))),
                 t.eq(t.mod(y, t.number(400)), t.number(0)))
    days = t.case((t.in_list(m, [t.number(4), t.number(6), t.number(9), t.number(11)]), t.number(30)),
                  (t.eq(m, t.number(2)), t.case((leap, t.number(29)), default=t.number(28))),
                  default=t.number(31))
    return t.and_(t.ge(y, t.number(1)), t.ge(m, t.number(1)), t.le(m, t.number(12)),
                  t.ge(d, t.number(1)), t.le(d, days))


def _field(s: Tree, start: int, length: int) -> Tree:
    return t.cast(t.call("SUBSTRING", s, t.number(start), t.number(length)), "SIGNED", D)


def _string_to_date(b: Tree, target: Kind) -> Tree:
    bad = raise_(ErrorClass.INVALID_DATETIME, target)
    ok = _valid_date(_field(b, 1, 4), _field(b, 6, 2), _field(b, 9, 2))
    text = b
    if target is TS:
        has_time = t.gt(t.call("CHAR_LENGTH", b), t.number(10))
        time_ok = t.and_(t.le(_field(b, 12, 2), t.number(23)), t.le(_field(b, 15, 2), t.number(59)),
                         t.le(_field(b, 18, 2), t.number(59)))
        ok = t.and_(ok, t.or_(t.not_(has_time), time_ok))
        text = t.case((has_time, t.call("CONCAT", t.call("LEFT", b, t.number(10)), t.string(" "),
                                        t.call("SUBSTRING", b, t.number(12)))), default=b)
    regex = _DATE_TEXT if target is DATE else _TIMESTAMP_TEXT
    return t.case((t.is_null(b), typed_null(target)),
                  (t.not_(_matches(b, regex)), bad),
                  (t.not_(ok), bad),
                  default=t.cast(text, CAST_TYPES[target], D))


def _float_to_string(x: Tree) -> Tree:
    # The text drops the sign of zero; atan2(-0.0, -1) is -pi. The test reads x itself: a
    # bound copy (through JSON) has lost the sign already.
    negative_zero = t.and_(t.eq(x, _double(0.0)), t.lt(t.call("ATAN2", x, _double(-1.0)), _double(0.0)))

    def body(refs: list[Tree]) -> Tree:
        text, zero_sign = refs
        negative = t.or_(_matches(text, "^-"), t.eq(zero_sign, t.number(1)))
        unsigned = t.call("REGEXP_REPLACE", text, t.string("^-"), t.string(""))
        return t.case((t.is_null(text), typed_null(S)),
                      default=nt.numeral_parts(OPS, unsigned, lambda sig, p: nt.python_repr(OPS, negative, sig, p)))
    return bind([t.cast(x, "CHAR", D), negative_zero], body, [S, B])


def _timestamp_to_string(ts: Tree) -> Tree:
    digits = exp.Trim(this=t.call("DATE_FORMAT", ts, t.string("%f")), expression=t.string("0"), position="TRAILING")
    fraction = t.case((t.eq(t.call("MICROSECOND", ts), t.number(0)), t.string("")),
                      default=t.call("CONCAT", t.string("."), digits))
    return t.case((t.is_null(ts), typed_null(S)),
                  default=t.call("CONCAT", t.call("DATE_FORMAT", ts, t.string("%Y-%m-%d %H:%i:%s")), fraction))


def _float_to_int(x: Tree) -> Tree:
    fits = t.and_(t.ge(x, _double(-(2.0**63))), t.lt(x, _double(2.0**63)))
    whole = _truncated(x)
    frac = t.sub(x, whole)
    step = t.case((t.ge(frac, _double(0.5)), t.number(1)), (t.le(frac, _double(-0.5)), t.number(-1)),
                  default=t.number(0))
    return t.case((t.is_null(x), typed_null(I)),
                  (t.not_(fits), raise_(ErrorClass.OUT_OF_RANGE, I)),
                  default=t.add(t.cast(whole, "SIGNED", D), step))


def _cast(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    source, target = node.args[0].type.kind, node.type.kind
    x = args[0]
    if source is target:
        return x
    pair = (source, target)
    def once(kind: Kind, value: Tree, body: Callable[[Tree], Tree]) -> Callable[[], Tree]:
        return lambda: bind([value], lambda r: body(r[0]), [kind])

    simple = {
        (I, F): lambda: t.cast(x, "DOUBLE", D),
        (F, I): once(F, x, _float_to_int),
        (B, I): lambda: t.cast(x, "SIGNED", D),
        (I, B): lambda: t.ne(x, t.number(0)),
        (S, I): once(S, _spaces_trimmed(x), _string_to_int),
        (S, F): once(S, _spaces_trimmed(x), _string_to_float),
        (S, B): once(S, _spaces_trimmed(x), _string_to_bool),
        (S, DATE): once(S, _spaces_trimmed(x), lambda b: _string_to_date(b, DATE)),
        (S, TS): once(S, _spaces_trimmed(x), lambda b: _string_to_date(b, TS)),
        (I, S): lambda: t.cast(x, "CHAR", D),
        (F, S): lambda: _float_to_string(x),
        (B, S): once(B, x, lambda b: t.case((b, t.string("TRUE")), (t.not_(b), t.string("FALSE")),
                                            default=typed_null(S))),
        (DATE, S): lambda: t.call("DATE_FORMAT", x, t.string("%Y-%m-%d")),
        (TS, S): once(TS, x, _timestamp_to_string),
        (DATE, TS): lambda: t.cast(x, "DATETIME(6)", D),
        (TS, DATE): lambda: t.cast(x, "DATE", D),
    }
    build = simple.get(pair)
    if build is None:
        ctx.refuse(node, f"no cast from {source.value} to {target.value}")
    return build()  # type: ignore[misc]


def _string_to_bool(b: Tree) -> Tree:
    lowered = _text(t.call("LOWER", _text(b, BINARY_TEXT)))
    return t.case((t.is_null(b), typed_null(B)),
                  (t.eq(lowered, t.string("true")), t.boolean(True)),
                  (t.eq(lowered, t.string("false")), t.boolean(False)),
                  default=raise_(ErrorClass.INVALID_CAST, B))


# ---------------------------------------------------------------------------------- tables
_LAZY = frozenset({"and", "or", "case", "coalesce", "in", "between"})  # absorb or skip errors by design


def _evaluate_all_first(node: TCall, args: list[Tree], tree: Tree) -> Tree:
    """When an argument after the first can raise, evaluate every argument (left to right)
    before the lowering can short-circuit on a null, as the reference does."""
    if node.function in _LAZY or len(args) < 2:
        return tree
    if not any(_logic.may_raise(a, SQL) for a in node.args[1:]):
        return tree
    return evaluate_all(args, tree)


def _guarded(lowerer: Lowerer) -> Lowerer:
    def lower(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
        # A constant subtree becomes its value (or the raise construct): the optimizer then has
        # nothing to fold, and a NaN or infinite constant is the DOUBLE domain limit.
        constant, value = planner_value(node)
        if constant:
            if isinstance(value, RowError):
                return raise_(value.error, node.type.kind)
            if isinstance(value, float) and not math.isfinite(value):
                return limit("non_finite", node.type.kind)
            return literal(value, node.type)
        return _evaluate_all_first(node, args, lowerer(ctx, node, args))
    return lower


def _case(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    pairs = [(args[i], args[i + 1]) for i in range(0, len(args) - 1, 2)]
    return t.case(*pairs, default=args[-1])


def _call(fn: str) -> Lowerer:
    return lambda ctx, node, args: t.call(fn, *args)


def _is_distinct(node: TCall, a: Tree, b: Tree) -> Tree:
    left = _text(a) if node.args[0].type.kind is S else a
    return t.not_(exp.NullSafeEQ(this=t.paren(left), expression=t.paren(b)))


_FAITHFUL: dict[str, Lowerer] = {
    "add": _native_arith(t.add),          # BIGINT and DOUBLE: 1690 on overflow
    "subtract": _subtract,
    "multiply": _native_arith(t.mul),
    "divide": _zero_guarded(t.div, F),
    "modulo": _modulo,
    "negate": _negate,
    "div": _zero_guarded(lambda a, b: exp.IntDiv(this=t.paren(a), expression=t.paren(b)), I),
    "abs": lambda ctx, node, args: _tag_free(node, args, lambda x: t.call("ABS", x)),
    "round": _round,
    "floor": _same_kind_identity("FLOOR"),
    "ceil": _same_kind_identity("CEIL"),
    "sqrt": _guard_below("SQRT", strict=True),
    "power": bound(_power),
    "ln": _guard_below("LN", strict=False),
    "exp": lambda ctx, node, args: _tag_free(node, args, lambda x: t.call("EXP", x)),
    "is_nan": lambda ctx, node, args: t.ne(args[0], args[0]),  # DOUBLE has no NaN: false, or null
    **{op: (lambda op: lambda ctx, node, args: compare(op, node.args[0].type.kind, *args))(op) for op in t.COMPARE},
    "is_distinct_from": bound(_is_distinct),
    # coalesce(cast(i % j as bool), false) is null was folded to 0 with the modulo by zero never
    # evaluated (generated seed 16, case 839)
    "is_null": lambda ctx, node, args: (_evaluated_null_test(args[0]) if _logic.may_raise(node.args[0], SQL)
                                        else t.is_null(args[0])),
    "and": lambda ctx, node, args: _logic.chain(ctx, node, args, SQL, conjunction=True),
    "or": lambda ctx, node, args: _logic.chain(ctx, node, args, SQL, conjunction=False),
    "not": lambda ctx, node, args: t.not_(args[0]),
    "coalesce": _call("COALESCE"),
    "nullif": bound(lambda node, a, b: t.case((compare("eq", node.args[0].type.kind, a, b),
                                              typed_null(node.type.kind)), default=a)),
    "case": _case,
    "in": lambda ctx, node, args: _logic.in_list(ctx, node, args, SQL),
    "between": lambda ctx, node, args: _logic.between(ctx, node, args, SQL),
    "like": _like,
    "trim": _trim("trim"),
    "ltrim": _trim("ltrim"),
    "rtrim": _trim("rtrim"),
    "substring": _substring,
    "upper": _upper,
    "lower": _lower,
    "length": _call("CHAR_LENGTH"),
    "octet_length": _call("OCTET_LENGTH"),
    "concat_op": _call("CONCAT"),
    "concat": lambda ctx, node, args: t.call("CONCAT_WS", t.string(""), *args),  # skips nulls
    # REPLACE(s, 'absent', NULL) is s (measured): nulls are decided first
    "replace": bound(lambda node, s, old, new: t.case((_nulls(s, old, new), typed_null(S)),
                                                      default=t.call("REPLACE", s, old, new))),
    "position": lambda ctx, node, args: t.call("LOCATE", _text(args[0], BINARY_TEXT), args[1]),
    "starts_with": _edge_match("LEFT"),
    "ends_with": _edge_match("RIGHT"),
    "cast": _cast,
    "year": _call("YEAR"),
    "month": _call("MONTH"),
    "day": _call("DAYOFMONTH"),
}
FAITHFUL: dict[str, Lowerer] = {fid: _guarded(lowerer) for fid, lowerer in _FAITHFUL.items()}


def _native_trim(position: str) -> Lowerer:
    return lambda ctx, node, args: exp.Trim(this=args[0], expression=args[1] if len(args) > 1 else None,
                                            position=position)


def _native_cast(ctx: LowerContext, node: TCall, args: list[Tree]) -> Tree:
    if node.args[0].type.kind is node.type.kind:
        return args[0]
    return t.cast(args[0], CAST_TYPES[node.type.kind], D)


def _native_binary(kind: type[exp.Binary]) -> Lowerer:
    return lambda ctx, node, args: kind(this=t.paren(args[0]), expression=t.paren(args[1]))


NATIVE: dict[str, Lowerer] = {
    "add": _native_binary(exp.Add), "subtract": _native_binary(exp.Sub), "multiply": _native_binary(exp.Mul),
    "divide": lambda ctx, node, args: t.div(args[0], args[1]),
    "modulo": _native_binary(exp.Mod),
    "negate": lambda ctx, node, args: t.neg(args[0]),
    "div": lambda ctx, node, args: exp.IntDiv(this=t.paren(args[0]), expression=t.paren(args[1])),
    "abs": _call("ABS"), "round": _call("ROUND"), "floor": _call("FLOOR"), "ceil": _call("CEIL"),
    "sqrt": _call("SQRT"), "power": _call("POW"), "ln": _call("LN"), "exp": _call("EXP"),
    "is_nan": lambda ctx, node, args: t.ne(args[0], args[0]),
    **{op: (lambda fn: lambda ctx, node, args: fn(args[0], args[1]))(fn) for op, fn in t.COMPARE.items()},
    "is_distinct_from": lambda ctx, node, args: t.not_(exp.NullSafeEQ(this=t.paren(args[0]),
                                                                      expression=t.paren(args[1]))),
    "is_null": lambda ctx, node, args: t.is_null(args[0]),
    "and": lambda ctx, node, args: t.and_(*args),
    "or": lambda ctx, node, args: t.or_(*args),
    "not": lambda ctx, node, args: t.not_(args[0]),
    "coalesce": _call("COALESCE"),
    "nullif": _call("NULLIF"),
    "case": _case,
    "in": lambda ctx, node, args: t.in_list(args[0], args[1:]),
    "between": lambda ctx, node, args: exp.Between(this=t.paren(args[0]), low=t.paren(args[1]), high=t.paren(args[2])),
    "like": lambda ctx, node, args: (t.like(*args) if len(args) == 3
                                     else exp.Like(this=t.paren(args[0]), expression=t.paren(args[1]))),
    "trim": _native_trim("BOTH"), "ltrim": _native_trim("LEADING"), "rtrim": _native_trim("TRAILING"),
    "substring": _call("SUBSTRING"),
    "upper": _call("UPPER"), "lower": _call("LOWER"),
    "length": _call("CHAR_LENGTH"), "octet_length": _call("OCTET_LENGTH"),
    "concat_op": _call("CONCAT"), "concat": _call("CONCAT"), "replace": _call("REPLACE"),
    "position": lambda ctx, node, args: t.call("LOCATE", args[0], args[1]),
    "starts_with": lambda ctx, node, args: t.eq(t.call("LEFT", args[0], t.call("CHAR_LENGTH", args[1])), args[1]),
    "ends_with": lambda ctx, node, args: t.eq(t.call("RIGHT", args[0], t.call("CHAR_LENGTH", args[1])), args[1]),
    "cast": _native_cast,
    "year": _call("YEAR"), "month": _call("MONTH"), "day": _call("DAYOFMONTH"),
}

_FINITE = ("float64 values must stay finite: DOUBLE has no NaN or ±inf, so a row whose result would "
           "be one is an engine-limit row (rexpr-limit:non_finite), not a value")
_FINITE_IDS = frozenset(("add", "subtract", "multiply", "divide", "power", "exp"))
_CONDITIONAL = {
    **{fid: _FINITE for fid in _FINITE_IDS},
    "round": "float64 only without digits (or digits a literal 0): ROUND is not exact on the binary "
             "value; int64 always",
    "cast": "string -> float64 of 'inf' and 'nan' is an engine-limit row (DOUBLE cannot hold them); "
            "float64 -> string of a -0.0 that reached a column reads '0.0' (DOUBLE stores 0.0)",
    "is_nan": "always false for stored values (DOUBLE stores NaN as NULL)",
    "upper": "needs the utf8mb4_uca1400_as_cs collation (MariaDB 10.10 or later); characters assigned "
             "after Python's Unicode version may map differently",
    "lower": "needs the utf8mb4_uca1400_as_cs collation (MariaDB 10.10 or later); characters assigned "
             "after Python's Unicode version may map differently",
    "and": "faithful when at most one operand can raise an error",
    "or": "faithful when at most one operand can raise an error",
    "in": "faithful when at most one list item can raise an error",
    "between": "faithful unless both bounds can raise an error",
}

CAPABILITIES: dict[str, Capability] = {
    fid: Capability("conditional", _CONDITIONAL[fid]) if fid in _CONDITIONAL else Capability("faithful")
    for fid in FAITHFUL
}

# Measured on MariaDB 10.11 (tests/test_sql_servers.py runs each one).
_X = (("x", "float64"),)
_A = (("a", "int64"),)
_AB = (("a", "int64"), ("b", "int64"))
_S = (("s", "string"),)
_ST = (("s", "string"), ("t", "string"))
DIVERGENCES: tuple[Divergence, ...] = (
    Divergence("eq", "s = 'a'", "utf8mb4_bin pads with spaces, so 'a ' = 'a' is true", _S, (("a ",),)),
    Divergence("starts_with", "starts_with(s, 'a ')", "the padding comparison makes 'a' start with 'a '", _S,
               (("a",),)),
    Divergence("divide", "x / 0.0", "division by zero is NULL (a warning) instead of an error", _X, ((1.0,),)),
    Divergence("modulo", "a % 0", "a zero divisor gives NULL instead of an error", _A, ((7,),)),
    Divergence("div", "div(a, 0)", "a zero divisor gives NULL instead of an error", _A, ((7,),)),
    Divergence("sqrt", "sqrt(x)", "sqrt of a negative number is NULL instead of an error", _X, ((-1.0,),)),
    Divergence("ln", "ln(x)", "ln(0) is NULL instead of an error", _X, ((0.0,),)),
    Divergence("subtract", "a - b", "0 - (-2^63) wraps to -2^63 instead of an overflow error", _AB,
               ((0, -(2**63)),)),
    Divergence("upper", "upper(s)", "'ß' keeps its case, and utf8mb4_bin's tables leave 'ƀ' lower case", _S,
               (("ß",), ("ƀ",))),
    Divergence("lower", "lower(s)", "no final sigma: 'ΣΑΣ' becomes 'σασ'", _S, (("ΣΑΣ",),)),
    Divergence("like", "s like 'a\\b'", "backslash is LIKE's default escape, so the pattern means 'ab'", _S,
               (("a\\b",),)),
    Divergence("trim", "trim(s, 'xy')", "TRIM removes the string 'xy', not the characters x and y", _S,
               (("yxay",),)),
    Divergence("substring", "substring(s, 0, 2)", "a start before 1 gives '' instead of the ISO rule", _S,
               (("abc",),)),
    Divergence("substring", "substring(s, -1)", "a negative start counts from the end", _S, (("abc",),)),
    Divergence("concat", "concat(s, t)", "CONCAT is null when an argument is null", _ST, (("a", None),)),
    Divergence("round", "round(x)", "ROUND of a DOUBLE is half to even (2.5 -> 2)", _X, ((2.5,),)),
    Divergence("round", "round(x, 2)", "ROUND(2.675, 2) is 2.68: it does not round the exact binary value", _X,
               ((2.675,),)),
    Divergence("cast", "cast(x as int64)", "CAST(2.5 AS SIGNED) is 2", _X, ((2.5,),)),
    Divergence("cast", "cast(s as int64)", "a non-numeral becomes 0 with a warning instead of an error", _S,
               (("abc",),)),
    Divergence("cast", "cast(s as float64)", "a numeral too large becomes DBL_MAX with a warning", _S, (("1e400",),)),
    Divergence("cast", "cast(x as string)", "DOUBLE text is '1' and '1e20', not Python's '1.0' and '1e+20'", _X,
               ((1.0,), (1e20,))),
)

PROFILE = DialectProfile(
    name="mariadb",
    sqlglot_dialect=D,
    session_settings=(  # applied by the runner, in this order
        "SET NAMES utf8mb4 COLLATE utf8mb4_bin",
        f"SET SESSION sql_mode = '{SQL_MODE}'",
        "SET SESSION time_zone = '+00:00'",
    ),
    faithful=FAITHFUL,
    native=NATIVE,
    capabilities=CAPABILITIES,
    literal=literal,
    notes=(
        "sql_mode must not contain NO_BACKSLASH_ESCAPES (literals escape backslashes) or "
        "PIPES_AS_CONCAT-dependent SQL (CONCAT is used).",
        "Needs MariaDB 10.10 or later for the utf8mb4_uca1400_as_cs collation (Unicode 14 case mapping).",
        "Errors are raised as a BIGINT overflow (1690) whose message quotes a 'rexpr:<class>' literal; "
        "engine limits quote 'rexpr-limit:non_finite', and the engine's own DOUBLE overflow is the same limit.",
        "No NaN, ±inf or -0.0 in DOUBLE: see the conditional capabilities.",
    ),
    divergences=DIVERGENCES,
    data_dependent=lambda node: _FINITE if node.function in _FINITE_IDS and node.type.kind is F else None,
)
