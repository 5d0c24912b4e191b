"""The auto backend's compiled kernels (numba) against the reference evaluator, row by row.

Every edge-value case of tests/test_backend_auto.py with a numeric subtree runs with the
kernels forced on (``jit=True``), both for values and for a filter's mask, at two block sizes.
The checks beside them take their expected values from Python's unbounded integers and from
IEEE 754, not from the NumPy path.
"""

from __future__ import annotations

import math

import pyarrow as pa
import pytest
from hypothesis import HealthCheck, given, settings

pytest.importorskip("numba", reason="numba is not installed (pip install 'rexpr[jit]')")

import rexpr  # noqa: E402
from rexpr.backends import auto, auto_jit  # noqa: E402
from rexpr.compare import row_differences  # noqa: E402
from rexpr.differential.generator import tables, typed_expressions  # noqa: E402
from rexpr.errors import EvaluationFailed, InputProblem  # noqa: E402
from rexpr.reference.tables import evaluate_table  # noqa: E402
from rexpr.rows import edge_table  # noqa: E402
from rexpr.schema import Schema  # noqa: E402
from rexpr.values import RowError  # noqa: E402
from test_backend_auto import CASES, SCHEMA  # noqa: E402

INT64_MIN, INT64_MAX = -2 ** 63, 2 ** 63 - 1


def _error(value: object) -> str | None:
    return value.error.value if isinstance(value, RowError) else None


@pytest.fixture(autouse=True, scope="module")
def _own_cache(tmp_path_factory):
    """Kernels compile into this run's directory, not the user's cache."""
    with pytest.MonkeyPatch.context() as patch:
        patch.setenv(auto_jit.ENV_CACHE, str(tmp_path_factory.mktemp("jit")))
        yield


def _fused_cases() -> list[str]:
    out = []
    for texts in CASES.values():
        for text in texts:
            if auto.prepare(rexpr.compile(text, SCHEMA).tree, jit=True).jit_ops:
                out.append(text)
    return out


FUSED = _fused_cases()


def test_the_numeric_cases_are_fused():
    assert len(FUSED) >= 40, FUSED  # arithmetic, comparisons, logic, case, coalesce, casts


def _check(text: str, table: pa.Table, schema: Schema = SCHEMA, block_rows: int = auto.BLOCK_ROWS) -> None:
    compiled = rexpr.compile(text, schema)
    # Oracle: the reference evaluator, compared with the documented equality rules (rexpr.compare).
    expected = evaluate_table(compiled.tree, table).to_pylist()
    prepared = auto.prepare(compiled.tree, block_rows=block_rows, jit=True)
    assert prepared.jit_ops and all(op.kernel is None for op in prepared.jit_ops)
    assert row_differences(expected, prepared(table).to_pylist(), limit=5) == []
    assert all(op.kernel is not None for op in prepared.jit_ops)
    if compiled.type.name != "bool":
        return
    failing = [i for i, value in enumerate(expected) if isinstance(value, RowError)]
    if failing:  # a filter raises at its first failing row: an error beats a guess
        with pytest.raises(EvaluationFailed) as raised:
            prepared.keep(table)
        assert raised.value.row == failing[0]
    else:
        assert prepared.keep(table).tolist() == [value is True for value in expected]


@pytest.mark.parametrize("block_rows", [auto.BLOCK_ROWS, 7])
@pytest.mark.parametrize("text", FUSED)
def test_kernels_match_reference_on_edge_values(text, block_rows):
    fields = {path.split(".")[0] for path in rexpr.compile(text, SCHEMA).fields}
    _check(text, edge_table(SCHEMA, fields, max_rows=600), block_rows=block_rows)


INTS = Schema.from_mapping({"a": "int64", "b": "int64"})


def test_int64_overflow_is_exact_at_the_bounds():
    # Expected from Python's unbounded integers: int64 is [-2^63, 2^63 - 1] (ISO/IEC 9075-2 4.4:
    # a result outside the type raises 22003, numeric value out of range).
    edges = [0, 1, -1, 2, -2, 3, 2 ** 31, -(2 ** 31), 2 ** 32 + 1, 3037000499, 3037000500, -3037000500,
             2 ** 62, -(2 ** 62), INT64_MAX, INT64_MIN, INT64_MAX - 1, INT64_MIN + 1]
    pairs = [(a, b) for a in edges for b in edges]
    table = pa.table({"a": [a for a, _ in pairs], "b": [b for _, b in pairs]})
    for text, exact in (("a * b + 0", lambda a, b: a * b), ("a + b + 0", lambda a, b: a + b),
                        ("a - b + 0", lambda a, b: a - b), ("-a + b * 0", lambda a, b: -a),
                        ("abs(a) + b * 0", lambda a, b: abs(a))):
        prepared = auto.prepare(rexpr.compile(text, INTS).tree, jit=True)
        observed = prepared(table).to_pylist()
        for (a, b), got in zip(pairs, observed):
            value = exact(a, b)
            if INT64_MIN <= value <= INT64_MAX:
                assert got == value, (text, a, b)
            else:
                assert _error(got) == "out_of_range", (text, a, b, got)


