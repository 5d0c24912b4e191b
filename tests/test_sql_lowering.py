"""SQL lowering on real engines: DuckDB (in process) and SQLite (Python's sqlite3).

Oracle: the reference evaluator (rexpr.reference), the project's executable spec. Every
faithful SQL expression is run on the engine over edge-value tables (rexpr.rows.edge_table)
and compared row by row, values and error classes, with rexpr.compare.same_result. Cases are
derived from the catalogue, so a new function is covered (or must be declared refused) without
touching this file. Native-lowering tests check that each divergence docs/engines.md lists
really happens on the engine. No mocks: engines run through the project's runners.
"""

from __future__ import annotations

import datetime as dt
import math
import random
import sqlite3
import struct
from pathlib import Path
from typing import Iterator

import duckdb
import pyarrow as pa
import pytest
import sqlglot
from sqlglot import exp

import rexpr
from engines_support import DEEP_SHAPES, NULL_BESIDE_ERROR, deepest_lowered, open_runner
from rexpr.catalogue import CAST_RULES, ENTRIES, FunctionSpec
from rexpr.compare import same_result
from rexpr.engines.base import Runner, SqlItem
from rexpr.errors import InputProblem, NotPushable, Span
from rexpr.reference.evaluator import evaluate_row
from rexpr.reference.tables import evaluate_table, field_values
from rexpr.rows import edge_table
from rexpr.schema import Schema
from rexpr.sql import lowering
from rexpr.sql.capabilities import capability, capability_table, render_engines_markdown
from rexpr.sql.lowering import dialect_of, lower, parenthesised, select_sql, to_sql
from rexpr.typed import TCall, TField, TLiteral, Typed, fields_read, walk
from rexpr.types import BOOL, FLOAT64, INT64, INT64_MIN, NULL, STRING, DataType, Kind
from rexpr.values import RowError

ENGINES = ("duckdb", "sqlite")
SPAN = Span(0, 0)
ROOT = Path(__file__).resolve().parents[1]

# Three columns per kind, so a call can take the same kind up to three times.
FIELDS: dict[Kind, tuple[str, ...]] = {
    Kind.INT64: ("a", "b", "c"), Kind.FLOAT64: ("x", "y", "z"), Kind.STRING: ("s", "p", "q"),
    Kind.BOOL: ("f", "g", "h"), Kind.DATE: ("d", "e", "d3"), Kind.TIMESTAMP: ("ts", "tt", "t3"),
}
SCHEMA = Schema.from_mapping({name: kind.value for kind, names in FIELDS.items() for name in names})
MAX_ROWS = 700


@pytest.fixture(scope="module", params=ENGINES)
def engine(request: pytest.FixtureRequest) -> Iterator[tuple[str, Runner]]:
    runner = open_runner(request.param)
    try:
        yield request.param, runner
    finally:
        runner.close()


# ------------------------------------------------------------------------------ cases from the catalogue
def field(kind: Kind, index: int) -> TField:
    return TField((FIELDS[kind][index],), DataType(kind), SPAN)


def call(spec: FunctionSpec, args: list[Typed], result: Kind) -> TCall:
    nullable = spec.nullable([a.type for a in args])
    return TCall(spec.id, tuple(args), DataType(result, nullable), SPAN)


def _fields_for(kinds: list[Kind]) -> list[Typed]:
    seen: dict[Kind, int] = {}
    out: list[Typed] = []
    for kind in kinds:
        out.append(field(kind, seen.get(kind, 0) % 3))
        seen[kind] = seen.get(kind, 0) + 1
    return out


def catalogue_cases(spec: FunctionSpec) -> list[TCall]:
    """Every signature of the function over columns: each optional parameter with and without,
    variadic parameters with two and three arguments."""
    if spec.id == "cast":
        return [TCall("cast", (field(rule.source, 0),), DataType(rule.target), SPAN) for rule in CAST_RULES]
    if spec.id == "case":
        # case when f then v1 when g then v2 else v3 end, for every kind with a value
        return [TCall("case", (field(Kind.BOOL, 0), field(k, 0), field(Kind.BOOL, 1), field(k, 1), field(k, 2)),
                      DataType(k), SPAN) for k in FIELDS]
    cases = []
    for signature in spec.signatures:
        params = list(signature.params)
        shapes = [params[:len(params) - n] for n in range(signature.optional + 1)]
        if signature.variadic:
            shapes = [params + [params[-1]] * extra for extra in (1, 2)]
        for shape in shapes:
            cases.append(call(spec, _fields_for(shape), signature.result))
    return cases


