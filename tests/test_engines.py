"""Engine runners on real engines (DuckDB, SQLite in process; PostgreSQL, MariaDB servers).

Oracles: the input itself for round trips (a stored value must read back identical), the
reference evaluator for per-row errors, and the published rules named beside each check.
Items are built directly with sqlglot, so these tests do not depend on the SQL lowering.
"""

from __future__ import annotations

import datetime as dt
import decimal
import math
import socket
import sqlite3
import struct

import pyarrow as pa
import pytest
import sqlglot
from sqlglot import exp

import rexpr
from engines_support import engine_params, open_runner, runner  # noqa: F401 - runner is a fixture
from rexpr.catalogue.model import ErrorClass
from rexpr.compare import same_result
from rexpr.edge_values import pool
from rexpr.engines import ENGINE_NAMES, get_engine, session_for_connection
from rexpr.engines.base import Runner, SqlItem
from rexpr.engines.failures import EngineError, EngineLimitReached, SourceRowFailed, UnstorableInput
from rexpr.engines.mapping import TypeMismatch
from rexpr.engines.settings import CONFIG_VARIABLE, ServerSettings, server_settings
from rexpr.engines.statement import SelectBuilder, select_items
from rexpr.errors import EngineUnavailable, InputProblem
from rexpr.reference.tables import evaluate_table
from rexpr.schema import Schema
from rexpr.sql.lowering import lower
from rexpr.types import BOOL, FLOAT64, INT64, INT64_MAX, INT64_MIN, STRING, DataType, Kind
from rexpr.values import EngineLimit, RowError


def column(name: str) -> exp.Expression:
    return exp.column(name, quoted=True)


def parse(template: str, runner: Runner) -> exp.Expression:
    """SQL in the runner's dialect; ``{a}`` stands for the quoted column a (MySQL quotes with
    backticks, and reads "a" as a string)."""
    return sqlglot.parse_one(template.format(a=column("a").sql(dialect=runner.dialect)), read=runner.dialect)


def read_back(runner: Runner, table: pa.Table) -> dict[str, list[object]]:
    """Every top-level scalar column read through the engine with a trivial column item."""
    schema = Schema.from_arrow(table.schema)
    items = [SqlItem(name, column(name), t) for name, t in schema.fields]
    return {r.alias: r.to_pylist() for r in runner.evaluate(table, items)}


def reference(text: str, table: pa.Table) -> list[object]:
    return rexpr.compile(text, table.schema).evaluate(table, backend="reference").to_pylist()


def assert_same(expected: list[object], observed: list[object]) -> None:
    assert len(expected) == len(observed)
    bad = [(row, e, o) for row, (e, o) in enumerate(zip(expected, observed)) if not same_result(e, o)]
    assert not bad, bad[:5]


# ------------------------------------------------------------------------- names
# Reserved words: ISO/IEC 9075-2 clause 5.2 <reserved word> (SELECT, FROM, ORDER, GROUP, USER,
# TABLE, VALUES). Quotes, backslashes, '%' (PyMySQL's format marker), '?' (SQLite's
# placeholder) and control characters are the characters a careless quoter or driver mangles
# (common practice, no source).
HOSTILE_NAMES = (
    "select", "FROM", "order", "group", "user", "table", "values", "it's", 'say "hi"', "back\\slash",
    "back`tick", "new\nline", "tab\there", "with space", "%s", "%(x)s", "%%", "?", "$1", ":name", "--",
    "/*", "a;b", "Straße", "日本語", "e\u0301", "ǅ", "-", "1",
)
# U+1F600 and U+10FFFF lie outside the Basic Multilingual Plane (Unicode 15.0, section 2.8).
ASTRAL_NAMES = ("\U0001F600", "x\U0010FFFFy")


def test_hostile_names_round_trip(runner: Runner) -> None:
    table = pa.table({name: pa.array([i, -i], pa.int64()) for i, name in enumerate(HOSTILE_NAMES)})
    got = read_back(runner, table)
    for i, name in enumerate(HOSTILE_NAMES):
        assert got[name] == [i, -i], name


@pytest.mark.parametrize("engine", engine_params())
def test_astral_names(engine: str) -> None:
    runner = open_runner(engine)
    table = pa.table({name: pa.array([i], pa.int64()) for i, name in enumerate(ASTRAL_NAMES)})
    try:
        if engine == "mariadb":
            # MariaDB knowledge base, "Identifier Names": quoted identifiers allow U+0001-U+FFFF
            # only (from memory); the runner must refuse, not rename.
            with pytest.raises(UnstorableInput):
                read_back(runner, table)
        else:
            assert read_back(runner, table) == {name: [i] for i, name in enumerate(ASTRAL_NAMES)}
    finally:
        runner.close()


