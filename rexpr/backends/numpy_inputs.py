"""Input columns for the NumPy backend, read once per evaluation.

Two input forms: an Arrow table or record batch, whose fixed-width buffers are used in place
(no copy for int64, float64 and timestamps; validity comes from the bitmap), or NumPy arrays
given directly, the natural input of NumPy code, in a mapping from field name to

- an array (every row a value; NaT in a datetime array is null, NaN in a float array is NaN),
- a ``numpy.ma.MaskedArray`` (masked rows are null),
- a ``(values, validity)`` pair, ``validity`` a bool array (False: null) or None,
- a nested mapping for a struct's fields (the struct itself is never null then).

Strings are ``numpy.dtypes.StringDType`` arrays (fixed-width ``str_`` arrays are converted;
object arrays are refused, since their elements could be anything).

Values under null rows are arbitrary: every kernel masks errors and results with validity.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np
import pyarrow as pa

from rexpr.backends.numpy_columns import DTYPES, TEXT, Col
from rexpr.errors import InputProblem
from rexpr.schema import to_arrow_type
from rexpr.typed import TField, Typed, walk
from rexpr.types import DataType, Kind

Path = tuple[str, ...]
Columns = Mapping[str, Any]  # the NumPy input form described above


def fields_of(node: Typed) -> list[tuple[Path, DataType]]:
    """The distinct fields an expression reads, in first-use order, with their types."""
    by_path: dict[Path, DataType] = {}
    for item in walk(node):
        if isinstance(item, TField):
            by_path.setdefault(item.path, item.type)
    return list(by_path.items())


@dataclass(frozen=True)
class Inputs:
    columns: dict[Path, Col]
    rows: int
    nul_free: bool  # no string value read so far holds U+0000 (NumPy's string kernels mishandle it)
    unchecked: tuple[Path, ...] = ()  # NumPy string columns still to check, block by block (holds_nul)


def read(data: pa.Table | pa.RecordBatch | Columns, fields: list[tuple[Path, DataType]]) -> Inputs:
    if isinstance(data, (pa.Table, pa.RecordBatch)):
        return _read_arrow(data, fields)
    if isinstance(data, Mapping):
        return _read_numpy(data, fields)
    raise InputProblem(f"expected a pyarrow Table or RecordBatch, or a mapping of field name to NumPy array, "
                       f"got {type(data).__name__}")


# ---------------------------------------------------------------- Arrow
def _read_arrow(table: pa.Table | pa.RecordBatch, fields: list[tuple[Path, DataType]]) -> Inputs:
    columns: dict[Path, Col] = {}
    nul_free = True
    for path, data_type in fields:
        array = _field_array(table, path, data_type)
        if data_type.kind is Kind.STRING and nul_free and _has_nul(array):
            nul_free = False
        columns[path] = _arrow_column(array, data_type.kind)
    return Inputs(columns, table.num_rows, nul_free)


def _field_array(table: pa.Table | pa.RecordBatch, path: Path, data_type: DataType) -> pa.Array:
    column = table.column(path[0])
    array = column.combine_chunks() if isinstance(column, pa.ChunkedArray) else column
    for part in path[1:]:
        array = array.flatten()[array.type.get_field_index(part)]  # flatten ANDs in the struct's nulls
    if pa.types.is_dictionary(array.type):
        array = array.dictionary_decode()
    target = to_arrow_type(data_type)
    if array.type != target:
        try:
            array = array.cast(target)
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError) as exc:
            raise InputProblem(f"column {'.'.join(path)!r} cannot be read as {data_type.name}: {exc}") from None
    return array


def _has_nul(array: pa.Array) -> bool:
    """Whether a string array's bytes hold U+0000 (its UTF-8 form is the byte 0, RFC 3629)."""
    offsets, data = array.buffers()[1], array.buffers()[2]
    if data is None or len(array) == 0:
        return False
    width = np.int64 if pa.types.is_large_string(array.type) else np.int32
    bounds = np.frombuffer(offsets, width)[array.offset:array.offset + len(array) + 1]
    return not np.frombuffer(data, np.uint8)[bounds[0]:bounds[-1]].all()