def test_float_to_int_rounds_half_away_from_zero():
    # Round half away from zero is the catalogue's rule (docs/semantics.md); the expected values
    # come from Python's decimal module, which rounds exactly (ROUND_HALF_UP is "away from zero").
    from decimal import ROUND_HALF_UP, Decimal

    values = [0.5, -0.5, 1.5, -1.5, 2.5, 0.49999999999999994, -0.49999999999999994, 4503599627370495.5,
              -4503599627370495.5, 9.223372036854775e18, -9.223372036854776e18, 9.223372036854776e18,
              math.nan, math.inf, -math.inf, -0.0]
    table = pa.table({"x": values, "a": [1] * len(values)})
    schema = Schema.from_mapping({"x": "float64", "a": "int64"})
    observed = auto.prepare(rexpr.compile("cast(x as int64) * a", schema).tree, jit=True)(table).to_pylist()
    for x, got in zip(values, observed):
        if math.isfinite(x):
            exact = int(Decimal(x).to_integral_value(rounding=ROUND_HALF_UP))
            if INT64_MIN <= exact <= INT64_MAX:
                assert got == exact, (x, got)
                continue
        assert _error(got) == "out_of_range", (x, got)


def test_ieee_comparisons_and_division_by_signed_zero():
    # IEEE 754-2019 5.11: NaN is unordered (every comparison but <> is false) and -0 = +0; the
    # catalogue makes division by either zero an error (ISO/IEC 9075-2 6.27: 22012).
    values = [math.nan, -0.0, 0.0, 1.0, -math.inf]
    pairs = [(x, y) for x in values for y in values]
    table = pa.table({"x": [x for x, _ in pairs], "y": [y for _, y in pairs]})
    schema = Schema.from_mapping({"x": "float64", "y": "float64"})
    prepared = auto.prepare(rexpr.compile("x < y or x = y or (x <> y and x > y)", schema).tree, jit=True)
    for (x, y), got in zip(pairs, prepared(table).to_pylist()):
        assert got == (x < y or x == y or x > y), (x, y)
    prepared = auto.prepare(rexpr.compile("x / y > 0.0 and x >= 0.0", schema).tree, jit=True)
    for (x, y), got in zip(pairs, prepared(table).to_pylist()):
        if y == 0.0 and x >= 0.0:  # else and's false operand (x >= 0.0 false, for NaN too) absorbs it
            assert _error(got) == "division_by_zero", (x, y, got)
        elif y == 0.0:
            assert got is False, (x, y, got)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(tree=typed_expressions(SCHEMA, 4), table=tables(SCHEMA, max_rows=20))
def test_generated_expressions_match_reference(tree, table):
    expected = evaluate_table(tree, table).to_pylist()  # oracle: the reference evaluator
    observed = auto.prepare(tree, block_rows=3, jit=True)(table).to_pylist()
    assert row_differences(expected, observed) == []


def test_small_inputs_do_not_compile_by_default():
    prepared = auto.prepare(rexpr.compile("x * 2.0 > y and a < 3", Schema.from_mapping(
        {"x": "float64", "y": "float64", "a": "int64"})).tree)
    table = pa.table({"x": [1.0, None], "y": [0.5, 1.0], "a": [1, 2]})
    assert prepared(table).to_pylist() == [True, None]
    assert prepared.jit_ops and all(op.kernel is None for op in prepared.jit_ops)


def test_jit_switched_off_is_a_clear_error_when_asked_for(monkeypatch):
    monkeypatch.setenv(auto_jit.ENV_SWITCH, "0")
    tree = rexpr.compile("a * 2 > 1", INTS).tree
    assert auto.prepare(tree).jit_ops == ()
    with pytest.raises(InputProblem) as raised:
        auto.prepare(tree, jit=True)
    assert raised.value.code == "jit_unavailable"


