"""The pushdown planner: what it pushes, why, and the guarantee that executing a plan returns
exactly the rows the reference evaluator keeps for the whole filter (oracle: the reference)."""

from __future__ import annotations

import json
import math
import subprocess
import sys

import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
import pytest

import rexpr
from rexpr.engines.layout import TABLE_NAME, layout_of
from rexpr.errors import RexprError
from rexpr.planner.evidence import load_evidence
from rexpr.planner.execute import DatasetSource, TableSource, execute
from rexpr.planner.plan import plan
from rexpr.differential.generator import random_expressions, random_table
from rexpr.printing import to_text
from rexpr.schema import Schema
from rexpr.types import Kind
from rexpr.values import RowError
from tests.engines_support import engine_params, open_runner

SCHEMA = Schema.from_mapping({"i": "int64", "j": "int64", "x": "float64", "s": "string", "b": "bool",
                              "d": "date"})


def test_conjuncts_are_pushed_piecewise_with_reasons():
    p = plan("i > 1 and upper(s) = 'A' and x between 0.5 and 2.0", SCHEMA, "sqlite")
    pushed = {c.text: c.pushed for c in p.conjuncts}
    assert pushed["i > 1"] and not pushed["upper(s) = 'A'"]
    assert "ASCII" in next(c.reason for c in p.conjuncts if c.text == "upper(s) = 'A'")
    assert p.residual == "upper(s) = 'A'"
    assert set(p.columns) >= {"s"}


def test_or_is_kept_whole_unless_every_side_is_pushable():
    assert plan("i > 1 or upper(s) = 'A'", SCHEMA, "sqlite").pushed_sql is None
    assert plan("i > 1 or j < 2", SCHEMA, "sqlite").residual is None


def test_constants_are_folded_first():
    p = plan("i > 1 + 2 and 2 > 1", SCHEMA, "duckdb")
    assert [c.text for c in p.conjuncts] == ["i > 3", "true"]
    assert p.residual is None


def test_argument_forms_decide_whether_division_is_pushed():
    # A literal non-zero divisor cannot raise; a column divisor can (common practice, no source:
    # the semantics reference's division-by-zero rule).
    by_literal = plan("i / 2 > 1.0 and j > 0", SCHEMA, "duckdb")
    by_column = plan("i / j > 1.0 and j > 0", SCHEMA, "duckdb")
    assert all(c.pushed for c in by_literal.conjuncts)
    assert [c.pushed for c in by_column.conjuncts] == [False, True]
    assert "divide by zero" in by_column.conjuncts[0].reason


def test_evidence_of_a_disagreement_blocks_pushing(tmp_path):
    report = tmp_path / "evidence.json"
    report.write_text(json.dumps({"generated": "x", "faithful_disagreements": [{"function": "gt", "engine": "duckdb"}]}))
    p = plan("i > 1 and j = 2", SCHEMA, "duckdb", evidence=load_evidence(report))
    assert [c.pushed for c in p.conjuncts] == [False, True]
    assert "differential report" in p.conjuncts[0].reason


def test_plan_command_json_keys():
    out = subprocess.run([sys.executable, "-m", "rexpr.cli.main", "plan", "trim(s) = 'ab' and i > 1",
                          "--field", "s:string", "--field", "i:int64", "--source", "sqlite", "--json"],
                         capture_output=True, text=True, check=True)
    data = json.loads(out.stdout)
    assert {"pushed", "residual", "columns", "conjuncts"} <= set(data)
    assert all({"text", "pushed", "reason"} <= set(c) for c in data["conjuncts"])


# ------------------------------------------------------------------------- the guarantee
def _clean(table: pa.Table, engine: str) -> pa.Table:
    """Values an engine cannot store are replaced before both sides see them (docs/engines.md:
    SQLite and MariaDB hold no NaN or infinities; PostgreSQL text holds no NUL)."""
    columns = {}
    for name in table.column_names:
        col = table[name]
        if pa.types.is_floating(col.type) and engine in ("sqlite", "mariadb"):
            col = pc.if_else(pc.is_finite(col), col, pa.scalar(None, col.type))
        if pa.types.is_string(col.type):
            col = pc.replace_substring(col, "\x00", "")
        columns[name] = col
    return pa.table(columns)