@pytest.mark.parametrize("engine", engine_params())
def test_names_equal_ignoring_case(engine: str) -> None:
    runner = open_runner(engine)
    table = pa.table({"port": pa.array([1], pa.int64()), "Port": pa.array([2], pa.int64())})
    try:
        if engine == "postgres":
            # PostgreSQL manual 4.1.1: quoted identifiers are case-sensitive.
            assert read_back(runner, table) == {"port": [1], "Port": [2]}
        else:
            # DuckDB, SQLite and MariaDB compare column names ignoring case (each engine's
            # documentation on identifiers, from memory): DuckDB would rename to 'Port_1'.
            with pytest.raises(UnstorableInput):
                read_back(runner, table)
    finally:
        runner.close()


@pytest.mark.parametrize("engine", engine_params())
@pytest.mark.parametrize("length", [63, 64, 65])
def test_long_names(engine: str, length: int) -> None:
    # PostgreSQL manual 4.1.1: identifiers longer than NAMEDATALEN-1 = 63 bytes are truncated.
    # MariaDB knowledge base "Identifier Names": column names are at most 64 characters.
    limits = {"postgres": 63, "mariadb": 64}
    runner = open_runner(engine)
    name = "n" * length
    table = pa.table({name: pa.array([7], pa.int64())})
    try:
        if length > limits.get(engine, 10**6):
            with pytest.raises(UnstorableInput):
                read_back(runner, table)
        else:
            assert read_back(runner, table) == {name: [7]}
    finally:
        runner.close()


def test_dotted_name_colliding_with_a_struct_field_is_refused(runner: Runner) -> None:
    table = pa.table({"ship.port": ["a"], "ship": pa.array([{"port": "b"}])})
    with pytest.raises(InputProblem) as info:
        runner.evaluate(table, [SqlItem("x", column("ship.port"), STRING)])
    assert info.value.code == "column_name_collision"


def test_struct_fields_are_flattened(runner: Runner) -> None:
    struct = pa.struct([("port", pa.string()), ("berth", pa.int64())])
    table = pa.table({"ship": pa.array([{"port": "Kestrel Quay", "berth": 4}, None, {"port": None, "berth": -1}],
                                       struct)})
    results = runner.evaluate(table, [SqlItem("port", column("ship.port"), STRING),
                                      SqlItem("berth", column("ship.berth"), INT64)])
    # Oracle: the reference evaluator (a null struct makes its fields null).
    assert_same(reference("ship.port", table), results[0].to_pylist())
    assert_same(reference("ship.berth", table), results[1].to_pylist())


# ------------------------------------------------------------------------ values
# Unicode 15.0 section 3.9 D76: scalar values are U+0000..U+D7FF and U+E000..U+10FFFF; the
# extremes and a few format characters (U+FEFF, U+2028) are included with the text a quoter
# mangles (common practice, no source).
HOSTILE_STRINGS = tuple(v for v in pool(Kind.STRING) if v is not None) + (
    "it's", "''", 'say "hi"', "back\\slash", "\\'", "\\", "new\nline", "cr\r\nlf", "%s", "%(x)s", "?", "--",
    "/*", "\u00e9", "e\u0301", "\U0001F600", "\U0010FFFF", "\ufeff", "\u2028", "\x01", "\x7f", "x" * 5000,
)


def test_hostile_strings_round_trip(runner: Runner) -> None:
    values = list(HOSTILE_STRINGS) + [None]
    assert read_back(runner, pa.table({"s": pa.array(values, pa.string())}))["s"] == values


@pytest.mark.parametrize("engine", engine_params())
def test_nul_in_text(engine: str) -> None:
    runner = open_runner(engine)
    values = ["a\x00b", "\x00", "plain"]
    table = pa.table({"s": values})
    try:
        if engine == "postgres":
            # PostgreSQL manual 8.3: the character with code zero cannot be stored in text.
            with pytest.raises(UnstorableInput) as info:
                read_back(runner, table)
            assert "NUL" in info.value.message
        else:
            assert read_back(runner, table)["s"] == values
    finally:
        runner.close()


def test_int64_bounds_round_trip(runner: Runner) -> None:
    # Two's-complement int64 bounds (common practice, no source), from the shared edge pool.
    values = list(pool(Kind.INT64))
    assert INT64_MIN in values and INT64_MAX in values
    assert read_back(runner, pa.table({"i": pa.array(values, pa.int64())}))["i"] == values


def _bits(value: float) -> bytes:
    return struct.pack("<d", value)


# What each engine stores instead of a float64 it cannot hold (see the runner docstrings):
# SQLite has no NaN and keeps no sign on zero (SQLite "Datatypes In SQLite", REAL; from memory);
# MariaDB DOUBLE has no NaN or infinity (MariaDB knowledge base, DOUBLE; from memory).
FLOAT_LOSSES = {
    "sqlite": {"NaN": None, "-0.0": 0.0},
    "mariadb": {"NaN": None, "inf": None, "-inf": None, "-0.0": 0.0},
}


def _label(value: float) -> str:
    if math.isnan(value):
        return "NaN"
    if math.isinf(value):
        return "inf" if value > 0 else "-inf"
    return "-0.0" if value == 0 and math.copysign(1, value) < 0 else ""


