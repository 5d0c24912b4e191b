"""Lowerings shared by the in-process engines (DuckDB, SQLite), where the reference's error
rules meet SQL's evaluation order.

Three rules carry most of the weight:

* Guards evaluate every argument, left to right, before any check of their own: the first
  ``WHEN`` is ``<any argument is null>``, written as a function call (``greatest``/``max`` of
  ``x IS NULL`` terms) because function arguments are evaluated in order while ``AND``/``OR``
  may be reordered (DuckDB adapts conjunction order at run time). So when two arguments would
  both fail, the leftmost one's error is the one raised, as in the reference.
* ``and``/``or`` let a decisive operand (false for and, true for or) absorb another operand's
  error. SQL cannot catch an error, so the risky operands are either probed with the engine's
  non-raising form (DuckDB ``TRY``) or, without one, at most one operand may be risky and is
  evaluated only when the others do not decide (SQLite).
* "Risky" is read off the lowered SQL: a subtree is risky exactly when it contains the
  engine's raise construct, because every engine-native error is guarded into one.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Sequence

from sqlglot import exp

from rexpr.catalogue.model import ErrorClass
from rexpr.reference.functions import like_regex
from rexpr.sql.dialects import _trees as t
from rexpr.sql.profile import LowerContext
from rexpr.typed import TCall, TLiteral, Typed
from rexpr.types import INT64_MAX, INT64_MIN, Kind
from rexpr.values import RowError

Tree = t.Tree
B, I, F, S, D, T = Kind.BOOL, Kind.INT64, Kind.FLOAT64, Kind.STRING, Kind.DATE, Kind.TIMESTAMP


@dataclass(frozen=True)
class Engine:
    """What the shared lowerings need from one engine."""

    name: str
    raise_: Callable[[ErrorClass, Kind], Tree]      # a value of the kind whose evaluation raises
    is_raise: Callable[[exp.Expression], bool]      # is this node the raise construct?
    null: Callable[[Kind], Tree]                    # a typed null
    int_literal: Callable[[int], Tree]
    greatest: str                                   # n-ary function that evaluates all its arguments
    int_div: Callable[[Tree, Tree], Tree]           # int64 division truncating toward zero
    probe: Callable[[Tree], Tree] | None = None     # a form that is null instead of raising
    compare: Callable[[str, Kind, Tree, Tree], Tree] | None = None  # faithful eq/ne/lt/...
    # ``x IS NULL`` that evaluates ``x`` whatever the optimizer knows about it (DuckDB folds
    # IS NULL from statistics, dropping an error raised inside x: see _null_operands)
    is_null: Callable[[Tree], Tree] = t.is_null


def may_raise(tree: Tree, engine: Engine) -> bool:
    return any(engine.is_raise(node) for node in tree.walk())


def any_null(engine: Engine, args: Sequence[Tree]) -> Tree:
    """True when some argument is null; evaluates every argument, in order."""
    tests = [engine.is_null(a) for a in args]
    return tests[0] if len(tests) == 1 else t.call(engine.greatest, *tests)


def guarded(engine: Engine, node: TCall, args: Sequence[Tree], checks: Sequence[tuple[Tree, ErrorClass]],
            value: Tree, *, null_result: Tree | None = None, checks_reject_nulls: bool = False,
            nulls_first: bool = False) -> Tree:
    """``CASE WHEN <any arg null> THEN NULL WHEN check THEN <raise> ... ELSE value END``.

    The null clause is needed when a check could fire with some argument null, when ``value``
    itself does not give null for a null argument (``nulls_first``), whenever two
    arguments can raise, to fix their order, and when an argument can raise beside a check. It is left out for one argument (each check is
    then null when the argument is), when no argument can be null, and when the caller says
    no check can fire with a null argument."""
    kind = node.type.kind
    pairs: list[tuple[Tree, Tree]] = []
    flags = [(a, may_raise(a, engine), typed.type.nullable) for a, typed in zip(args, node.args)]
    risky = sum(1 for _, r, _ in flags if r)
    nullable = any(n for _, _, n in flags) and (nulls_first or (bool(checks) and not checks_reject_nulls))
    # A check may read only some arguments (``b = 0``), and a ``nulls_first`` value may not read
    # them all (ends_with(s, '') is true without s); when an argument can raise, its error must
    # still come first, as in the reference, so every argument is evaluated first.
    if len(args) > 1 and (nullable or risky > 1 or (risky and (checks or nulls_first))):
        # Arguments that can neither be null nor raise need no test.
        tested = [a for a, r, n in flags if r or n] or [args[0]]
        pairs.append((any_null(engine, tested), null_result if null_result is not None else engine.null(kind)))
    pairs += [(check, engine.raise_(error, kind)) for check, error in checks]
    return t.case(*pairs, default=value) if pairs else value


def null_after(engine: Engine, args: Sequence[Tree]) -> Tree:
    """NULL, but only after every argument has been evaluated in order (an error in one of
    them still counts, as in the reference)."""
    return t.case((any_null(engine, args), t.null()), default=t.null())


def ordered(engine: Engine, node: TCall, args: Sequence[Tree], value: Tree) -> Tree:
    """``value`` evaluates the arguments out of order (or more than once): when two of them
    can raise, evaluate all of them first, in order."""
    if sum(1 for a in args if may_raise(a, engine)) > 1:
        return t.case((any_null(engine, args), engine.null(node.type.kind)), default=value)
    return value


def literal_of(node: Typed) -> tuple[bool, object]:
    return (True, node.value) if isinstance(node, TLiteral) else (False, None)


# ------------------------------------------------------------------------------ logic
def chain(ctx: LowerContext, node: TCall, operands: Sequence[tuple[Tree, bool]], engine: Engine,
          conjunction: bool) -> Tree:
    """and/or over (tree, risky) operands with the reference's absorption."""
    trees = [tree for tree, _ in operands]
    join = t.and_ if conjunction else t.or_
    risky = [i for i, (_, r) in enumerate(operands) if r]
    if not risky:
        return join(*trees)
    decide = t.is_false if conjunction else t.is_true
    decisive = t.boolean(not conjunction)
    word = "and" if conjunction else "or"
    if len(risky) == 1:
        safe = [tree for i, tree in enumerate(trees) if i not in risky]
        if not safe:
            return trees[0]
        # The safe operands decide first; the risky one is evaluated only when they do not,
        # and on its own, in a condition: DuckDB folds an operand it knows is null (d >= NULL)
        # and then dropped the risky one beside it, with its error (generated seed 6, case 31875).
        [risky_tree] = [trees[i] for i in risky]
        return t.case((t.or_(*[decide(s) for s in safe]), decisive),
                      (engine.is_null(risky_tree), t.null()),
                      (decide(risky_tree), decisive), default=join(*trees))
    if engine.probe is None:
        ctx.refuse(node, f"{word} with {len(risky)} operands that can raise: {engine.name} cannot evaluate "
                         f"one without risking its error, which a {'false' if conjunction else 'true'} "
                         "operand must absorb")
    probed = [engine.probe(tree) if i in risky else tree for i, tree in enumerate(trees)]
    # Past the first WHEN no operand is decisive: the result is the first error in operand
    # order, else null if any is null, else the non-decisive value.
    rest = t.case((any_null(engine, trees), t.null()), default=t.boolean(conjunction))
    return t.case((t.or_(*[decide(p) for p in probed]), decisive), default=rest)