LITERAL_CASES: dict[str, list[str]] = {
    # Forms that are faithful only with literal arguments, and constants (engines fold them).
    "round": ["round(x, 0)", "round(a, -1)", "round(a, -2)", "round(a, -18)", "round(a, -19)", "round(a, -20)",
              "round(a, 3)", "round(x, null)", "round(div(1, a), null)", "round(x / y, null)", "round(2.5)",
              "round(-2.5)", "round(x, 2)"],
    "like": ["s like 'a%'", "s like '_b%'", "s like '%\\%%' escape '\\'", "s like 'a\\_b' escape '\\'",
             "s like 'a\\' escape '\\'", "s like 'a\\b' escape '\\'", "s like p escape '\\'", "s like p escape ''",
             "s like p escape 'ab'", "s like '*[?' ", "s like 'ab' escape null", "s like '[*]%'",
             "cast(div(1, a) as string) like 'x' escape null"],
    "substring": ["substring(s, 0, 2)", "substring(s, -1)", "substring(s, 2, -1)", "substring(s, a, 3)",
                  "substring('abc', 9223372036854775807, 9223372036854775807)",
                  "substring(s, -9223372036854775808, 0)"],
    "divide": ["1.0 / 0.0", "x / 0.0", "2.0 * (x / 3.0)", "x / 2.0 / 4.0", "(x / y) / 2.0"],
    "div": ["div(a, 2)", "div(a, -1)", "div(div(a, b), b)"],
    "modulo": ["a % -1", "a % 3", "x % 2.0", "(a % b) % b"],
    "multiply": ["a * 3", "a * -3", "-3 * a", "a * -1", "a * 0"],
    "subtract": ["a - 5", "5 - a", "-9223372036854775807 - a"],
    "add": ["9223372036854775807 + 1", "a + 1", "1 + a", "a + -1", "(a - b) - (b - a)", "a + 1 + 1 + 1"],
    "in": ["a in (1, div(b, a), div(a, b))", "x in (y, 0.0 / x)", "s in ('a', p, null)"],
    "and": ["div(a, b) > 0 and div(b, a) > 0", "div(a, b) > 0 and a = 0", "x / y > 1.0 and y / x > 1.0 and a = 1"],
    "or": ["div(a, b) > 0 or div(b, a) > 0", "div(a, b) > 0 or a = 0"],
    "between": ["a between div(1, b) and div(2, b)", "x between 0.0 / y and 1.0"],
    "case": ["case when a = 0 then div(1, a) else 0 end", "case when div(1, a) > 0 then 1 end"],
    "coalesce": ["coalesce(b, div(1, a))"],
    "cast": ["cast('2024-02-29' as date)", "cast(' 12 ' as int64)", "cast('-9223372036854775808' as int64)",
             "cast('00000000000000000000123' as int64)", "cast(9.2233720368547748e18 as int64)",
             "cast(-9.2233720368547758e18 as int64)", "cast('1.5e+3' as float64)", "cast('5.' as float64)",
             "cast('-nan' as float64)", "cast('1e-400' as float64)", "cast('2024-05-01t10:11:12.5' as timestamp)",
             "cast('2024-05-01 10:11:60' as timestamp)", "cast('0000-01-01' as date)"],
}


def _case_ids() -> list[str]:
    return [spec.id for spec in ENTRIES]


def _nan_rows(tree: Typed, table: pa.Table) -> set[int]:
    """Rows where some subexpression is NaN per the reference: SQLite has no NaN, and its
    faithful SQL fails those statements with an engine-limit tag (tested on its own below)."""
    columns = {path: field_values(table, path) for path in fields_read(tree)}
    nodes = list(walk(tree))
    bad = set()
    for row in range(table.num_rows):
        values = {path: column[row] for path, column in columns.items()}
        if any(isinstance(v, float) and math.isnan(v) for v in (evaluate_row(n, values) for n in nodes)):
            bad.add(row)
    return bad


def _table_for(tree: Typed) -> pa.Table:
    used = {path[0] for path in fields_read(tree)}
    return edge_table(SCHEMA, used or None, max_rows=MAX_ROWS) if used else pa.table({"_row": [0, 1]})


def _declared_limited(engine: str, tree: Typed) -> bool:
    profile = dialect_of(engine)
    return any(capability(profile, n.function).status != "faithful" for n in walk(tree) if isinstance(n, TCall))


def check_against_reference(engine: str, runner: Runner, tree: Typed, label: str) -> str:
    """Run the faithful SQL and compare with the reference; 'refused' when the lowering refuses
    (allowed only where the capability table says so)."""
    try:
        item = lower(tree, engine, "faithful")
    except NotPushable as refusal:
        assert _declared_limited(engine, tree), f"{engine} refused {label} but declares it faithful: {refusal}"
        return "refused"
    table = _table_for(tree)
    if engine == "sqlite":
        bad = _nan_rows(tree, table)
        table = table.take([r for r in range(table.num_rows) if r not in bad]) if bad else table
        if table.num_rows == 0:
            return "no rows"
    # oracle: the reference evaluator (the executable form of docs/semantics.md)
    expected = evaluate_table(tree, table).to_pylist()
    [result] = runner.evaluate(table, [SqlItem("v", item, tree.type)])
    observed = result.to_pylist()
    wrong = [(row, expected[row], observed[row]) for row in range(table.num_rows)
             if row not in result.input_losses and not same_result(expected[row], observed[row])]
    if wrong:
        names = table.column_names
        shown = [(row, {n: table.column(n)[row].as_py() for n in names}, e, o) for row, e, o in wrong[:5]]
        pytest.fail(f"{engine} faithful SQL for {label} differs from the reference on {len(wrong)} rows, e.g. "
                    f"{shown}\nSQL: {item.sql(dialect=dialect_of(engine).sqlglot_dialect)[:2000]}")
    return "agrees"