def test_float_edge_values(runner: Runner) -> None:
    # IEEE 754-2019 3.4 binary64: every finite value, ±0, ±inf and NaN is one bit pattern that
    # a binary transfer keeps; subnormals (5e-324, 1e-310) and the largest finite value included.
    values = list(pool(Kind.FLOAT64))
    [result] = runner.evaluate(pa.table({"f": pa.array(values, pa.float64())}), [SqlItem("f", column("f"), FLOAT64)])
    got = result.to_pylist()
    losses = FLOAT_LOSSES.get(runner.name, {})
    expected_lossy = {row for row, v in enumerate(values) if v is not None and _label(v) in losses}
    assert set(result.input_losses) == expected_lossy
    for row, (sent, back) in enumerate(zip(values, got)):
        if sent is None:
            assert back is None
        elif row in expected_lossy:
            replacement = losses[_label(sent)]
            assert back == replacement and (back is None or _bits(back) == _bits(replacement)), (row, sent, back)
        elif math.isnan(sent):
            assert isinstance(back, float) and math.isnan(back)
        else:
            assert isinstance(back, float) and _bits(back) == _bits(sent), (row, sent, back)


def test_dates_and_timestamps_round_trip(runner: Runner) -> None:
    # Years 1 and 9999 are the ends of Python's proleptic Gregorian range (Python docs,
    # datetime.MINYEAR/MAXYEAR); microseconds are the timestamp resolution (rexpr.types).
    dates = list(pool(Kind.DATE))
    stamps = list(pool(Kind.TIMESTAMP)) + [dt.datetime(2024, 5, 1, 10, 0, 0, 5)]
    assert read_back(runner, pa.table({"d": pa.array(dates, pa.date32())}))["d"] == dates
    assert read_back(runner, pa.table({"t": pa.array(stamps, pa.timestamp("us"))}))["t"] == stamps


def test_bools_round_trip(runner: Runner) -> None:
    values = [True, False, None, False, True]
    assert read_back(runner, pa.table({"b": pa.array(values, pa.bool_())}))["b"] == values


# ------------------------------------------------------------------ per-row errors
def _divisor_table(rows: int = 300) -> pa.Table:
    return pa.table({"a": pa.array([None if i % 17 == 5 else (i % 11) - 3 for i in range(rows)], pa.int64())})


# Float division that signals division by zero per row, per engine: DuckDB through error()
# with a tag, SQLite through rexpr_raise with a tag, PostgreSQL natively (SQLSTATE 22012,
# ISO/IEC 9075-2 clause 24).
DIVISION_SQL = {
    "duckdb": "CASE WHEN {a} = 0 THEN error('rexpr:division_by_zero') ELSE CAST(10 AS DOUBLE) / {a} END",
    "sqlite": "CASE WHEN {a} = 0 THEN rexpr_raise('rexpr:division_by_zero') ELSE 10.0 / {a} END",
    "postgres": "CAST(10 AS DOUBLE PRECISION) / {a}",
}
OVERFLOW_SQL = "{a} + 9223372036854775805"


@pytest.mark.parametrize("engine", engine_params(tuple(DIVISION_SQL)))
def test_bisect_locates_division_by_zero(engine: str) -> None:
    runner = open_runner(engine)
    table = _divisor_table()
    failing = SqlItem("q", parse(DIVISION_SQL[engine], runner), FLOAT64)
    clean = SqlItem("a", column("a"), INT64)
    try:
        results = runner.evaluate(table, [clean, failing, clean])
    finally:
        runner.close()
    expected = reference("10 / a", table)  # oracle: the reference evaluator
    assert any(isinstance(v, RowError) for v in expected)
    assert_same(expected, results[1].to_pylist())
    assert results[0].to_pylist() == results[2].to_pylist() == table.column("a").to_pylist()
    assert results[1].statements > 1


@pytest.mark.parametrize("engine", engine_params(("duckdb", "postgres", "mariadb")))
def test_bisect_locates_int64_overflow(engine: str) -> None:
    # DuckDB raises OutOfRangeException, PostgreSQL SQLSTATE 22003 (ISO/IEC 9075-2), MariaDB
    # error 1690 (MariaDB error codes) for BIGINT addition that overflows.
    runner = open_runner(engine)
    table = _divisor_table()
    item = SqlItem("sum", parse(OVERFLOW_SQL, runner), INT64)
    try:
        [result] = runner.evaluate(table, [item])
    finally:
        runner.close()
    expected = reference("a + 9223372036854775805", table)
    assert {v.error for v in expected if isinstance(v, RowError)} == {ErrorClass.OUT_OF_RANGE}
    assert_same(expected, result.to_pylist())


@pytest.mark.servers
def test_items_failing_on_different_rows_keep_their_own_classes() -> None:
    runner = open_runner("postgres")
    table = _divisor_table()
    items = [SqlItem("q", parse(DIVISION_SQL["postgres"], runner), FLOAT64),
             SqlItem("s", parse(OVERFLOW_SQL, runner), INT64),
             SqlItem("a", column("a"), INT64)]
    try:
        results = runner.evaluate(table, items)
    finally:
        runner.close()
    assert_same(reference("10 / a", table), results[0].to_pylist())
    assert_same(reference("a + 9223372036854775805", table), results[1].to_pylist())
    assert results[2].to_pylist() == table.column("a").to_pylist()


