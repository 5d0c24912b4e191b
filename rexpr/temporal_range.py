"""The range of dates and timestamps every backend accepts: years 0001 to 9999.

ISO/IEC 9075-2 (4.6.2, "Datetimes") gives datetime fields the years 0001 to 9999, and the
language's literals, casts and the reference evaluator (Python's ``datetime``) use that range.
Arrow's date32 and timestamp types hold far more (a timestamp[us] reaches year 294,247), and
values beyond the range have no meaning here: printed, compared or cast, each backend would make
something different of them. So an input column holding one is refused, with the field and the
first such row named, before any backend runs: an error beats a guess.
"""

from __future__ import annotations

import datetime as dt

import pyarrow as pa
import pyarrow.compute as pc

from rexpr.errors import InputProblem
from rexpr.typed import TField, Typed, walk
from rexpr.types import Kind

_EPOCH = dt.datetime(1970, 1, 1)
_FIRST = dt.datetime(1, 1, 1)
_LAST = dt.datetime(9999, 12, 31, 23, 59, 59, 999999)
_PER_SECOND = {"s": 1, "ms": 1_000, "us": 1_000_000, "ns": 1_000_000_000}


def temporal_fields(tree: Typed) -> tuple[tuple[str, ...], ...]:
    """Paths of the date and timestamp fields ``tree`` reads."""
    seen: dict[tuple[str, ...], None] = {}
    for node in walk(tree):
        if isinstance(node, TField) and node.type.kind in (Kind.DATE, Kind.TIMESTAMP):
            seen.setdefault(node.path, None)
    return tuple(seen)


def _bounds(arrow_type: pa.DataType) -> tuple[int, int] | None:
    """The first and last in-range value in the type's own integer storage, or None."""
    if pa.types.is_date32(arrow_type):
        return (_FIRST - _EPOCH).days, (_LAST - _EPOCH).days
    if pa.types.is_date64(arrow_type):
        return (_FIRST - _EPOCH).days * 86_400_000, ((_LAST - _EPOCH).days + 1) * 86_400_000 - 1
    if pa.types.is_timestamp(arrow_type):
        per_second = _PER_SECOND[arrow_type.unit]
        first, last = _FIRST - _EPOCH, _LAST - _EPOCH
        to_unit = lambda d: (d.days * 86_400 + d.seconds) * per_second + d.microseconds * per_second // 1_000_000  # noqa: E731
        return to_unit(first), to_unit(last) + (per_second // 1_000_000 - 1 if per_second > 1_000_000 else 0)
    return None


def _column(table: pa.Table, path: tuple[str, ...]) -> pa.ChunkedArray | pa.Array | None:
    if path[0] not in table.column_names:
        return None  # the backend reports the missing column itself
    column: pa.ChunkedArray | pa.Array = table.column(path[0])
    for name in path[1:]:
        if not pa.types.is_struct(column.type) or column.type.get_field_index(name) < 0:
            return None
        column = pc.struct_field(column, name)
    return column


def check_temporal_range(table: pa.Table, paths: tuple[tuple[str, ...], ...]) -> None:
    """Raise :class:`InputProblem` if a date or timestamp column in ``paths`` holds a value
    outside 0001-01-01 .. 9999-12-31 23:59:59.999999."""
    for path in paths:
        column = _column(table, path)
        if column is None:
            continue
        bounds = _bounds(column.type)
        if bounds is None or len(column) == 0:
            continue
        storage = column.cast(pa.int32() if pa.types.is_date32(column.type) else pa.int64())
        low, high = pc.min_max(storage).values()
        if low.as_py() is None or (bounds[0] <= low.as_py() and high.as_py() <= bounds[1]):
            continue
        outside = pc.or_(pc.less(storage, bounds[0]), pc.greater(storage, bounds[1]))
        row = pc.index(outside, True).as_py()
        raise InputProblem(
            f"field {'.'.join(path)!r}, row {row}: {column.type} value {storage[row].as_py()} (in the type's own "
            f"units since 1970-01-01) is outside 0001-01-01 to 9999-12-31 23:59:59.999999, the datetime range "
            "of the SQL standard that rexpr follows; drop or clean such rows before evaluating",
            code="temporal_out_of_range")