@pytest.mark.parametrize("function_id", _case_ids())
def test_faithful_matches_reference(engine: tuple[str, Runner], function_id: str) -> None:
    name, runner = engine
    spec = next(s for s in ENTRIES if s.id == function_id)
    outcomes = []
    for tree in catalogue_cases(spec):
        outcomes.append(check_against_reference(name, runner, tree, f"{function_id} {tree.type.name}"))
    for text in LITERAL_CASES.get(function_id, []):
        tree = rexpr.compile(text, SCHEMA).tree
        outcomes.append(check_against_reference(name, runner, tree, repr(text)))
    status = capability(dialect_of(name), function_id).status
    if status == "not_pushable":
        assert set(outcomes) == {"refused"}, "a not_pushable function must be refused in every form"


def test_every_function_has_both_lowerings_or_a_refusal() -> None:
    for engine in ENGINES:
        profile = dialect_of(engine)
        assert set(profile.capabilities) <= {s.id for s in ENTRIES}, "capabilities name unknown functions"
        for spec in ENTRIES:
            assert spec.id in profile.native, f"{engine} has no native lowering of {spec.id}"
            if capability(profile, spec.id).status != "not_pushable":
                assert spec.id in profile.faithful, f"{engine} has no faithful lowering of {spec.id}"
            if capability(profile, spec.id).status != "faithful":
                assert capability(profile, spec.id).reason, f"{engine} {spec.id}: a refusal needs a reason"


# ------------------------------------------------------------------------------ engine-specific facts
def _run(runner: Runner, text: str, columns: dict[str, tuple[str, list[object]]], lowering_name: str = "faithful"):
    schema = Schema.from_mapping({n: t for n, (t, _) in columns.items()})
    compiled = rexpr.compile(text, schema)
    from rexpr.schema import to_arrow_type
    table = pa.table({n: pa.array(v, to_arrow_type(schema.get(n))) for n, (_, v) in columns.items()}) \
        if columns else pa.table({"_row": [0]})
    item = lower(compiled.tree, runner.name, lowering_name)  # type: ignore[arg-type]
    [result] = runner.evaluate(table, [SqlItem("v", item, compiled.type)])
    return compiled, table, result


def test_duckdb_and_absorbs_errors_of_two_operands() -> None:
    runner = open_runner("duckdb")
    try:
        # Both operands can raise; the reference lets a false one absorb the other's error
        # (ISO/IEC 9075-2 6.39 truth table for AND; absorption per docs/semantics.md).
        compiled, table, result = _run(runner, "div(a, b) > 5 and div(b, a) > 5",
                                       {"a": ("int64", [0, 1, 7, 0]), "b": ("int64", [1, 0, 1, 0])})
        expected = evaluate_table(compiled.tree, table).to_pylist()  # oracle: reference evaluator
        assert [same_result(e, o) for e, o in zip(expected, result.to_pylist())] == [True] * 4
        assert expected[0] is False and expected[1] is False and isinstance(expected[3], RowError)
    finally:
        runner.close()


def test_duckdb_power_of_a_signaling_nan() -> None:
    # The catalogue's power is 1 for y = 0 or x = 1, NaN included (IEEE 754-2019 9.2.1: pow(x,
    # ±0) is 1 even for a quiet NaN); C's pow gives NaN for a signaling one (6.2). The bits
    # are a signaling NaN (exponent all ones, quiet bit 51 clear; IEEE 754-2019 3.4) from
    # generated seed 6, case 45244. Oracle: the reference evaluator.
    snan = struct.unpack("<d", struct.pack("<Q", 0x7FF669CDCE9946A0))[0]
    assert math.isnan(snan)
    runner = open_runner("duckdb")
    try:
        for text in ["power(y, 0.0)", "power(1.0, y)", "power(y, -0.0) + y"]:
            compiled, table, result = _run(runner, text, {"y": ("float64", [snan, 2.0, None])})
            expected = evaluate_table(compiled.tree, table).to_pylist()
            assert [same_result(e, o) for e, o in zip(expected, result.to_pylist())] == [True] * 3, text
    finally:
        runner.close()


def test_sqlite_refuses_and_with_two_risky_operands() -> None:
    tree = rexpr.compile("div(a, b) > 5 and div(b, a) > 5", {"a": "int64", "b": "int64"}).tree
    with pytest.raises(NotPushable, match=r"and\(bool, bool\).*2 operands that can raise"):
        lower(tree, "sqlite")


def test_sqlite_nan_result_is_an_engine_limit_row() -> None:
    runner = open_runner("sqlite")
    try:
        # IEEE 754 7.2: inf - inf is NaN; SQLite stores no NaN, so that row is an engine-limit
        # row (never a NULL), and the finite row beside it keeps its value (1.0 - 1.0 = 0).
        _, _, result = _run(runner, "x - x", {"x": ("float64", [math.inf, 1.0])})
        assert list(result.limits) == [0] and result.limits[0].reason == "nan"
        assert result.to_pylist()[1] == 0.0
    finally:
        runner.close()


def test_sqlite_nul_in_text_is_an_engine_limit_for_length() -> None:
    runner = open_runner("sqlite")
    try:
        _, _, result = _run(runner, "length(s)", {"s": ("string", ["a\x00b"])})
        assert result.limits[0].reason == "nul"
        # starts_with works on bytes, so NUL is fine there (common practice, no source: UTF-8
        # prefixes are byte prefixes, RFC 3629 section 3).
        _, _, result = _run(runner, "starts_with(s, 'a')", {"s": ("string", ["a\x00b"])})
        assert result.to_pylist() == [True]
    finally:
        runner.close()