def test_sqlite_integer_overflow_is_a_visible_mismatch() -> None:
    # SQLite "Datatypes In SQLite" / expression docs: integer overflow in + yields a REAL
    # (from memory). The reference says out_of_range; the runner must not present the REAL as
    # an int64, so it is a TypeMismatch, which never compares equal to anything.
    runner = open_runner("sqlite")
    table = _divisor_table()
    try:
        [result] = runner.evaluate(table, [SqlItem("s", parse(OVERFLOW_SQL, runner), INT64)])
    finally:
        runner.close()
    expected = reference("a + 9223372036854775805", table)
    overflowing = {row for row, v in enumerate(expected) if isinstance(v, RowError)}
    assert overflowing and set(result.type_mismatches) == overflowing
    observed = result.to_pylist()
    assert all(isinstance(observed[row], TypeMismatch) for row in overflowing)
    assert not any(same_result(expected[row], observed[row]) for row in overflowing)


# PostgreSQL SQLSTATEs for the catalogue's error rules (ISO/IEC 9075-2 clause 24 and the
# PostgreSQL manual, appendix A), checked against the class the reference gives.
POSTGRES_ERRORS = (
    ("ln(x)", "LN(\"x\")", {"x": pa.array([0.0], pa.float64())}),                              # 2201E
    ("sqrt(x)", "SQRT(\"x\")", {"x": pa.array([-1.0], pa.float64())}),                          # 2201F
    ("substring(s, 1, n)", "SUBSTRING(\"s\" FROM 1 FOR CAST(\"n\" AS INTEGER))",
     {"s": ["abc"], "n": pa.array([-1], pa.int64())}),                                         # 22011
    ("s like 'a' escape 'ab'", "\"s\" LIKE 'a' ESCAPE 'ab'", {"s": ["a"]}),                   # 22025
    ("cast(s as date)", "CAST(\"s\" AS DATE)", {"s": ["2024-02-30"]}),                          # 22008
    ("cast(s as int64)", "CAST(\"s\" AS BIGINT)", {"s": ["x1"]}),                                # 22P02
)


@pytest.mark.servers
@pytest.mark.parametrize("text,sql,data", POSTGRES_ERRORS, ids=[t for t, _, _ in POSTGRES_ERRORS])
def test_postgres_sqlstates_classify_like_the_reference(text: str, sql: str, data: dict) -> None:
    runner = open_runner("postgres")
    table = pa.table(data)
    compiled = rexpr.compile(text, table.schema)
    try:
        [result] = runner.evaluate(table, [SqlItem("x", sqlglot.parse_one(sql, read="postgres"), compiled.type)])
    finally:
        runner.close()
    [expected] = reference(text, table)
    [observed] = result.to_pylist()
    assert isinstance(expected, RowError)
    assert same_result(expected, observed), (expected, observed)


def test_unclassifiable_failure_is_an_engine_error(runner: Runner) -> None:
    table = pa.table({"a": pa.array([1, 2], pa.int64())})
    # An unknown function fails the statement on every engine, and is no per-row error.
    with pytest.raises(EngineError) as info:
        runner.evaluate(table, [SqlItem("x", parse("no_such_function({a})", runner), INT64)])
    assert info.value.code == "engine_error"
    assert info.value.sql and "NO_SUCH_FUNCTION" in info.value.sql.upper()
    assert info.value.engine_message


def test_unknown_column_is_refused_before_running(runner: Runner) -> None:
    # SQLite reads a double-quoted name it cannot resolve as a string literal (SQLite "quirks",
    # section 8, from memory): without this check a string item would return the name itself.
    table = pa.table({"a": pa.array([1, 2], pa.int64())})
    with pytest.raises(EngineError) as info:
        runner.evaluate(table, [SqlItem("x", column("no such column"), STRING)])
    assert info.value.code == "unknown_column"


def test_statement_budget_is_an_error_not_a_guess() -> None:
    runner = open_runner("duckdb")
    table = _divisor_table()
    item = SqlItem("q", parse(DIVISION_SQL["duckdb"], runner), FLOAT64)
    try:
        with pytest.raises(EngineError, match="statements"):
            runner.evaluate(table, [item], max_statements=5)
    finally:
        runner.close()


def test_one_statement_when_nothing_fails(runner: Runner) -> None:
    table = pa.table({"a": pa.array(range(2000), pa.int64())})
    items = [SqlItem(f"x{k}", parse(f"{{a}} * {k} - 1", runner), INT64) for k in range(20)]
    results = runner.evaluate(table, items)
    assert {r.statements for r in results} == {1}
    assert results[7].to_pylist() == [a * 7 - 1 for a in range(2000)]


def test_zero_rows(runner: Runner) -> None:
    table = pa.table({"a": pa.array([], pa.int64())})
    [result] = runner.evaluate(table, [SqlItem("a", column("a"), INT64)])
    assert result.to_pylist() == [] and result.evaluation.values.type == pa.int64()