def _reference_keep(tree, table: pa.Table) -> list[int] | RowError:
    values = rexpr.CompiledExpression("", SCHEMA, tree).evaluate(table, backend="reference").to_pylist()
    errors = [v for v in values if isinstance(v, RowError)]
    if errors:
        return errors[0]
    return [i for i, v in enumerate(values) if v is True]


CASES = 40


def _check_equivalence(engine: str, source_for) -> None:
    filters = random_expressions(20261202, SCHEMA, CASES, max_depth=3, kind=Kind.BOOL)
    checked = 0
    for n, tree in enumerate(filters):
        table = _clean(random_table(1000 + n, SCHEMA, 40), engine)
        table = table.append_column("rowid", pa.array(range(table.num_rows), pa.int64()))
        text = to_text(tree)
        expected = _reference_keep(tree, table.drop(["rowid"]))
        p = plan(text, SCHEMA.__class__(SCHEMA.fields + (("rowid", rexpr.DataType(Kind.INT64, False)),)),
                 engine if engine != "parquet" else "dataset", ["rowid"])
        source = source_for(table)
        try:
            result = execute(p, Schema(SCHEMA.fields + (("rowid", rexpr.DataType(Kind.INT64, False)),)), source,
                             ["rowid"], measure_baseline=False)
        except RexprError as exc:
            # The whole filter errs on some row: the plan must fail too, never return rows.
            assert isinstance(expected, RowError), f"{text}: plan failed ({exc}) but the reference kept rows"
            continue
        assert not isinstance(expected, RowError), f"{text}: reference errs ({expected}) but the plan returned rows"
        got = sorted(result.table.column("rowid").to_pylist())
        assert got == expected, f"{engine}: {text}\npushed: {p.pushed_sql}\nresidual: {p.residual}"
        checked += 1
    assert checked >= CASES // 3


_KNOWN: dict[str, str] = {}  # engine -> reason for a strict xfail, while a found bug is open


def _with_known(params: list) -> list:
    return [pytest.param(*p.values, id=p.id, marks=list(p.marks) + (
        [pytest.mark.xfail(strict=True, reason=_KNOWN[p.values[0]])] if p.values[0] in _KNOWN else []))
            for p in params]


@pytest.mark.parametrize("engine", _with_known(engine_params()))
def test_plan_returns_exactly_the_reference_rows(engine):
    runner = open_runner(engine)
    try:
        def source_for(table: pa.Table) -> TableSource:
            runner._load(layout_of(table))  # the runner's own bulk load, into TABLE_NAME
            return TableSource(engine, TABLE_NAME, runner._connection)

        _check_equivalence(engine, source_for)
    finally:
        runner.close()


def test_parquet_plan_returns_exactly_the_reference_rows(tmp_path):
    counter = iter(range(10**6))

    def source_for(table: pa.Table) -> DatasetSource:
        path = tmp_path / f"t{next(counter)}.parquet"
        pq.write_table(table, path, row_group_size=7)  # small groups so pruning really happens
        return DatasetSource(str(path))

    _check_equivalence("parquet", source_for)


def test_parquet_pushdown_skips_row_groups(tmp_path):
    table = pa.table({"i": pa.array(range(10_000), pa.int64()), "s": pa.array(["v"] * 10_000)})
    path = tmp_path / "sorted.parquet"
    pq.write_table(table, path, row_group_size=1_000)
    schema = Schema.from_mapping({"i": "int64", "s": "string"})
    result = execute(plan("i >= 9500", schema, "dataset"), schema, DatasetSource(str(path)))
    assert result.table.num_rows == 500
    assert result.rows_read <= 1_000 and result.bytes_read < result.bytes_without_pushdown / 5
    assert not math.isnan(result.saved_fraction)