def test_duckdb_float_to_string_matches_python_repr_on_random_doubles() -> None:
    runner = open_runner("duckdb")
    try:
        rng = random.Random(20240501)
        values = [struct.unpack("<d", struct.pack("<Q", rng.getrandbits(64)))[0] for _ in range(3000)]
        values += [rng.uniform(-1e6, 1e6) for _ in range(500)] + [10.0 ** k for k in range(-30, 30)]
        compiled, table, result = _run(runner, "cast(x as string)", {"x": ("float64", values)})
        expected = evaluate_table(compiled.tree, table).to_pylist()  # oracle: Python repr via the reference
        assert result.to_pylist() == expected
    finally:
        runner.close()


def test_float_literals_are_exact(engine: tuple[str, Runner]) -> None:
    name, runner = engine
    rng = random.Random(7)
    values = [struct.unpack("<d", struct.pack("<Q", rng.getrandbits(64)))[0] for _ in range(300)]
    values = [v for v in values if math.isfinite(v)] + [5e-324, 1.7976931348623157e308, 2.675, 0.1, math.inf]
    items = [SqlItem(f"v{i}", lower(TLiteral(v, FLOAT64, SPAN), name), FLOAT64) for i, v in enumerate(values)]
    results = runner.evaluate(pa.table({"_row": [0]}), items)
    # oracle: the value itself (IEEE 754 5.12.2: the shortest repr reads back to the same double)
    assert [r.to_pylist()[0] for r in results] == values


def test_untaken_raise_never_fires_and_constants_do_not_fold_into_errors(engine: tuple[str, Runner]) -> None:
    name, runner = engine
    # No row takes the branch, so the reference has no error (case is lazy, ISO/IEC 9075-2 6.12).
    _, _, result = _run(runner, "case when a = 99 then div(1, 0) else a end", {"a": ("int64", [1, 2])})
    assert result.to_pylist() == [1, 2]
    # An empty table evaluates nothing, even for an expression that always fails.
    compiled = rexpr.compile("div(a, 0)", {"a": "int64"})
    empty = pa.table({"a": pa.array([], pa.int64())})
    [empty_result] = runner.evaluate(empty, [SqlItem("v", lower(compiled.tree, name), compiled.type)])
    assert empty_result.to_pylist() == []


def test_a_raise_construct_quoted_beside_the_failing_one_is_still_a_row_error(engine: tuple[str, Runner]) -> None:
    # pow(-2, -0.5) is invalid (IEEE 754-2019 9.2.1: finite x < 0, finite non-integer y). DuckDB's
    # message quotes the SQL around the failing cast, here the division's own raise construct
    # (generated seed 6 cases 2860 and 8045 were refused as a whole for it).
    name, runner = engine
    columns = {"x": ("float64", [1.0, 2.0]), "y": ("float64", [-2.0, 4.0])}
    compiled, table, result = _run(runner, "power(y, x / y)", columns)
    expected = evaluate_table(compiled.tree, table).to_pylist()  # oracle: the reference evaluator
    assert isinstance(expected[0], RowError) and expected[0].error.value == "invalid_argument"
    assert [same_result(e, o) for e, o in zip(expected, result.to_pylist())] == [True, True], \
        f"{name} gave {result.to_pylist()!r}"


# coalesce is lazy: ISO/IEC 9075-2 6.12 defines COALESCE(V1, V2) as CASE WHEN V1 IS NOT NULL
# THEN V1 ELSE V2 END, so V2 is not evaluated on a row where V1 is not null. The second
# argument repeats a subtree that raises (DuckDB v2.0.1 hoisted such subtrees out of COALESCE
# and evaluated them on every row); the first case is the differential tester's repro.
COALESCE_LAZY = [
    ("coalesce(a, div(10, b) + div(10, b))", {"a": ("int64", [1, None, 3]), "b": ("int64", [0, 2, 0])}),
    ("abs(coalesce(a, div(10, b) * div(10, b)))", {"a": ("int64", [-1, None]), "b": ("int64", [0, 5])}),
    ("coalesce(0.0, y - cast('' as float64))", {"y": ("float64", [1.0, None])}),
]


@pytest.mark.parametrize("text, columns", COALESCE_LAZY, ids=[c[0] for c in COALESCE_LAZY])
def test_coalesce_skips_a_repeated_subtree_that_raises(engine: tuple[str, Runner], text: str,
                                                       columns: dict) -> None:
    name, runner = engine
    try:
        rexpr.compile(text, {k: v[0] for k, v in columns.items()}).to_sql(name)
    except NotPushable as refused:
        pytest.skip(f"not pushable to {name}: {refused}")
    compiled, table, result = _run(runner, text, columns)
    expected = evaluate_table(compiled.tree, table).to_pylist()  # oracle: the reference evaluator
    assert not any(isinstance(e, RowError) for e in expected)
    assert [same_result(e, o) for e, o in zip(expected, result.to_pylist())] == [True] * len(expected), \
        f"{name} gave {result.to_pylist()!r}; SQL: {to_sql(compiled.tree, name)[:1500]}"