# --------------------------------------------------------------- result mapping
# Items whose engine type differs from the declared one. Oracle for the decimal cases:
# Python's decimal (a DECIMAL maps to float64 only when Decimal(float(d)) == d).
MISMATCHES = {
    "duckdb": ("CAST({a} AS FLOAT)", FLOAT64),                # float32: another domain
    "sqlite": ("{a} + 1", BOOL),                               # integers other than 0/1 for a bool
    "postgres": ("CAST({a} AS DOUBLE PRECISION)", INT64),     # a float for an int64 item
    "mariadb": ("{a} / 3", FLOAT64),                          # DECIMAL 0.3333 is no binary64 value
}


@pytest.mark.parametrize("engine", engine_params(tuple(MISMATCHES)))
def test_type_mismatches_stay_visible(engine: str) -> None:
    runner = open_runner(engine)
    table = pa.table({"a": pa.array([1, 2, None], pa.int64())})
    sql, declared = MISMATCHES[engine]
    try:
        [result] = runner.evaluate(table, [SqlItem("x", parse(sql, runner), declared)])
    finally:
        runner.close()
    assert set(result.type_mismatches) == {0, 1}
    observed = result.to_pylist()
    assert isinstance(observed[0], TypeMismatch) and observed[2] is None
    assert result.evaluation.values.to_pylist() == [None, None, None]
    if engine == "mariadb":
        assert decimal.Decimal(float(decimal.Decimal("0.3333"))) != decimal.Decimal("0.3333")


SERVERS = [pytest.mark.servers]


@pytest.mark.parametrize("engine,sql,declared,expected", [
    # SQLite "Datatypes In SQLite" 2.1: booleans are integers 0 and 1 (from memory).
    pytest.param("sqlite", "{a} > 1", BOOL, [False, True, None], id="sqlite-bool"),
    # MariaDB: comparison results are integers 1/0; BOOLEAN is TINYINT(1) (MariaDB KB, BOOLEAN).
    pytest.param("mariadb", "{a} > 1", BOOL, [False, True, None], marks=SERVERS, id="mariadb-bool"),
    # PostgreSQL numeric with no fraction is an exact integer (PostgreSQL manual 8.1.2).
    pytest.param("postgres", "CAST({a} AS NUMERIC)", INT64, [1, 2, None], marks=SERVERS, id="postgres-numeric"),
    # DECIMAL products 1.5 and 3.0 are exactly binary64 values (Python's decimal:
    # Decimal(1.5) == Decimal('1.5')), so they map.
    pytest.param("mariadb", "{a} * 1.5", FLOAT64, [1.5, 3.0, None], marks=SERVERS, id="mariadb-decimal"),
    pytest.param("duckdb", "{a} * 1.5", FLOAT64, [1.5, 3.0, None], id="duckdb-decimal"),
])
def test_engine_kinds_that_map_exactly(engine: str, sql: str, declared: DataType, expected: list) -> None:
    runner = open_runner(engine)
    table = pa.table({"a": pa.array([1, 2, None], pa.int64())})
    try:
        [result] = runner.evaluate(table, [SqlItem("x", parse(sql, runner), declared)])
    finally:
        runner.close()
    assert not result.type_mismatches
    assert result.to_pylist() == expected


# ---------------------------------------------------------------- sessions, registry
@pytest.mark.parametrize("engine", engine_params())
def test_session_settings_are_in_force(engine: str) -> None:
    runner = open_runner(engine)
    try:
        info = runner.session_info()
    finally:
        runner.close()
    assert info.engine == engine and info.version
    settings = info.settings
    if engine == "duckdb":
        assert settings["TimeZone"] == "UTC"
    elif engine == "postgres":
        assert settings["TimeZone"] == "UTC"
        assert settings["extra_float_digits"] == "3"
        assert settings["standard_conforming_strings"] == "on"
    elif engine == "mariadb":
        modes = settings["sql_mode"].split(",")
        assert "STRICT_ALL_TABLES" in modes and "NO_BACKSLASH_ESCAPES" not in modes
        assert settings["time_zone"] == "+00:00"
        assert settings["collation_connection"] == "utf8mb4_bin"
    else:
        assert "rexpr_raise" in settings["functions"]


def _closed_port() -> int:
    # A port the OS just handed out and nobody listens on: connecting is refused at once.
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


@pytest.mark.parametrize("engine", ["postgres", "mariadb"])
def test_unreachable_server_is_unavailable(engine: str) -> None:
    settings = ServerSettings("127.0.0.1", _closed_port(), "root", "", "test", connect_timeout=2)
    runner = get_engine(engine, settings=settings)
    status = runner.availability()
    assert not status.available and str(settings.port) in status.reason
    with pytest.raises(EngineUnavailable):
        runner.evaluate(pa.table({"a": [1]}), [SqlItem("a", column("a"), INT64)])
    runner.close()


