"""Dates and timestamps outside years 0001-9999 are refused by every backend, with the field and
row named, instead of each backend printing or comparing them its own way."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pyarrow as pa
import pytest

import rexpr
from rexpr.backends import LOCAL_BACKENDS
from rexpr.backends.auto import filter_batches, filter_table

# ISO/IEC 9075-2, 4.6.2 "Datetimes": YEAR runs from 0001 to 9999. The edges in Arrow's storage
# units come from Python's datetime (datetime.MINYEAR = 1, datetime.MAXYEAR = 9999).
EPOCH = dt.datetime(1970, 1, 1)
FIRST_US = (dt.datetime(dt.MINYEAR, 1, 1) - EPOCH) // dt.timedelta(microseconds=1)
LAST_US = (dt.datetime(dt.MAXYEAR, 12, 31, 23, 59, 59, 999999) - EPOCH) // dt.timedelta(microseconds=1)
FIRST_DAY = (dt.date(dt.MINYEAR, 1, 1) - EPOCH.date()).days
LAST_DAY = (dt.date(dt.MAXYEAR, 12, 31) - EPOCH.date()).days


@pytest.mark.parametrize("backend", LOCAL_BACKENDS)
def test_the_range_edges_are_accepted(backend: str) -> None:
    ts = pa.table({"ts": pa.array([FIRST_US, LAST_US, None], pa.timestamp("us"))})
    assert rexpr.compile("year(ts)", {"ts": "timestamp"}).evaluate(ts, backend).to_pylist() == [1, 9999, None]
    d = pa.table({"d": pa.array([FIRST_DAY, LAST_DAY], pa.date32())})
    assert rexpr.compile("year(d)", {"d": "date"}).evaluate(d, backend).to_pylist() == [1, 9999]


@pytest.mark.parametrize("backend", LOCAL_BACKENDS)
@pytest.mark.parametrize("column, schema", [
    (pa.array([0, LAST_US + 1], pa.timestamp("us")), "timestamp"),
    (pa.array([FIRST_US - 1], pa.timestamp("us")), "timestamp"),
    (pa.array([2**62], pa.timestamp("us")), "timestamp"),
    (pa.array([LAST_DAY + 1], pa.date32()), "date"),
    (pa.array([0, None, FIRST_DAY - 1], pa.date32()), "date"),
])
def test_values_outside_the_range_are_refused(backend: str, column: pa.Array, schema: str) -> None:
    compiled = rexpr.compile("cast(v as string)", {"v": schema})
    with pytest.raises(rexpr.RexprError) as caught:
        compiled.evaluate(pa.table({"v": column}), backend)
    assert caught.value.code == "temporal_out_of_range"
    assert f"row {len(column) - 1}" in str(caught.value)


def test_numpy_inputs_and_streaming_filters_are_checked_too() -> None:
    compiled = rexpr.compile("year(ts) > 2000", {"ts": "timestamp"})
    with pytest.raises(rexpr.RexprError, match="outside 0001-01-01"):
        compiled.evaluate({"ts": np.array([0, LAST_US + 1], "datetime64[us]")}, "numpy")
    table = pa.table({"ts": pa.array([0, LAST_US + 1], pa.timestamp("us"))})
    with pytest.raises(rexpr.RexprError, match="outside 0001-01-01"):
        filter_table(compiled, table)
    with pytest.raises(rexpr.RexprError, match="outside 0001-01-01"):
        list(filter_batches(compiled, table.to_batches()))


def test_a_field_the_expression_does_not_read_is_not_checked() -> None:
    table = pa.table({"ts": pa.array([2**62], pa.timestamp("us")), "i": pa.array([1])})
    assert rexpr.compile("i + 1", {"ts": "timestamp", "i": "int64"}).evaluate(table).to_pylist() == [2]