# An error beside a null: the cases (and their sources) are in engines_support.py.
@pytest.mark.parametrize("text, columns, error", NULL_BESIDE_ERROR, ids=[c[0] for c in NULL_BESIDE_ERROR])
def test_an_error_beats_a_null_operand(engine: tuple[str, Runner], text: str, columns: dict, error: str) -> None:
    name, runner = engine
    compiled, table, result = _run(runner, text, columns)
    [expected] = evaluate_table(compiled.tree, table).to_pylist()  # oracle: the reference evaluator
    assert isinstance(expected, RowError) and expected.error.value == error
    assert same_result(expected, result.to_pylist()[0]), \
        f"{name} gave {result.to_pylist()[0]!r}; SQL: {to_sql(compiled.tree, name)[:1500]}"


# An argument's own error comes before the function's check on another argument: the reference
# evaluates arguments left to right, then the function (docs/semantics.md, "Errors are values").
# The first two are the differential tester's repros (SQLite checked the literal divisor first).
# Classes by the standard: sqrt(-1) is 2201F (ISO/IEC 9075-2 6.28), abs(-2^63) 22003.
ARGUMENT_BEFORE_CHECK = [
    ("sqrt(-1.0) % 0.0", {}, "invalid_argument"),
    ("div(abs(-9223372036854775808), 0)", {}, "out_of_range"),
    ("sqrt(x) / 0.0", {"x": ("float64", [-4.0])}, "invalid_argument"),
    ("abs(a) % 0", {"a": ("int64", [-2 ** 63])}, "out_of_range"),
    # SQLite's ends_with answers an empty suffix without reading the text; '' is no bool
    # (ISO/IEC 9075-2 6.13, 22018).
    ("ends_with(cast(cast('' as bool) as string), '')", {}, "invalid_cast"),
    ("starts_with(cast(cast(s as bool) as string), '')", {"s": ("string", ["maybe"])}, "invalid_cast"),
    # SQLite's replace checked the search text (the second argument) before the first was
    # evaluated, so a negative substring length (2201X) beat abs(-2^63)'s 22003.
    ("replace(substring(null, null, abs(-9223372036854775808)), substring('', 0, -1), null)", {},
     "out_of_range"),
]


@pytest.mark.parametrize("text, columns, error", ARGUMENT_BEFORE_CHECK, ids=[c[0] for c in ARGUMENT_BEFORE_CHECK])
def test_an_argument_error_comes_before_the_check(engine: tuple[str, Runner], text: str, columns: dict,
                                                  error: str) -> None:
    test_an_error_beats_a_null_operand(engine, text, columns, error)


def test_arguments_first_only_where_an_error_could_be_lost() -> None:
    # The extra null test costs SQL size, so it is added only where an operand that can be
    # null comes before the one that can raise, or is null on every row.
    def sql(text: str) -> str:
        return to_sql(rexpr.compile(text, {"a": "int64", "x": "float64"}).tree, "duckdb")

    assert "GREATEST" not in sql("ln(x) * x")          # the operand that can raise comes first
    assert "GREATEST" not in sql("x * exp(x)")        # exp cannot raise (overflow is inf)
    assert sql("x * ln(x)").startswith("CASE WHEN GREATEST(\"x\" IS NULL, CASE WHEN")
    # Null on every row: "null once the arguments ran", with an ELSE no row takes.
    assert sql("ln(x) * cast(null as float64)").endswith(
        "THEN CAST(NULL AS DOUBLE) ELSE CAST('rexpr-unreachable' AS DOUBLE) END")


# ------------------------------------------------------------------------------ deep nesting
@pytest.mark.parametrize("depth", [100, 199])
@pytest.mark.parametrize("shape", sorted(DEEP_SHAPES))
def test_deep_expressions_lower_or_are_refused(shape: str, depth: int) -> None:
    tree = rexpr.compile(DEEP_SHAPES[shape](depth), SCHEMA).tree
    assert lowering.call_depth(tree) == depth
    for engine_name in lowering.engines():
        try:
            text = to_sql(tree, engine_name)
        except NotPushable as refusal:
            assert f"nests {depth} calls deep" in refusal.message or "nodes after its guards" in refusal.message
            continue
        assert text and lowering.measure(lower(tree, engine_name))[1] <= lowering.MAX_DEPTH


def test_deep_refusal_says_how_deep_and_what_is_supported() -> None:
    tree = rexpr.compile(DEEP_SHAPES["not"](199), SCHEMA).tree
    for engine_name in lowering.engines():
        with pytest.raises(NotPushable, match=rf"nests 199 calls deep; {engine_name} SQL generation supports at "
                                              rf"most {lowering.MAX_DEPTH} levels"):
            lower(tree, engine_name)


@pytest.mark.parametrize("shape", sorted(DEEP_SHAPES))
def test_the_deepest_sql_produced_runs_on_the_engine(engine: tuple[str, Runner], shape: str) -> None:
    # The deepest nesting of the shape that still lowers must run: the engine's own parser
    # takes it (SQLite's parser stack is checked by SQLite itself), and the values agree with
    # the reference evaluator (the oracle).
    name, runner = engine
    deepest = deepest_lowered(shape, SCHEMA, name)
    # A few edge rows: the deepest guarded SQL is hundreds of kilobytes, slow to plan on many rows.
    table = _table_for(deepest).slice(0, 6)
    expected = evaluate_table(deepest, table).to_pylist()  # oracle: the reference evaluator
    [result] = runner.evaluate(table, [SqlItem("v", lower(deepest, name), deepest.type)])
    observed = result.to_pylist()
    assert [r for r in range(table.num_rows)
            if r not in result.input_losses and not same_result(expected[r], observed[r])] == []