def test_unknown_engine_suggests_a_close_name() -> None:
    with pytest.raises(InputProblem) as info:
        get_engine("postgre")
    assert info.value.code == "unknown_engine" and "'postgres'" in info.value.message
    assert ENGINE_NAMES == ("duckdb", "sqlite", "postgres", "mariadb")


def test_settings_precedence(tmp_path, monkeypatch) -> None:
    config = tmp_path / "engines.toml"
    config.write_text('[postgres]\nhost = "db.example"\nport = 6543\n[mariadb]\nuser = "ops"\n', encoding="utf-8")
    environ = {CONFIG_VARIABLE: str(config), "REXPR_POSTGRES_PORT": "7000", "REXPR_MARIADB_DATABASE": "harbour"}
    postgres = server_settings("postgres", environ)
    assert (postgres.host, postgres.port, postgres.user) == ("db.example", 7000, "postgres")
    mariadb = server_settings("mariadb", environ)
    assert (mariadb.user, mariadb.database, mariadb.port) == ("ops", "harbour", 3306)
    config.write_text('[postgres]\nhots = "typo"\n', encoding="utf-8")
    with pytest.raises(InputProblem, match="hots"):
        server_settings("postgres", environ)
    with pytest.raises(InputProblem):
        server_settings("postgres", {CONFIG_VARIABLE: str(tmp_path / "missing.toml")})
    with pytest.raises(InputProblem):
        server_settings("postgres", {"REXPR_POSTGRES_PORT": "eighty"})


def test_builder_prints_what_sqlglot_prints() -> None:
    expressions = [sqlglot.parse_one("a + 1 > 2 OR b IS NULL"), column('x"y`z'),
                   sqlglot.parse_one("CASE WHEN a = 0 THEN 'it''s' ELSE 'a\\b' END")]
    for dialect in ("duckdb", "sqlite", "postgres", "mysql"):
        builder = SelectBuilder(expressions, "rexpr_input", "rexpr_row", dialect)
        for rows in (None, (3, 9)):
            assert builder.sql([0, 1, 2], rows) == select_items(expressions, "rexpr_input", "rexpr_row", dialect, rows)
        assert builder.sql([2], (0, 1)) == select_items(expressions[2:], "rexpr_input", "rexpr_row", dialect, (0, 1))


# ------------------------------------------------------------- caller's connection
def test_borrowed_duckdb_connection() -> None:
    import duckdb

    connection = duckdb.connect()
    connection.sql("CREATE TABLE berths AS SELECT * FROM (VALUES (1, 'Kestrel'), (0, 'Tern')) t(n, name)")
    session = session_for_connection("duckdb", connection)
    schema = pa.schema([("n", pa.int64()), ("name", pa.string())])
    got = session.fetch_arrow('SELECT "n", "name" FROM berths ORDER BY "n"', schema)
    assert got.to_pylist() == [{"n": 0, "name": "Tern"}, {"n": 1, "name": "Kestrel"}]
    with pytest.raises(SourceRowFailed) as info:
        session.fetch_arrow("SELECT 10 // n AS q FROM berths", pa.schema([("q", pa.int64())]))
    assert info.value.error_class == "division_by_zero"
    connection.close()


def test_borrowed_sqlite_connection() -> None:
    connection = sqlite3.connect(":memory:")
    connection.execute("CREATE TABLE berths (n INTEGER, ok INTEGER)")
    connection.executemany("INSERT INTO berths VALUES (?, ?)", [(1, 1), (0, 0), (2, None)])
    session = session_for_connection("sqlite", connection)
    got = session.fetch_arrow("SELECT n, ok FROM berths ORDER BY n", pa.schema([("n", pa.int64()), ("ok", pa.bool_())]))
    assert got.to_pylist() == [{"n": 0, "ok": False}, {"n": 1, "ok": True}, {"n": 2, "ok": None}]
    with pytest.raises(EngineError):  # 2 is no bool: an error, since a table cannot show a mismatch
        session.fetch_arrow("SELECT n FROM berths", pa.schema([("n", pa.bool_())]))
    with pytest.raises(SourceRowFailed):
        session.fetch_arrow("SELECT rexpr_raise('rexpr:invalid_cast') AS x FROM berths", pa.schema([("x", pa.int64())]))
    connection.close()


# SQLite "Limits In SQLite", SQLITE_MAX_COLUMN = 2000 result columns; PostgreSQL's
# MaxTupleAttributeNumber = 1664 target-list entries (both from memory, confirmed below on the
# engine itself before the runner is asked to go past them).
@pytest.mark.parametrize("engine", engine_params(("sqlite", "postgres")))
def test_more_items_than_one_statement_holds(engine: str) -> None:
    runner = open_runner(engine)
    count = runner.max_items + 3
    try:
        if engine == "sqlite":
            with pytest.raises(sqlite3.OperationalError, match="too many columns"):
                sqlite3.connect(":memory:").execute("SELECT " + ", ".join(["1"] * count))
        else:
            with pytest.raises(Exception, match="1664"):
                runner._connection.execute("SELECT " + ", ".join(["1"] * count))
        items = [SqlItem(f"x{k}", parse(f"{{a}} + {k}", runner), INT64) for k in range(count)]
        table = pa.table({"a": pa.array([1, 2], pa.int64())})
        results = runner.evaluate(table, items)
        single = runner.evaluate(table, items[:5], items_per_statement=1)
    finally:
        runner.close()
    assert [r.to_pylist() for r in results] == [[1 + k, 2 + k] for k in range(count)]
    assert [r.to_pylist() for r in single] == [[1 + k, 2 + k] for k in range(5)]