def in_list(ctx: LowerContext, node: TCall, args: list[Tree], engine: Engine) -> Tree:
    """x in (a, b, ...) is x = a or x = b or ... . Only items can be absorbed: an error in x
    makes every comparison fail, so it is never absorbed and needs no special care."""
    assert engine.compare is not None
    kind = node.args[0].type.kind
    x = args[0]
    operands = [(engine.compare("eq", kind, x, item), may_raise(item, engine)) for item in args[1:]]
    return chain(ctx, node, operands, engine, conjunction=False)


def between(ctx: LowerContext, node: TCall, args: list[Tree], engine: Engine) -> Tree:
    assert engine.compare is not None
    kind = node.args[0].type.kind
    x, low, high = args
    operands = [(engine.compare("ge", kind, x, low), may_raise(low, engine)),
                (engine.compare("le", kind, x, high), may_raise(high, engine))]
    return chain(ctx, node, operands, engine, conjunction=True)


# ------------------------------------------------------------------------------ integers
def _bounds_check(engine: Engine, op: str, a: Tree, b: Tree) -> Tree:
    """Whether ``a op b`` leaves int64, with int64 arithmetic that cannot itself overflow (each
    quotient or difference sits behind the CASE branch that makes it safe)."""
    lit, quotient = engine.int_literal, engine.int_div
    zero, mn, mx = lit(0), lit(INT64_MIN), lit(INT64_MAX)
    no = t.boolean(False)
    if op == "add":
        return t.case((t.gt(b, zero), t.gt(a, t.sub(mx, b))), (t.lt(b, zero), t.lt(a, t.sub(mn, b))), default=no)
    if op == "subtract":
        return t.case((t.lt(b, zero), t.gt(a, t.add(mx, b))), (t.gt(b, zero), t.lt(a, t.add(mn, b))), default=no)
    minus_one = lit(-1)
    return t.case((t.or_(t.eq(a, zero), t.eq(b, zero)), no),
                  (t.eq(a, minus_one), t.eq(b, mn)),
                  (t.eq(b, minus_one), t.eq(a, mn)),
                  (t.and_(t.gt(a, zero), t.gt(b, zero)), t.gt(a, quotient(mx, b))),
                  (t.and_(t.lt(a, zero), t.lt(b, zero)), t.lt(a, quotient(mx, b))),
                  (t.gt(a, zero), t.lt(b, quotient(mn, a))),
                  default=t.lt(a, quotient(mn, b)))