def test_lowering_time_stays_linear_in_the_depth_of_guarded_calls() -> None:
    # Guards repeat their operands, so the printed SQL doubles per level of abs(); the lowering
    # must refuse by size without building or walking the printed tree (it used to take minutes
    # at 35 levels, which this test would show as a hang; no timing is asserted).
    tree = rexpr.compile(DEEP_SHAPES["abs"](35), SCHEMA).tree
    with pytest.raises(NotPushable, match="nodes after its guards"):
        lower(tree, "duckdb")


def test_a_plan_keeps_a_conjunct_too_deep_for_the_source_local() -> None:
    from rexpr.planner.plan import plan

    for source in lowering.engines():
        deep = plan(DEEP_SHAPES["not"](197) + " and a > 0", SCHEMA, source)
        assert [c.pushed for c in deep.conjuncts] == [False, True]
        assert "calls deep" in deep.conjuncts[0].reason and deep.residual is not None
        # Each of these lowers alone, but their AND nests one level deeper than the first.
        edge = next(n for n in range(1, 200)
                    if _refused(rexpr.compile(DEEP_SHAPES["not"](n + 1) + " and a > 0", SCHEMA).tree, source))
        close = plan(DEEP_SHAPES["not"](edge) + " and a > 0 and x > 0.0", SCHEMA, source)
        assert [c.pushed for c in close.conjuncts][1:] == [True, True]
        assert close.pushed_sql is not None


def _refused(tree: Typed, engine_name: str) -> bool:
    try:
        to_sql(tree, engine_name)
    except NotPushable:
        return True
    return False


def test_long_and_chains_are_one_level_of_sql() -> None:
    # sqlglot prints and reads AND/OR chains in a loop; a 600-conjunct filter is fine.
    text = " and ".join(f"a <> {n}" for n in range(600))
    tree = rexpr.compile(text, SCHEMA).tree
    for engine_name in lowering.engines():
        assert lowering.measure(lower(tree, engine_name))[1] < 10
        assert to_sql(tree, engine_name).count("<>") == 600


def test_refusal_names_function_and_argument_form() -> None:
    tree = rexpr.compile("upper(s)", {"s": "string"}).tree
    with pytest.raises(NotPushable, match=r"duckdb faithful SQL: upper\(string\): .*simple"):
        lower(tree, "duckdb")
    tree = rexpr.compile("round(x, 2)", {"x": "float64"}).tree
    with pytest.raises(NotPushable, match=r"round\(float64, int64\): digits other than 0"):
        lower(tree, "sqlite")


def test_unknown_engine_and_lowering_suggest_a_close_name() -> None:
    tree = rexpr.compile("1 + 1", {}).tree
    with pytest.raises(InputProblem, match="did you mean 'duckdb'"):
        lower(tree, "duckbd")
    with pytest.raises(InputProblem, match="did you mean 'native'"):
        lower(tree, "duckdb", "nativ")  # type: ignore[arg-type]


# ------------------------------------------------------------------------------ native divergences
def _divergence_params() -> list:
    out = []
    for engine in ENGINES:
        for index, d in enumerate(dialect_of(engine).divergences):
            out.append(pytest.param(engine, index, id=f"{engine}-{d.function}-{index}"))
    return out


@pytest.mark.parametrize("engine_name, index", _divergence_params())
def test_documented_native_divergence_happens(engine_name: str, index: int) -> None:
    divergence = dialect_of(engine_name).divergences[index]
    runner = open_runner(engine_name)
    try:
        columns = {name: (type_name, [row[i] for row in divergence.rows])
                   for i, (name, type_name) in enumerate(divergence.fields)}
        try:
            compiled, table, native = _run(runner, divergence.expression, columns, "native")
            observed: list[object] = native.to_pylist()
        except EngineError as failure:  # a native statement the engine rejects outright also diverges
            observed = [f"engine error: {failure.message}"] * max(1, len(divergence.rows))
            compiled = rexpr.compile(divergence.expression, {n: t for n, t in divergence.fields} or {})
            table = pa.table({n: pa.array(v, _arrow(t)) for n, (t, v) in columns.items()}) \
                if columns else pa.table({"_row": [0]})
        expected = evaluate_table(compiled.tree, table).to_pylist()  # oracle: reference evaluator
        differs = [not same_result(e, o) for e, o in zip(expected, observed)]
        assert all(differs), (f"documented divergence did not happen on {engine_name}: {divergence.what}; "
                              f"reference {expected}, native {observed}")
    finally:
        runner.close()


def _arrow(type_name: str) -> pa.DataType:
    from rexpr.schema import to_arrow_type
    from rexpr.types import parse_type
    return to_arrow_type(parse_type(type_name))


def test_engines_doc_is_generated_from_the_profiles() -> None:
    text = (ROOT / "docs" / "engines.md").read_text(encoding="utf-8")
    assert text == render_engines_markdown(), "docs/engines.md is stale: regenerate with render_engines_markdown()"
    table = capability_table(["duckdb", "sqlite"])
    assert [row["id"] for row in table["functions"]] == [s.id for s in ENTRIES]


# ------------------------------------------------------------------------------ quoting and parentheses
HOSTILE_NAMES = ["select", "from", 'a"b', "a'b", "a\\b", "x y", "ship.port", "Grüße", "日本", "a;b",
                 "--c", "/*c*/", "a\nb", "a`b", "$1", "?", "\u00a0"]