# Raise constructs that carry a tag in the engine's message while the engine's own code says
# something else (PostgreSQL 22P02 invalid text, MariaDB 1690 BIGINT overflow, DuckDB a
# conversion error): the tag decides, as the classification order says. Oracle: the reference.
TAGGED_DIVISION_SQL = {
    "duckdb": "CASE WHEN {a} = 0 THEN CAST('rexpr:division_by_zero' AS DOUBLE) ELSE CAST(10 AS DOUBLE) / {a} END",
    "postgres": "CASE WHEN {a} = 0 THEN CAST(CONCAT('rexpr:division_by_zero;', LEFT(CAST(RANDOM() AS TEXT), 0)) "
                "AS DOUBLE PRECISION) ELSE CAST(10 AS DOUBLE PRECISION) / {a} END",
    "mariadb": "CASE WHEN {a} = 0 THEN CASE WHEN (((RAND() >= 0) + ('rexpr:division_by_zero' <> '')) "
               "+ 9223372036854775807) > 0 THEN CAST(NULL AS DOUBLE) END ELSE 10e0 / {a} END",
}


@pytest.mark.parametrize("engine", engine_params(tuple(TAGGED_DIVISION_SQL)))
def test_tag_in_the_message_decides_the_class(engine: str) -> None:
    runner = open_runner(engine)
    table = _divisor_table(60)
    try:
        [result] = runner.evaluate(table, [SqlItem("q", parse(TAGGED_DIVISION_SQL[engine], runner), FLOAT64)])
    finally:
        runner.close()
    assert_same(reference("10 / a", table), result.to_pylist())


def test_two_tags_in_one_message_are_no_known_row_error() -> None:
    runner = open_runner("duckdb")
    table = _divisor_table(20)
    sql = "CASE WHEN {a} = 0 THEN error('rexpr:out_of_range or rexpr:division_by_zero') ELSE {a} END"
    try:
        with pytest.raises(EngineError):
            runner.evaluate(table, [SqlItem("q", parse(sql, runner), INT64)])
    finally:
        runner.close()


# Engine-native LIKE escape errors, classified by message (DuckDB raises SyntaxException,
# SQLite an OperationalError; neither carries a SQLSTATE). Oracle: the reference, whose rule
# follows ISO/IEC 9075-2 8.5 (an escape is exactly one character, SQLSTATE 22019).
@pytest.mark.parametrize("engine", engine_params(("duckdb", "sqlite")))
def test_native_like_escape_errors(engine: str) -> None:
    runner = open_runner(engine)
    # No null operand: SQLite checks the escape even then, the reference gives null first
    # (a semantic difference for the lowering, not the classification tested here).
    table = pa.table({"s": ["a", "b"]})
    try:
        [result] = runner.evaluate(table, [SqlItem("x", sqlglot.parse_one("\"s\" LIKE 'a' ESCAPE 'ab'"), BOOL)])
    finally:
        runner.close()
    assert_same(reference("s like 'a' escape 'ab'", table), result.to_pylist())


# ------------------------------------------------------------------------ engine limits
# IEEE 754-2019 §7.4: an overflowing result rounds to ±inf (round to nearest), so 1e308 * 10
# and exp(1000) are +inf (exp(1000) ≈ 1.97e434, beyond the binary64 maximum ≈ 1.80e308, §3.6),
# and §7.2: inf - inf is an invalid operation whose result is a quiet NaN (§6.2). MariaDB's DOUBLE
# holds neither (MariaDB raises 1690 "DOUBLE value is out of range", from memory); SQLite's
# REAL gives NULL for the NaN (from memory). Each such row must be an engine-limit row, and
# the finite rows of the same statement keep their values. Oracle: the reference evaluator.
def _limits_and_values(result) -> tuple[dict[int, str], dict[int, object]]:
    observed = result.to_pylist()
    limits = {row: v.reason for row, v in enumerate(observed) if isinstance(v, EngineLimit)}
    return limits, {row: v for row, v in enumerate(observed) if row not in limits}


@pytest.mark.servers
def test_mariadb_double_overflow_is_a_per_row_engine_limit() -> None:
    runner = open_runner("mariadb")
    table = pa.table({"a": pa.array([1e308, 1.0, None, 1000.0, 2.0], pa.float64())})
    items = [SqlItem("product", parse("{a} * 10e0", runner), FLOAT64), SqlItem("exp", parse("EXP({a})", runner), FLOAT64),
             SqlItem("a", column("a"), FLOAT64)]
    try:
        product, exponential, plain = runner.evaluate(table, items)
    finally:
        runner.close()
    for result, text in ((product, "a * 10.0"), (exponential, "exp(a)")):
        expected = reference(text, table)
        limits, values = _limits_and_values(result)
        assert limits == {row: "non_finite" for row, e in enumerate(expected)
                          if isinstance(e, float) and math.isinf(e)}, (text, result.to_pylist())
        assert limits  # the table reaches ±inf for both items
        assert_same([expected[row] for row in values], list(values.values()))
        assert not result.evaluation.errors  # a limit is not an error class
    assert plain.to_pylist() == table.column("a").to_pylist()