def _bits(buffer: pa.Buffer, offset: int, length: int) -> np.ndarray:
    """An Arrow bitmap (least significant bit first) as a bool array."""
    packed = np.frombuffer(buffer, np.uint8, count=(offset + length + 7) // 8)
    return np.unpackbits(packed, count=offset + length, bitorder="little")[offset:].view(bool)


def _arrow_column(array: pa.Array, kind: Kind) -> Col:
    n, offset = len(array), array.offset
    valid = None
    if array.null_count:
        bitmap = array.buffers()[0]
        valid = _bits(bitmap, offset, n) if bitmap is not None else np.zeros(n, bool)
    if kind is Kind.STRING:
        if valid is not None:
            array = array.fill_null("")
        return Col(array.to_numpy(zero_copy_only=False).astype(TEXT), valid)
    if kind is Kind.NULL or n == 0:
        return Col(np.zeros(n, DTYPES[kind]), valid)
    data = array.buffers()[1]
    if kind is Kind.BOOL:
        values = _bits(data, offset, n)
    elif kind is Kind.DATE:  # date32: int32 days since the epoch
        values = np.frombuffer(data, np.int32, count=offset + n)[offset:].astype("datetime64[D]")
    else:  # int64, float64, timestamp[us]: the buffer is the NumPy array
        values = np.frombuffer(data, DTYPES[kind], count=offset + n)[offset:]
    return Col(values, valid)


# ---------------------------------------------------------------- NumPy
def _read_numpy(data: Columns, fields: list[tuple[Path, DataType]]) -> Inputs:
    rows = _common_length(data)
    columns: dict[Path, Col] = {}
    for path, data_type in fields:
        col = _numpy_column(_lookup(data, path), path, data_type.kind)
        if len(col) != rows:
            raise InputProblem(f"column {'.'.join(path)!r} has {len(col):,} rows; the others have {rows:,}")
        columns[path] = col
    return Inputs(columns, rows, True, tuple(p for p, t in fields if t.kind is Kind.STRING))


def holds_nul(strings: np.ndarray) -> bool:
    """Whether a StringDType array holds U+0000 anywhere. NumPy's own string kernels cannot see a
    trailing U+0000, so this asks Arrow, whose copy of the strings has their exact UTF-8 bytes."""
    return _has_nul(pa.array(strings, type=pa.large_string()))


def _leaves(data: Columns) -> list[tuple[str, Any]]:
    out = []
    for name, value in data.items():
        if isinstance(value, Mapping):
            out += [(f"{name}.{inner}", v) for inner, v in _leaves(value)]
        else:
            out.append((name, value))
    return out


def _common_length(data: Columns) -> int:
    lengths = {name: _length(name, value) for name, value in _leaves(data)}
    if len(set(lengths.values())) > 1:
        shown = ", ".join(f"{name!r}: {n:,}" for name, n in list(lengths.items())[:6])
        raise InputProblem(f"the columns have different lengths ({shown}); every column needs one value per row")
    return next(iter(lengths.values()), 0)


def _length(name: str, value: Any) -> int:
    if isinstance(value, tuple):
        if len(value) != 2:
            raise InputProblem(f"column {name!r}: a tuple must be (values, validity)")
        value = value[0]
    if not isinstance(value, np.ndarray) or value.ndim != 1:
        shape = f"an array of shape {value.shape}" if isinstance(value, np.ndarray) else type(value).__name__
        raise InputProblem(f"column {name!r} must be a one-dimensional NumPy array, not {shape}")
    return len(value)


def _lookup(data: Columns, path: Path) -> Any:
    current: Any = data
    for depth, part in enumerate(path):
        if not isinstance(current, Mapping) or part not in current:
            where = "the columns" if depth == 0 else f"struct {'.'.join(path[:depth])!r}"
            raise InputProblem(f"the expression reads {'.'.join(path)!r}, but {where} have no {part!r}")
        current = current[part]
    return current


# NumPy dtype kinds that hold each logical kind exactly, as Schema.from_arrow accepts them.
_ACCEPTED = {
    Kind.BOOL: "a bool array", Kind.INT64: "a signed integer array or uint8/16/32",
    Kind.FLOAT64: "a float32 or float64 array", Kind.STRING: "a numpy.dtypes.StringDType array",
    Kind.DATE: "a datetime64 array of whole days", Kind.TIMESTAMP: "a datetime64 array of whole microseconds",
}


def _numpy_column(value: Any, path: Path, kind: Kind) -> Col:
    name = ".".join(path)
    valid: np.ndarray | None = None
    if isinstance(value, tuple):
        if len(value) != 2:
            raise InputProblem(f"column {name!r}: a tuple must be (values, validity)")
        value, valid = value
        if valid is not None:
            valid = np.asarray(valid)
            if valid.dtype != np.bool_ or valid.ndim != 1 or len(valid) != len(value):
                raise InputProblem(f"column {name!r}: validity must be a bool array as long as the values")
    if isinstance(value, np.ma.MaskedArray):
        mask = np.ma.getmaskarray(value)
        valid = ~mask if valid is None else valid & ~mask
        value = value.data
    values, missing = _convert(value, kind, name)
    if missing is not None:
        valid = ~missing if valid is None else valid & ~missing
    if valid is not None and valid.all():
        valid = None
    return Col(values, valid)


def _convert(value: np.ndarray, kind: Kind, name: str) -> tuple[np.ndarray, np.ndarray | None]:
    """Values in the backend's dtype, and the rows the array itself marks missing."""
    dtype = value.dtype
    refused = InputProblem(f"column {name!r} is a NumPy {dtype} array; the schema says {kind.value}, which "
                           f"needs {_ACCEPTED.get(kind, 'no column')}")
    if kind is Kind.BOOL and dtype == np.bool_:
        return value, None
    if kind is Kind.INT64 and (dtype.kind == "i" or (dtype.kind == "u" and dtype.itemsize < 8)):
        return value.astype(np.int64, copy=False), None
    if kind is Kind.FLOAT64 and dtype in (np.float32, np.float64):
        return value.astype(np.float64, copy=False), None  # float32 widens exactly (IEEE 754-2019 5.4.2)
    if kind in (Kind.DATE, Kind.TIMESTAMP) and dtype.kind == "M":
        return _datetimes(value, kind, name)
    if kind is Kind.STRING and (isinstance(dtype, np.dtypes.StringDType) or dtype.kind == "U"):
        return _strings(value)
    raise refused


_DATE32_DAYS = (-(2**31), 2**31 - 1)  # Arrow's date32 holds int32 days since the epoch


def _datetimes(value: np.ndarray, kind: Kind, name: str) -> tuple[np.ndarray, np.ndarray | None]:
    target = DTYPES[kind]
    missing = np.isnat(value)
    converted = value.astype(target)
    present = ~missing
    if value.dtype != target and (converted.astype(value.dtype) != value)[present].any():
        unit = np.datetime_data(target)[0]
        raise InputProblem(f"column {name!r} holds {value.dtype} values that are not whole {unit} units "
                           f"(or are out of range); round them first, e.g. values.astype('{target}')")
    if kind is Kind.DATE:
        days = converted.view(np.int64)[present]
        if days.size and (days.min() < _DATE32_DAYS[0] or days.max() > _DATE32_DAYS[1]):
            raise InputProblem(f"column {name!r} holds dates outside the range of Arrow's date32 "
                               "(int32 days from 1970-01-01)")
    return converted, (missing if missing.any() else None)


def _strings(value: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
    missing = None
    if hasattr(value.dtype, "na_object"):
        # A StringDType with an NA object marks missing rows itself; Arrow reads them as nulls.
        arrow = pa.array(value, type=pa.large_string())
        if arrow.null_count:
            missing = ~_bits(arrow.buffers()[0], arrow.offset, len(arrow))
            value = np.where(missing, "", value)
    if value.dtype != TEXT:
        value = value.astype(TEXT)
    return value, missing


# ---------------------------------------------------------------- NumPy columns for the other backends
def to_arrow_table(data: Columns, fields: list[tuple[Path, DataType]]) -> pa.Table:
    """The columns an expression reads, as an Arrow table (for the backends that take Arrow)."""
    inputs = _read_numpy(data, fields)
    top: dict[str, Any] = {}
    for path, data_type in fields:
        col = inputs.columns[path]
        values = col.values
        mask = None if col.valid is None else ~col.valid
        array = pa.array(values, type=to_arrow_type(data_type), mask=mask)
        slot = top
        for part in path[:-1]:
            slot = slot.setdefault(part, {})
        slot[path[-1]] = array
    if not top:  # a constant expression still has one result per row
        return pa.table({"rows": pa.nulls(inputs.rows)}).drop_columns(["rows"])
    return pa.table({name: _assemble(value) for name, value in top.items()})


def _assemble(value: Any) -> pa.Array:
    if isinstance(value, dict):
        children = {name: _assemble(v) for name, v in value.items()}
        return pa.StructArray.from_arrays(list(children.values()), names=list(children))
    return value
