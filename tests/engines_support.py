"""Getting a real engine runner in a test, or a clear skip.

A server engine that is not reachable skips its tests with the reason, except when
``REXPR_REQUIRE_SERVERS=1`` (set in CI): then the test fails, so a missing server can never
turn into a quietly green run. Mark server tests with ``@pytest.mark.servers``.
"""

from __future__ import annotations

import datetime as dt

import os
from typing import Iterator

import pytest

from rexpr.engines import ENGINE_NAMES, get_engine
from rexpr.engines.base import Runner
from rexpr.typed import Typed

SERVER_ENGINES = ("postgres", "mariadb")
REQUIRE_VARIABLE = "REXPR_REQUIRE_SERVERS"


def servers_required() -> bool:
    return os.environ.get(REQUIRE_VARIABLE, "") == "1"


def open_runner(name: str) -> Runner:
    """A connected runner for ``name``; skips (or fails under REXPR_REQUIRE_SERVERS=1) when the
    engine is not available."""
    runner = get_engine(name)
    status = runner.availability()
    if not status.available:
        runner.close()
        message = f"{name} is not available: {status.reason}"
        if servers_required():
            pytest.fail(f"{message} ({REQUIRE_VARIABLE}=1, so this is a failure, not a skip)")
        pytest.skip(message)
    return runner


def engine_params(names: tuple[str, ...] = ENGINE_NAMES) -> list:
    """pytest params for engine names, with the ``servers`` mark on the server engines."""
    return [pytest.param(n, id=n, marks=[pytest.mark.servers] if n in SERVER_ENGINES else []) for n in names]


@pytest.fixture(params=engine_params())
def runner(request: pytest.FixtureRequest) -> Iterator[Runner]:
    """Each engine in turn, connected; closed after the test."""
    opened = open_runner(request.param)
    try:
        yield opened
    finally:
        opened.close()


# ------------------------------------------------------------------------------ deep nesting
# The parser takes expressions 200 levels deep (rexpr/language/parser.py); each shape nests one
# call per level over the fields a (int64), x (float64), s (string) and f (bool). The limits are
# this project's (common practice, no source): SQL is either produced, and then runs, or refused
# with NotPushable, never a RecursionError or a hang.
DEEP_SHAPES = {
    "abs": lambda n: "abs(" * n + "a" + ")" * n,
    "floor": lambda n: "floor(" * n + "x" + ")" * n,
    "trim": lambda n: "trim(" * n + "s" + ")" * n,
    "not": lambda n: "not " * n + "f",
    "coalesce": lambda n: "coalesce(" * n + "a" + ", 1)" * n,
    "case": lambda n: "case when f then " * n + "a" + " else 0 end" * n,
    "substring": lambda n: "substring(" * n + "s" + ", 1, 2)" * n,
    "ln": lambda n: "ln(" * n + "x" + ")" * n,
    "power": lambda n: "power(" * n + "x" + ", 1.0)" * n,
}


def deepest_lowered(shape: str, schema: object, engine: str) -> Typed:
    """The deepest nesting of ``shape`` that ``engine``'s faithful lowering still produces; a
    refusal on the way must say why (too deep, or too large after its guards)."""
    import rexpr
    from rexpr.errors import NotPushable
    from rexpr.sql.lowering import to_sql

    deepest = None
    for depth in range(1, 200):
        tree = rexpr.compile(DEEP_SHAPES[shape](depth), schema).tree
        try:
            to_sql(tree, engine)
        except NotPushable as refusal:
            assert "calls deep" in refusal.message or "nodes after its guards" in refusal.message
            break
        deepest = tree
    assert deepest is not None
    return deepest