HOSTILE_TEXTS = ["", "'", "''", "\\", "\\'", "a'; DROP TABLE t; --", "' OR '1'='1", '"', "\n", "\r\n", "\t",
                 "\x00", "a\x00b", "\x00\x00", "é😀日本", "\u2028", "%_*?[", "$$", "\\x00", "/* */", "--"]


@pytest.mark.parametrize("engine_name", ENGINES)
def test_hostile_names_and_literals_round_trip(engine_name: str) -> None:
    runner = open_runner(engine_name)
    try:
        names = HOSTILE_NAMES
        table = pa.table({n: pa.array([f"value of {n}"]) for n in names})
        items = [SqlItem(f"c{i}", lower(TField((n,), STRING, SPAN), engine_name), STRING) for i, n in enumerate(names)]
        items += [SqlItem(f"t{i}", lower(TLiteral(s, STRING, SPAN), engine_name), STRING)
                  for i, s in enumerate(HOSTILE_TEXTS)]
        results = runner.evaluate(table, items)
        got = [r.to_pylist()[0] for r in results]
        # oracle: the input itself, byte for byte
        assert got == [f"value of {n}" for n in names] + HOSTILE_TEXTS
        for item in items:
            text = to_sql_text(item.expression, engine_name)
            statements = sqlglot.parse(f"SELECT {text}", read=dialect_of(engine_name).sqlglot_dialect)
            assert len(statements) == 1 and isinstance(statements[0], exp.Select)
    finally:
        runner.close()


def to_sql_text(expression: exp.Expression, engine: str) -> str:
    return expression.sql(dialect=dialect_of(engine).sqlglot_dialect)


@pytest.mark.parametrize("engine_name", ENGINES)
def test_select_sql_is_one_statement_with_hostile_alias_and_table(engine_name: str) -> None:
    tree = TCall("concat_op", (TField(('we"ird;name',), STRING, SPAN), TLiteral("'); DROP TABLE x; --", STRING, SPAN)),
                 STRING, SPAN)
    table_name = 'tab"le; DROP TABLE y'
    sql = select_sql([('al"ias', tree), ("second", TLiteral("a\x00b", STRING, SPAN))], engine_name, table_name)
    dialect = dialect_of(engine_name).sqlglot_dialect
    statements = sqlglot.parse(sql, read=dialect)
    assert len(statements) == 1 and isinstance(statements[0], exp.Select)
    create = exp.Create(this=exp.Schema(this=exp.Table(this=exp.to_identifier(table_name, quoted=True)),
                                        expressions=[exp.ColumnDef(this=exp.to_identifier('we"ird;name', quoted=True),
                                                                   kind=exp.DataType.build("TEXT"))]),
                        kind="TABLE").sql(dialect=dialect)
    insert = f"INSERT INTO {exp.to_identifier(table_name, quoted=True).sql(dialect=dialect)} VALUES ('v')"
    if engine_name == "duckdb":
        con = duckdb.connect()
        con.execute(create)
        con.execute(insert)
        cursor = con.execute(sql)
        rows, names = cursor.fetchall(), [d[0] for d in cursor.description]
    else:
        con = sqlite3.connect(":memory:")
        con.execute(create)
        con.execute(insert)
        cursor = con.execute(sql)
        rows, names = cursor.fetchall(), [d[0] for d in cursor.description]
    con.close()
    assert rows == [("v'); DROP TABLE x; --", "a\x00b")]  # oracle: the inputs, concatenated by hand
    assert names == ['al"ias', "second"]


def test_parentheses_follow_the_tree_not_precedence() -> None:
    a = exp.column("a")
    # Measured sqlglot hazard: Mul(2, Div(a, 3)) prints "2 * a / 3", which means (2 * a) / 3.
    raw = exp.Mul(this=exp.Literal.number(2), expression=exp.Div(this=a.copy(), expression=exp.Literal.number(3)))
    assert raw.sql(dialect="duckdb") == "2 * a / 3"
    assert parenthesised(raw.copy()).sql(dialect="duckdb") == "2 * (a / 3)"
    negated = exp.Neg(this=exp.Literal.number("-1"))
    assert parenthesised(negated).sql(dialect="sqlite") == "-(-1)"  # never "--1", a comment


@pytest.mark.parametrize("text", ["2.0 * (x / 3.0)", "x - (y - x)", "-(-a)", "not (f and g)", "(a - b) * (a + b)",
                                  "s || (p || s)", "a % (b % 3)", "-(x * y)"])
def test_generated_sql_reparses_to_the_same_tree_and_value(engine: tuple[str, Runner], text: str) -> None:
    name, runner = engine
    tree = rexpr.compile(text, SCHEMA).tree
    dialect = dialect_of(name).sqlglot_dialect
    for lowering_name in ("faithful", "native"):
        sql = to_sql(tree, name, lowering_name)  # type: ignore[arg-type]
        reparsed = sqlglot.parse_one(sql, read=dialect)
        assert reparsed.sql(dialect=dialect) == sql
    # The reparsed faithful text evaluates as the reference says.
    reparsed = sqlglot.parse_one(to_sql(tree, name), read=dialect)
    table = _table_for(tree)
    if name == "sqlite":
        bad = _nan_rows(tree, table)
        table = table.take([r for r in range(table.num_rows) if r not in bad])
    [again] = runner.evaluate(table, [SqlItem("v", reparsed, tree.type)])
    expected = evaluate_table(tree, table).to_pylist()  # oracle: reference evaluator
    assert all(same_result(e, o) for row, (e, o) in enumerate(zip(expected, again.to_pylist()))
               if row not in again.input_losses)


