"""NumPy arrays as input (rexpr/backends/numpy_inputs.py): the same answers as from Arrow.

Oracle: the reference evaluator (the executable semantics) run on the Arrow form of the same
rows. The NumPy form is built here with plain pyarrow/NumPy calls, not with the module under test.
"""

from __future__ import annotations

import datetime as dt
import math

import numpy as np
import pyarrow as pa
import pytest

import rexpr
from rexpr.compare import same_result
from rexpr.errors import InputProblem
from rexpr.rows import edge_table
from rexpr.schema import Schema

from test_backend_numpy import CASES, NUL_STRINGS, SCHEMA

TEXT = np.dtypes.StringDType()


def _as_numpy(array: pa.Array, read_only: bool = True) -> object:
    """One Arrow column as NumPy: (values, validity), or a nested mapping for a struct."""
    if isinstance(array, pa.ChunkedArray):
        array = array.combine_chunks()
    if pa.types.is_struct(array.type):
        # StructArray.flatten ANDs the struct's validity into its fields' (Arrow columnar format).
        return {f.name: _as_numpy(child, read_only) for f, child in zip(array.type, array.flatten())}
    valid = np.asarray(array.is_valid())
    if pa.types.is_string(array.type):
        values = np.asarray(array.fill_null("").to_pylist(), dtype=TEXT)
    elif pa.types.is_boolean(array.type):
        values = np.asarray(array.fill_null(False).to_pylist(), dtype=bool)
    elif pa.types.is_temporal(array.type):  # nulls come out as NaT; give them an ordinary value
        values = array.to_numpy(zero_copy_only=False)
        values = np.where(valid, values, np.zeros(1, values.dtype))
    else:
        values = array.fill_null(pa.scalar(0, array.type)).to_numpy(zero_copy_only=False)
    for part in (values, valid):
        part.flags.writeable = not read_only  # the backend must never write into its inputs
    return (values, valid)


def _columns(table: pa.Table) -> dict:
    return {name: _as_numpy(table.column(name)) for name in table.column_names}


def _mismatches(text: str, table: pa.Table, schema: Schema = SCHEMA) -> list:
    compiled = rexpr.compile(text, schema)
    expected = compiled.evaluate(table, backend="reference").to_pylist()
    observed = compiled.evaluate(_columns(table), backend="numpy").to_pylist()
    assert len(observed) == len(expected)
    return [(i, e, o) for i, (e, o) in enumerate(zip(expected, observed)) if not same_result(e, o)][:5]


@pytest.mark.parametrize("function_id, text", [(f, t) for f, texts in CASES.items() for t in texts])
def test_numpy_inputs_match_reference_on_edge_values(function_id, text):
    compiled = rexpr.compile(text, SCHEMA)
    table = edge_table(SCHEMA, {path.split(".")[0] for path in compiled.fields})
    assert _mismatches(text, table) == []


@pytest.mark.parametrize("text", ["s = t", "trim(s)", "substring(s, 2)", "length(s)", "s like 'a%'",
                                  "upper(s) || t", "cast(s as int64)", "position(t, s)"])
def test_numpy_strings_holding_nul(text):
    # U+0000 is a valid code point (RFC 3629) that NumPy's own string kernels cannot see at the
    # end of a string; the backend must notice it in NumPy input too.
    rows = [(a, b) for a in NUL_STRINGS for b in NUL_STRINGS]
    table = pa.table({"s": [r[0] for r in rows], "t": [r[1] for r in rows]})
    assert _mismatches(text, table, Schema.from_mapping({"s": "string", "t": "string"})) == []


def _value(text: str, columns: dict, schema: dict, backend: str = "numpy") -> list:
    return rexpr.compile(text, schema).evaluate(columns, backend).to_pylist()


def test_input_forms():
    schema = {"x": "float64", "a": "int64", "s": "string", "d": "date", "ts": "timestamp"}
    x = np.array([1.5, math.nan, -0.0, 2.0])
    columns = {
        "x": x,  # a bare array: every row a value; NaN is a datum, not a null (IEEE 754-2019 6.2)
        "a": np.ma.masked_array(np.array([1, 2, 3, 4], np.int32), mask=[False, True, False, False]),
        "s": (np.array(["a", "b", "c", "d"], dtype=TEXT), np.array([True, True, False, True])),
        "d": np.array(["2024-02-29", "NaT", "1970-01-01", "0001-01-01"], "datetime64[D]"),
        "ts": np.array(["2024-05-01T10:00:00.000001", "NaT", "1969-12-31T23:59:59", "2024-05-01"], "datetime64[us]"),
    }
    assert _value("x is null", columns, schema) == [False, False, False, False]
    assert _value("is_nan(x)", columns, schema) == [False, True, False, False]
    assert _value("a + 1", columns, schema) == [2, None, 4, 5]
    assert _value("s || '!'", columns, schema) == ["a!", "b!", None, "d!"]
    # NaT is NumPy's missing datetime; it reads as null.
    assert _value("d", columns, schema) == [dt.date(2024, 2, 29), None, dt.date(1970, 1, 1), dt.date(1, 1, 1)]
    assert _value("cast(ts as date)", columns, schema) == [dt.date(2024, 5, 1), None, dt.date(1969, 12, 31),
                                                          dt.date(2024, 5, 1)]
    nested = {"ship": {"port": np.array([" Oslo", "Bergen"], dtype=TEXT)}}
    assert _value("trim(ship.port)", nested, {"ship": {"port": "string"}}) == ["Oslo", "Bergen"]
    fixed_width = {"s": np.array(["ab", "c"])}  # NumPy's str_ dtype converts
    assert _value("length(s)", fixed_width, {"s": "string"}) == [2, 1]
    missing = {"s": np.array(["ab", None], dtype=np.dtypes.StringDType(na_object=None))}
    assert _value("s is null", missing, {"s": "string"}) == [False, True]