# ------------------------------------------------------------------------------ an error beside a null
# docs/semantics.md, "Errors are values": a function's argument errors propagate before nulls
# are considered, so a null operand never hides another operand's error. The first three are
# the differential tester's repros (DuckDB folded each to NULL; PostgreSQL's planner folds a
# strict operator with a NULL constant operand the same way). Error classes by the standard:
# abs(-2^63) has no int64 value (ISO/IEC 9075-2 6.28, 22003), a negative substring length is
# 22011 (6.30), ln(0) is 2201E (6.28), 'abc' as a timestamp 22007 (6.13).
NULL_BESIDE_ERROR = [
    ("cast(null as int64) >= abs(-9223372036854775808)", {}, "out_of_range"),
    ("cast(null as string) <= substring('', 0, -1)", {}, "invalid_argument"),
    ("cast(null as float64) * ln(0.0)", {}, "invalid_argument"),
    ("cast(null as int64) >= abs(a)", {"a": ("int64", [-2 ** 63])}, "out_of_range"),
    ("abs(a) >= cast(null as int64)", {"a": ("int64", [-2 ** 63])}, "out_of_range"),
    ("(a + cast(null as int64)) * abs(a) > 0", {"a": ("int64", [-2 ** 63])}, "out_of_range"),
    ("nullif(1, 1) < abs(a)", {"a": ("int64", [-2 ** 63])}, "out_of_range"),
    ("cast(null as string) || substring(s, 1, a)", {"s": ("string", ["x"]), "a": ("int64", [-1])},
     "invalid_argument"),
    ("position(cast(null as string), cast(abs(a) as string))", {"a": ("int64", [-2 ** 63])}, "out_of_range"),
    ("cast(null as int64) in (abs(a), 1)", {"a": ("int64", [-2 ** 63])}, "out_of_range"),
    ("abs(a) in (cast(null as int64))", {"a": ("int64", [-2 ** 63])}, "out_of_range"),
    ("abs(a) between cast(null as int64) and cast(null as int64)", {"a": ("int64", [-2 ** 63])}, "out_of_range"),
    ("nullif(cast(null as int64), abs(a))", {"a": ("int64", [-2 ** 63])}, "out_of_range"),
    ("case when true then null else a end < abs(a)", {"a": ("int64", [-2 ** 63])}, "out_of_range"),
    ("abs(a) + case when f then cast(null as int64) end > 0", {"a": ("int64", [-2 ** 63]), "f": ("bool", [True])},
     "out_of_range"),
    # Null on every row of the statement, but not constant: DuckDB skips the later operands of a
    # strict function when an earlier one is a constant NULL vector at run time.
    ("(case when f then a end) = abs(a)", {"a": ("int64", [-2 ** 63]), "f": ("bool", [False])}, "out_of_range"),
    ("(case when f then x end) * ln(x)", {"x": ("float64", [0.0]), "f": ("bool", [False])}, "invalid_argument"),
    ("(case when f then a end) in (abs(a))", {"a": ("int64", [-2 ** 63]), "f": ("bool", [False])}, "out_of_range"),
    # DuckDB folds what consumes a value from its statistics (x IS NULL, x > 3, coalesce) without
    # evaluating it; here each value raises in a CASE condition while its branches say "null"
    # or "5" (the column ts is null on every row of the table).
    ("nullif(ts, cast(s as timestamp)) is null", {"ts": ("timestamp", [None]), "s": ("string", ["abc"])},
     "invalid_datetime"),
    ("(cast(null as int64) >= abs(a)) is null", {"a": ("int64", [-2 ** 63])}, "out_of_range"),
    ("coalesce(case when abs(a) > 0 then cast(null as int64) end, 1)", {"a": ("int64", [-2 ** 63])}, "out_of_range"),
    ("(case when abs(a) > 0 then 5 else 5 end) > 3", {"a": ("int64", [-2 ** 63])}, "out_of_range"),
    # Generated seed 16, case 2232, reduced: a null dividend must not hide the
    # overflow of -i (ISO/IEC 9075-2 6.29: 22003; -(-2^63) has no int64 value).
    ("y / cast(month(ts) as float64) / cast(-i as float64)",
     {"y": ("float64", [1.0]), "ts": ("timestamp", [None]), "i": ("int64", [-2 ** 63])}, "out_of_range"),
    # Generated seed 16, case 839: MariaDB folds "v is null" to false where it infers that v is
    # never null, so the modulo by zero (ISO/IEC 9075-2 6.29: 22012) was not evaluated.
    ("coalesce(cast(i % j as bool), false) is null", {"i": ("int64", [2]), "j": ("int64", [0])},
     "division_by_zero"),
    ("cast(nullif(ts, cast(s as timestamp)) as string) = 'x'", {"ts": ("timestamp", [None]), "s": ("string", ["abc"])},
     "invalid_datetime"),
    # The tester's 64-row case, reduced: on the one row where ts is null, cast(s as timestamp)
    # must still raise (ISO/IEC 9075-2 6.13: 'abc' is no timestamp, 22007).
    ("coalesce(ts, case when f then ts end) in (nullif(ts, nullif(cast(s as timestamp), "
     "timestamp '9999-12-31 23:59:59')), timestamp '5928-09-17 20:19:27')",
     {"ts": ("timestamp", [None]), "f": ("bool", [False]), "s": ("string", ["abc"])}, "invalid_datetime"),
    # Also checked on the servers, whose planners fold strict calls on a NULL constant.
    ('(a + cast(null as int64)) >= abs(a)', {'a': ('int64', [-9223372036854775808])}, 'out_of_range'),
    ('cast(null as string) <= substring(s, 1, a)', {'s': ('string', ['']), 'a': ('int64', [-1])}, 'invalid_argument'),
    ('cast(null as float64) * ln(x)', {'x': ('float64', [0.0])}, 'invalid_argument'),
    # Generated seed 6, case 6703, reduced: the CASE is null on every row (its condition is),
    # which DuckDB and PostgreSQL both see, yet 1e19 has no int64 value (ISO/IEC 9075-2 6.13:
    # 22003). 1e19 rather than the case's -inf, which MariaDB cannot store.
    ("cast(x as int64) < case when cast(null as int64) between cast(null as int64) and a then a end",
     {"x": ("float64", [1e19]), "a": ("int64", [1])}, "out_of_range"),
    # The same case at full size: this CASE's condition is false on every row (0 >= 2^63 - 1 is
    # false, ISO/IEC 9075-2 8.3: BETWEEN is x >= lo AND x <= hi), so it is null, and both DuckDB
    # and PostgreSQL fold the comparison beside the raising cast.
    ("cast(x as int64) >= case when 0 between 9223372036854775807 and i then i end",
     {"x": ("float64", [1e19]), "i": ("int64", [-7])}, "out_of_range"),
    ("coalesce(b, substring(case when b then 'NaN' end, nullif(j, i), cast(x as int64)) >= "
     "case when 0 between 9223372036854775807 and i then s end)",
     {"b": ("bool", [None]), "j": ("int64", [1]), "i": ("int64", [2]), "x": ("float64", [1e19]),
      "s": ("string", ["a"])}, "out_of_range"),
    # Generated seed 6, cases 30553 and 31875, reduced: a null haystack (SQL puts it first) beside
    # a needle whose length is negative (ISO/IEC 9075-2 6.30: 22011), and a null bound beside a
    # bound that is no date (6.13: 22007) in a CASE condition.
    ("position(substring(t, j, -12), case when b then t end)",
     {"t": ("string", ["abc"]), "j": ("int64", [1]), "b": ("bool", [False])}, "invalid_argument"),
    ("case when d between cast(null as date) and cast(t as date) then ts end",
     {"d": ("date", [dt.date(2024, 5, 1)]), "t": ("string", [""]), "ts": ("timestamp", [None])}, "invalid_datetime"),
    # The shrinker's repro of case 31875: the whole condition is constant and raises.
    ("case when cast(null as date) between cast(null as date) and cast('' as date) then ts end",
     {"ts": ("timestamp", [None])}, "invalid_datetime"),
    # Generated seed 14, case 2203, reduced: MariaDB treats COALESCE(..., FALSE) as never null
    # and folds its IS NULL test to 0 without evaluating it; the square root of a negative
    # number has no real value (ISO/IEC 9075-2 6.28: 2201F).
    ("nullif(b, b) <= coalesce(nullif(b, b), sqrt(y) = y, false)",
     {"b": ("bool", [True]), "y": ("float64", [-2.5])}, "invalid_argument"),
    # Generated seed 15, cases 1173 and 3848, reduced: PostgreSQL simplifies the right-hand side
    # to NULL (nullif of two equal constants; null or false) and folds the comparison beside a
    # cast that must raise ('abc' is no timestamp, ISO/IEC 9075-2 6.13: 22007).
    ("cast(t as timestamp) < nullif(timestamp '9999-12-31 23:59:59', "
     "coalesce(timestamp '9999-12-31 23:59:59', case when b then ts end))",
     {"t": ("string", ["abc"]), "b": ("bool", [True]), "ts": ("timestamp", [None])}, "invalid_datetime"),
    ("(ts in (cast(t as timestamp), ts)) > (cast(null as bool) or false and b)",
     {"t": ("string", ["abc"]), "b": ("bool", [True]), "ts": ("timestamp", [None])}, "invalid_datetime"),
]