def literal_operand_range(op: str, node: TCall) -> tuple[int, int, int] | None:
    """When one operand of ``a op b`` is an int literal: (index of the other operand, lowest
    and highest value of it for which the exact result fits in int64). Exact integer
    arithmetic here, so the SQL check is one comparison pair."""
    (a_lit, a), (b_lit, b) = literal_of(node.args[0]), literal_of(node.args[1])
    if b_lit and isinstance(b, int):
        other, k = 0, b
    elif a_lit and isinstance(a, int) and op != "subtract":
        other, k = 1, a
    elif a_lit and isinstance(a, int):  # k - b fits  <=>  b in [k - MAX, k - MIN]
        return 1, a - INT64_MAX, a - INT64_MIN
    else:
        return None
    if op == "add":
        return other, INT64_MIN - k, INT64_MAX - k
    if op == "subtract":
        return other, INT64_MIN + k, INT64_MAX + k
    if k == 0:
        return other, INT64_MIN, INT64_MAX
    if k > 0:  # x * k in [MIN, MAX]  <=>  x in [ceil(MIN / k), floor(MAX / k)]
        return other, -((-INT64_MIN) // k), INT64_MAX // k
    return other, -((-INT64_MAX) // k), INT64_MIN // k  # k < 0 flips: [ceil(MAX / k), floor(MIN / k)]


def range_check(engine: Engine, x: Tree, lo: int, hi: int) -> Tree | None:
    """x outside [lo, hi], leaving out the sides that every int64 satisfies."""
    tests = []
    if lo > INT64_MIN:
        tests.append(t.lt(x, engine.int_literal(lo)))
    if hi < INT64_MAX:
        tests.append(t.gt(x, engine.int_literal(hi)))
    return t.or_(*tests) if tests else None


def int_arith(engine: Engine, node: TCall, args: list[Tree], op: str,
              general: Callable[[Tree, Tree], Tree] | None = None) -> Tree:
    """int64 + - * with the overflow error; ``general`` is the engine's check for two
    non-literal operands (default: int64 bounds arithmetic behind CASE branches)."""
    a, b = args
    value = {"add": t.add, "subtract": t.sub, "multiply": t.mul}[op](a, b)
    literal_range = literal_operand_range(op, node)
    if literal_range is not None:
        other, lo, hi = literal_range
        check = range_check(engine, args[other], lo, hi)
    else:
        check = (general or (lambda x, y: _bounds_check(engine, op, x, y)))(a, b)
    if check is None:
        return value
    # Every comparison in the check is null when a or b is, and a null check never raises.
    return guarded(engine, node, args, [(check, ErrorClass.OUT_OF_RANGE)], value, checks_reject_nulls=True)


def nonzero_literal(node: Typed) -> bool:
    """A literal divisor that is a number other than zero (NaN included: NaN is not zero)."""
    is_literal, value = literal_of(node)
    return is_literal and isinstance(value, (int, float)) and not isinstance(value, bool) and value != 0


def round_int(ctx: LowerContext, engine: Engine, node: TCall, args: list[Tree]) -> Tree:
    """round(int64, digits) for a literal ``digits``: half away from zero, exact."""
    x = args[0]
    if len(node.args) == 1:
        return x
    is_literal, digits = literal_of(node.args[1])
    if not is_literal:
        ctx.refuse(node, "digits must be a literal")
    if digits is None:
        return null_after(engine, args)
    assert isinstance(digits, int)
    if digits >= 0:
        return x
    lit = engine.int_literal
    zero = lit(0)
    if -digits >= 20:  # 10^20 / 2 exceeds every int64: everything rounds to 0
        return t.case((engine.is_null(x), engine.null(I)), default=zero)
    if -digits == 19:  # 10^19 itself does not fit: |x| >= 5e18 overflows, the rest is 0
        half = 5 * 10**18
        return t.case((engine.is_null(x), engine.null(I)),
                      (t.or_(t.ge(x, lit(half)), t.le(x, lit(-half))), engine.raise_(ErrorClass.OUT_OF_RANGE, I)),
                      default=zero)
    unit = 10 ** (-digits)
    u, one, quotient = lit(unit), lit(1), engine.int_div
    # Non-negative x: q = x / unit (+1 when the remainder is at least half). Negative x works
    # on the negative side, so -2^63 needs no abs().
    up = t.case((t.ge(t.mul(lit(2), t.mod(x, u)), u), t.add(quotient(x, u), one)), default=quotient(x, u))
    down = t.case((t.ge(t.mul(lit(-2), t.mod(x, u)), u), t.sub(quotient(x, u), one)), default=quotient(x, u))
    q = t.case((t.ge(x, zero), up), default=down)
    overflow = t.case((t.ge(x, zero), t.gt(up, lit(INT64_MAX // unit))), default=t.lt(down, lit(-(-INT64_MIN // unit))))
    return t.case((engine.is_null(x), engine.null(I)), (overflow, engine.raise_(ErrorClass.OUT_OF_RANGE, I)),
                  default=t.mul(q, u))


# ------------------------------------------------------------------------------ strings
def substring(engine: Engine, node: TCall, args: list[Tree], substr: Callable[..., Tree],
              extra_checks: Sequence[tuple[Tree, ErrorClass]] = ()) -> Tree:
    """ISO substring: positions before 1 exist but are empty; a negative length is an error.
    ``substr(s, start[, count])`` is the engine's own, called only with start >= 1, count >= 0."""
    lit = engine.int_literal
    one = lit(1)
    s, start = args[0], args[1]
    if len(args) == 2:
        value = t.case((t.ge(start, one), substr(s, start)), default=s)  # a null start takes the default
        return guarded(engine, node, args, list(extra_checks), value, nulls_first=True)
    length = args[2]
    value = t.case((t.ge(start, one), substr(s, start, length)),
                   (t.le(t.add(start, length), one), t.string("")),  # start <= 0, length >= 0: no overflow
                   default=substr(s, one, t.sub(t.add(start, length), one)))
    checks = [*extra_checks, (t.lt(length, lit(0)), ErrorClass.INVALID_ARGUMENT)]
    return guarded(engine, node, args, checks, value, nulls_first=True)


def escape_pattern_invalid(pattern: Tree, escape: str) -> Tree:
    """True when the pattern uses ``escape`` before anything but %, _ or itself (or last).

    Scanning left to right, a run of escapes pairs up from the left, so dropping every
    doubled escape, then every escaped % and _, leaves an escape exactly when one is misused."""
    e = t.string(escape)
    rest = t.call("replace", pattern, t.string(escape * 2), t.string(""))
    rest = t.call("replace", rest, t.string(escape + "%"), t.string(""))
    rest = t.call("replace", rest, t.string(escape + "_"), t.string(""))
    return t.gt(t.call("instr", rest, e), t.number(0))


def static_like_error(node: TCall) -> ErrorClass | None | bool:
    """For literal pattern and escape: the error the pattern raises, None when valid; False
    when not both literal."""
    if len(node.args) < 3:
        return None
    (p_lit, pattern), (e_lit, escape) = literal_of(node.args[1]), literal_of(node.args[2])
    if not (p_lit and e_lit) or pattern is None or escape is None:
        return False
    regex = like_regex(str(pattern), str(escape))
    return regex.error if isinstance(regex, RowError) else None


def integer_text_checks(trimmed: Tree, left: Callable[[Tree, int], Tree], after_sign: Callable[[Tree], Tree],
                        length: Callable[[Tree], Tree]) -> tuple[Tree, Tree]:
    """(invalid, out_of_range) for a space-trimmed string as an int64 numeral: an optional sign
    and ASCII digits; range decided on the digits, so no engine conversion ever overflows."""
    first = left(trimmed, 1)
    signed = t.in_list(first, [t.string("+"), t.string("-")])
    unsigned = t.case((signed, after_sign(trimmed)), default=trimmed)
    invalid = t.or_(t.eq(unsigned, t.string("")),
                    t.ne(t.call("ltrim", unsigned, t.string("0123456789")), t.string("")))
    digits = t.call("ltrim", unsigned, t.string("0"))
    limit = t.case((t.eq(first, t.string("-")), t.string(str(-INT64_MIN))), default=t.string(str(INT64_MAX)))
    n = length(digits)
    out_of_range = t.or_(t.gt(n, t.number(19)), t.and_(t.eq(n, t.number(19)), t.gt(digits, limit)))
    return invalid, out_of_range