def test_numbers_widen_exactly():
    # float32 -> float64 is exact (IEEE 754-2019 5.4.2: converting to a wider format) and
    # int8/16/32, uint8/16/32 fit in int64 (two's complement ranges, common practice, no source).
    columns = {"x": np.array([0.1, -2.5], np.float32), "a": np.array([255, 7], np.uint8),
               "b": np.array([-128, 127], np.int8)}
    schema = {"x": "float64", "a": "int64", "b": "int64"}
    assert _value("x", columns, schema) == [float(np.float32(0.1)), -2.5]
    assert _value("a * b", columns, schema) == [255 * -128, 7 * 127]


def test_other_backends_take_numpy_columns():
    table = edge_table(SCHEMA, {"a", "x", "s", "ship"})
    columns = _columns(table)
    for text in ("a + 1", "trim(s) = 'a'", "coalesce(ship.port, s)", "x / 2 > 0 or a is null"):
        compiled = rexpr.compile(text, SCHEMA)
        expected = compiled.evaluate(table, "reference").to_pylist()
        for backend in ("reference", "arrow", "auto"):
            observed = compiled.evaluate(columns, backend).to_pylist()
            assert all(same_result(e, o) for e, o in zip(expected, observed)), (text, backend)
    assert rexpr.compile("1 + 2", {}).evaluate({"a": np.zeros(3)}, "numpy").to_pylist() == [3, 3, 3]
    assert rexpr.compile("1 + 2", {}).evaluate({"a": np.zeros(3)}, "arrow").to_pylist() == [3, 3, 3]
    mask = rexpr.compile("a > 1", {"a": "int64"}).mask({"a": np.array([1, 2, 3])}, "numpy")
    assert mask.to_pylist() == [False, True, True]
    assert np.asarray(mask).tolist() == [False, True, True]
    with pytest.raises(InputProblem):  # filter returns an Arrow table; NumPy callers use mask
        rexpr.compile("a > 1", {"a": "int64"}).filter({"a": np.array([1, 2, 3])})


@pytest.mark.parametrize("columns, schema, fragment", [
    ({"s": np.array(["a", None], dtype=object)}, {"s": "string"}, "StringDType"),
    ({"a": np.array([1.5])}, {"a": "int64"}, "signed integer"),
    ({"a": np.array([1], np.uint64)}, {"a": "int64"}, "signed integer"),
    ({"x": np.array([1, 2])}, {"x": "float64"}, "float32 or float64"),
    ({"a": np.array([1, 2]), "b": np.array([1])}, {"a": "int64", "b": "int64"}, "different lengths"),
    ({"a": np.array([1])}, {"b": "int64"}, "have no 'b'"),
    ({"a": np.array([[1, 2]])}, {"a": "int64"}, "one-dimensional"),
    ({"a": (np.array([1, 2]), np.array([1, 0]))}, {"a": "int64"}, "bool array"),
    ({"ts": np.array(["2024-05-01T00:00:00.000000001"], "datetime64[ns]")}, {"ts": "timestamp"},
     "whole us"),
])
def test_unusable_columns_are_typed_errors(columns, schema, fragment):
    name = next(iter(schema))
    with pytest.raises(InputProblem) as info:
        rexpr.compile(name, schema).evaluate(columns, "numpy")
    assert fragment in str(info.value)


def test_arrow_input_is_read_in_place():
    # Sliced, chunked and null-holding Arrow columns must read the same as their Python values.
    base = pa.array([1.5, None, -2.0, 4.0, None, 8.0] * 3)
    table = pa.concat_tables([pa.table({"x": base.slice(1, 7)}), pa.table({"x": base.slice(9, 5)})])
    compiled = rexpr.compile("x * 2", {"x": "float64"})
    expected = [None if v is None else v * 2 for v in table.column("x").to_pylist()]
    assert compiled.evaluate(table, "numpy").to_pylist() == expected
    flags = pa.array([True, None, False, True, False, None, True, True, False] * 2).slice(3)
    assert rexpr.compile("not p", {"p": "bool"}).evaluate(pa.table({"p": flags}), "numpy").to_pylist() == \
        [None if v is None else not v for v in flags.to_pylist()]
    assert rexpr.compile("p", {"p": "bool"}).evaluate(pa.table({"p": flags}), "numpy").to_pylist() == \
        flags.to_pylist()


@pytest.mark.parametrize("function_id, text", [(f, t) for f, texts in CASES.items() for t in texts[:3]])
def test_blocks_do_not_change_results(function_id, text, monkeypatch):
    # Large inputs run block by block; with tiny blocks every edge table spans many of them,
    # including a short last block.
    from rexpr.backends import numpy as numpy_backend

    monkeypatch.setattr(numpy_backend, "BLOCK_ROWS", 2)
    compiled = rexpr.compile(text, SCHEMA)
    table = edge_table(SCHEMA, {path.split(".")[0] for path in compiled.fields})
    assert table.num_rows > 2
    assert _mismatches(text, table) == []
    expected = compiled.evaluate(table, backend="reference").to_pylist()
    observed = rexpr.compile(text, SCHEMA).evaluate(table, backend="numpy").to_pylist()
    assert all(same_result(e, o) for e, o in zip(expected, observed))