def test_int64_multiply_by_a_literal_is_exact_at_the_bounds():
    # Expected from Python's unbounded integers (ISO/IEC 9075-2 4.4: outside int64 raises 22003).
    xs = [0, 1, -1, 3, -3, 2 ** 62, -(2 ** 62), 3074457345618258602, 3074457345618258603, -3074457345618258602,
          -3074457345618258603, INT64_MAX, INT64_MIN, INT64_MAX // 7, INT64_MIN // 7, INT64_MIN // 7 + 1]
    table = pa.table({"a": xs, "b": [0] * len(xs)})
    for c in (3, -3, 7, -7, 1, -1, 0, INT64_MAX, INT64_MIN):
        for text in (f"a * {c} + b", f"{c} * a + b"):
            observed = auto.prepare(rexpr.compile(text, INTS).tree, jit=True)(table).to_pylist()
            for x, got in zip(xs, observed):
                exact = x * c
                if INT64_MIN <= exact <= INT64_MAX:
                    assert got == exact, (text, x, got)
                else:
                    assert _error(got) == "out_of_range", (text, x, got)


def test_lazy_branches_computed_early_keep_their_errors_to_the_rows_that_reach_them():
    # case and coalesce evaluate only what a row reaches (ISO/IEC 9075-2 6.12: a CASE's result
    # is the first true WHEN's THEN); the kernel computes small branches on every row and must
    # drop their errors elsewhere: sqrt of a negative (2201F), -(-2^63) (22003), x / 0.0 (22012).
    schema = Schema.from_mapping({"x": "float64", "a": "int64", "p": "bool"})
    table = pa.table({"x": [-4.0, 4.0, 0.0, None, -1.0], "a": [INT64_MIN, 5, INT64_MIN, 1, None],
                      "p": [False, True, None, True, False]})
    for text in ["case when x > 0.0 then sqrt(x) else -x end",
                 "case when a > 0 then -a when p then 1 else a end",
                 "case when p then x / 0.0 else x * 2.0 end",
                 "coalesce(case when p then a end, -a, 0) > 0",
                 "case when x >= 0.0 then sqrt(x) when a < 0 then -1.0 else sqrt(x) end > 1.0"]:
        _check(text, table, schema)


def test_a_stream_compiles_once_it_has_passed_the_row_threshold(monkeypatch, tmp_path):
    monkeypatch.setenv(auto_jit.ENV_CACHE, str(tmp_path))
    monkeypatch.setattr(auto_jit, "MIN_ROWS", 300_000)
    schema = Schema.from_mapping({"x": "float64", "y": "float64"})
    batch = pa.record_batch({"x": pa.array([float(i % 97) for i in range(100_000)]),
                             "y": pa.array([float(i % 13) for i in range(100_000)])})
    compiled = rexpr.compile("x * y > 40.0 and x - y < 50.0", schema)
    kernels_after = []
    kept = 0
    for part in auto.filter_batches(compiled, (batch for _ in range(5))):
        kernels_after.append(len(list(tmp_path.glob("rexpr_jit_*.py"))))
        kept += part.num_rows
    assert kernels_after == [0, 0, 1, 1, 1]  # compiled with the third batch: 300,000 rows seen
    xs, ys = batch["x"].to_pylist(), batch["y"].to_pylist()
    assert kept == 5 * sum(1 for x, y in zip(xs, ys) if x * y > 40.0 and x - y < 50.0)  # Python's floats


def test_the_kernel_cache_keeps_the_most_recently_used(monkeypatch, tmp_path):
    monkeypatch.setenv(auto_jit.ENV_CACHE, str(tmp_path))
    monkeypatch.setattr(auto_jit, "MAX_CACHED", 2)
    monkeypatch.setattr(auto_jit, "_LOADED", {})  # this process's kernels: each text is loaded anew
    table = pa.table({"a": [1, 2, 3], "b": [4, 5, -6]})
    texts = [f"a * {c} + b > 7" for c in (2, 3, 5)]
    for text in texts:
        observed = auto.prepare(rexpr.compile(text, INTS).tree, jit=True)(table).to_pylist()
        # Python's integers decide the expected values.
        factor = int(text.split()[2])
        assert observed == [a * factor + b > 7 for a, b in zip([1, 2, 3], [4, 5, -6])]
    kernels = sorted(tmp_path.glob("rexpr_jit_*.py"))
    assert len(kernels) == 2
    kept = {k.stem for k in kernels}
    numba_files = {p.name.split(".")[0] for p in (tmp_path / "__pycache__").glob("rexpr_jit_*")}
    assert numba_files <= kept  # the pruned kernel's compiled files went with it