@pytest.mark.servers
def test_mariadb_limit_tag_is_read_before_the_errno() -> None:
    # The raise construct is a BIGINT overflow (errno 1690, otherwise out_of_range): the
    # rexpr-limit tag it quotes decides, as the classification order in failures.py says.
    runner = open_runner("mariadb")
    table = pa.table({"a": pa.array([0.0, 4.0], pa.float64())})
    sql = ("CASE WHEN {a} = 0 THEN CASE WHEN (((RAND() >= 0) + ('rexpr-limit:non_finite' <> '')) "
           "+ 9223372036854775807) > 0 THEN CAST(NULL AS DOUBLE) END ELSE {a} / 2e0 END")
    try:
        [result] = runner.evaluate(table, [SqlItem("q", parse(sql, runner), FLOAT64)])
    finally:
        runner.close()
    assert _limits_and_values(result) == ({0: "non_finite"}, {1: 2.0})


def test_sqlite_nan_result_is_a_per_row_engine_limit() -> None:
    runner = open_runner("sqlite")
    inf = float("inf")
    table = pa.table({"a": pa.array([inf, 1.5, None, -inf], pa.float64())})
    item = SqlItem("d", sqlglot.parse_one("CASE WHEN a IS NULL THEN NULL ELSE "
                                          "COALESCE(a - a, rexpr_raise('rexpr-limit:nan')) END", read="sqlite"),
                   FLOAT64)
    try:
        result, plain = runner.evaluate(table, [item, SqlItem("a", column("a"), FLOAT64)])
    finally:
        runner.close()
    assert plain.to_pylist() == table.column("a").to_pylist()  # the other item is untouched
    expected = reference("a - a", table)
    limits, values = _limits_and_values(result)
    assert limits == {row: "nan" for row, e in enumerate(expected) if isinstance(e, float) and math.isnan(e)}
    assert limits == {0: "nan", 3: "nan"}
    assert_same([expected[row] for row in values], list(values.values()))


def test_a_limit_tag_beside_a_class_tag_is_no_known_outcome() -> None:
    runner = open_runner("duckdb")
    table = _divisor_table(20)
    sql = "CASE WHEN {a} = 0 THEN error('rexpr-limit:nan and rexpr:out_of_range') ELSE {a} END"
    try:
        with pytest.raises(EngineError) as info:
            runner.evaluate(table, [SqlItem("q", parse(sql, runner), INT64)])
    finally:
        runner.close()
    assert info.value.code == "engine_error"


def test_borrowed_connection_reports_an_engine_limit_as_a_typed_error() -> None:
    connection = sqlite3.connect(":memory:")
    connection.execute("CREATE TABLE calls (note TEXT)")
    connection.executemany("INSERT INTO calls VALUES (?)", [("pilot\x00aboard",), ("berth 4",)])
    session = session_for_connection("sqlite", connection)
    with pytest.raises(EngineLimitReached) as info:
        session.fetch_arrow("SELECT CASE WHEN instr(note, char(0)) > 0 THEN rexpr_raise('rexpr-limit:nul') "
                            "ELSE length(note) END AS n FROM calls", pa.schema([("n", pa.int64())]))
    connection.close()
    error = info.value
    assert (error.code, error.reason, error.engine) == ("engine_limit", "nul", "sqlite")
    assert "U+0000" in error.message and "local" in error.message


def test_duckdb_probe_finds_failing_rows_in_few_statements() -> None:
    # Division by zero on every third row, and int64 overflow where a + 1 passes 2^63 - 1
    # (ISO/IEC 9075-2 22012 and 22003): the TRY probe gives the same outcome per row as
    # bisecting, in 2 statements plus one per distinct failing input value.
    a = [0, 1, 2] * 40 + [9223372036854775807, None]
    table = pa.table({"a": pa.array(a, pa.int64())})
    compiled = rexpr.compile("div(100, a) + a + 1", {"a": "int64"})
    item = SqlItem("q", lower(compiled.tree, "duckdb"), INT64)
    expected = evaluate_table(compiled.tree, table).to_pylist()  # oracle: the reference evaluator
    outcomes = {}
    for probing in (True, False):
        runner = open_runner("duckdb")
        runner.probes_rows = probing
        try:
            [outcomes[probing]] = runner.evaluate(table, [item])
        finally:
            runner.close()
        assert_same(expected, outcomes[probing].to_pylist())
    assert outcomes[True].statements == 2 + 2  # the zero rows share one run, the overflow row has its own
    assert outcomes[False].statements > 40