def test_every_derived_case_reparses_to_one_expression(engine: tuple[str, Runner]) -> None:
    """sqlglot reads every generated item back as one expression, and its own printing of that
    is a fixed point. (Printed text is not always kept: sqlglot reads SQLite's MOD(x, y) as the
    % operator, which SQLite computes on integers, so a re-parsed tree is not sent anywhere.)"""
    name, _ = engine
    dialect = dialect_of(name).sqlglot_dialect
    for spec in ENTRIES:
        for tree in catalogue_cases(spec):
            for lowering_name in ("faithful", "native"):
                try:
                    sql = to_sql(tree, name, lowering_name)  # type: ignore[arg-type]
                except NotPushable:
                    continue
                statements = sqlglot.parse(f"SELECT {sql}", read=dialect)
                assert len(statements) == 1 and len(statements[0].expressions) == 1, (spec.id, sql[:300])
                once = sqlglot.parse_one(sql, read=dialect).sql(dialect=dialect)
                assert sqlglot.parse_one(once, read=dialect).sql(dialect=dialect) == once


def test_engine_registry_lists_dialect_modules() -> None:
    assert set(ENGINES) <= set(lowering.engines())
    assert dialect_of("duckdb").name == "duckdb"
    assert lower(TLiteral(None, NULL, SPAN), "duckdb").sql(dialect="duckdb") == "NULL"
    assert lower(TLiteral(dt.date(2024, 5, 1), DataType(Kind.DATE), SPAN), "sqlite").sql(dialect="sqlite") == "'2024-05-01'"
    assert lower(TLiteral(INT64_MIN, INT64, SPAN), "sqlite").sql(dialect="sqlite") == "(-9223372036854775808)"
    assert lower(TLiteral(True, BOOL, SPAN), "sqlite").sql(dialect="sqlite") == "1"


def test_struct_field_paths_are_dotted_columns(engine: tuple[str, Runner]) -> None:
    name, runner = engine
    schema = {"ship": {"port": "string", "berth": "int64"}}
    compiled = rexpr.compile("ship.port || 'x' = 'ax' or ship.berth + 1 > 2", schema)
    item = lower(compiled.tree, name)
    columns = {c.name for c in item.find_all(exp.Column)}
    assert columns == {"ship.port", "ship.berth"}  # one quoted column per dotted path
    table = pa.table({"ship": pa.array([{"port": "a", "berth": 0}, None, {"port": "b", "berth": 5},
                                        {"port": None, "berth": None}],
                                       pa.struct([("port", pa.string()), ("berth", pa.int64())]))})
    [result] = runner.evaluate(table, [SqlItem("v", item, compiled.type)])
    assert result.to_pylist() == evaluate_table(compiled.tree, table).to_pylist()  # oracle: reference evaluator


@pytest.mark.parametrize("escape", ["é", "€", "😀"])
def test_duckdb_refuses_an_escape_it_cannot_take(escape: str) -> None:
    # The catalogue allows any one-character escape (ISO/IEC 9075-2 8.5: an escape is one
    # character); DuckDB's LIKE refuses every non-ASCII one, so the lowering must not push it.
    with pytest.raises(duckdb.Error, match="escape"):
        duckdb.connect().sql(f"SELECT 'a' LIKE 'a' ESCAPE '{escape}'").fetchall()
    tree = rexpr.compile(f"s like 'a{escape}%' escape '{escape}'", {"s": "string"}).tree
    with pytest.raises(NotPushable, match="ASCII"):
        to_sql(tree, "duckdb")


# The differential tester's repros (seed 4): DuckDB's common-subexpression pass computed a
# repeated right-hand subtree before the left operand, so its error came first. The reference
# evaluates operands left to right (docs/semantics.md, "Errors are values"); sqrt(-1) and
# ln(-2.5) are 2201F (ISO/IEC 9075-2 6.28), the others 22012 and 22018.
DUCKDB_ERROR_ORDER = [
    ("ln(y) <> power(0.0, 0.0 % 0.0)", {"y": ("float64", [-2.5, 0.0])}),
    ("sqrt(-1.0) in (nullif(cast('' as float64), cast(null as float64)))", {}),
    ("case when is_nan(sqrt(-1.0)) then cast(null as date) end > nullif(cast('' as date), cast(null as date))", {}),
]


@pytest.mark.parametrize("text, columns", DUCKDB_ERROR_ORDER, ids=[c[0] for c in DUCKDB_ERROR_ORDER])
def test_duckdb_left_operand_error_comes_first(text: str, columns: dict) -> None:
    runner = open_runner("duckdb")
    try:
        compiled, table, result = _run(runner, text, columns)
    finally:
        runner.close()
    expected = evaluate_table(compiled.tree, table).to_pylist()  # oracle: the reference evaluator
    assert all(isinstance(e, RowError) and e.error.value == "invalid_argument" for e in expected)
    assert [same_result(e, o) for e, o in zip(expected, result.to_pylist())] == [True] * len(expected)
