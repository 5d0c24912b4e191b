"""How an Arrow table is laid out as an engine table: one column per scalar field path
(struct fields flattened, the column for ``('ship', 'port')`` is named ``"ship.port"``), each in
its canonical Arrow type, plus a row-number column for ordering and bisecting."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from rexpr.errors import InputProblem
from rexpr.schema import Schema, to_arrow_type
from rexpr.types import DataType, Kind
from rexpr.values import identity_key

TABLE_NAME = "rexpr_input"
ROW_NUMBER_BASE = "rexpr_row"


@dataclass(frozen=True)
class InputColumn:
    name: str          # the dotted path, used verbatim as the SQL column name
    kind: Kind
    values: pa.Array   # canonical Arrow type; a null struct makes its fields null


@dataclass(frozen=True)
class InputLayout:
    columns: tuple[InputColumn, ...]
    row_count: int
    row_number: str    # name of the row-number column, distinct from every field column

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.columns) + (self.row_number,)

    def row_numbers(self) -> pa.Array:
        return pa.array(np.arange(self.row_count, dtype=np.int64))


def layout_of(table: pa.Table | pa.RecordBatch) -> InputLayout:
    if isinstance(table, pa.RecordBatch):
        table = pa.Table.from_batches([table])
    if not isinstance(table, pa.Table):
        raise InputProblem(f"expected a pyarrow Table or RecordBatch, got {type(table).__name__}")
    schema = Schema.from_arrow(table.schema)  # rejects Arrow types rexpr does not support
    columns: list[InputColumn] = []
    for (name, data_type), column in zip(schema.fields, table.columns):
        _flatten((name,), data_type, column.combine_chunks(), columns)
    _check_distinct([c.name for c in columns])
    return InputLayout(tuple(columns), table.num_rows, _row_number_name({c.name for c in columns}))


def _flatten(path: tuple[str, ...], data_type: DataType, values: pa.Array, out: list[InputColumn]) -> None:
    if data_type.kind is Kind.STRUCT:
        # StructArray.flatten merges the struct's validity into each child.
        for (field_name, field_type), child in zip(data_type.fields, values.flatten()):
            _flatten(path + (field_name,), field_type, child, out)
        return
    out.append(InputColumn(".".join(path), data_type.kind, values.cast(to_arrow_type(DataType(data_type.kind)))))


def _check_distinct(names: list[str]) -> None:
    seen: set[str] = set()
    for name in names:
        if name in seen:
            raise InputProblem(f"two field paths are both named {name!r} once flattened (a field whose name "
                               "contains '.' collides with a struct field); rename one", code="column_name_collision")
        seen.add(name)


def _row_number_name(taken: set[str]) -> str:
    # Engines that fold case would see 'REXPR_ROW' as the same name, so compare folded.
    folded = {n.casefold() for n in taken}
    name, suffix = ROW_NUMBER_BASE, 0
    while name.casefold() in folded:
        suffix += 1
        name = f"{ROW_NUMBER_BASE}_{suffix}"
    return name


def row_keys(layout: InputLayout, names: set[str]) -> list[tuple]:
    """Per row, the values of the named columns, equal only for rows that hold the same values
    there (floats by their bits, so -0.0 is not 0.0 and NaN payloads differ)."""
    columns = [[identity_key(v) for v in c.values.to_pylist()] for c in layout.columns if c.name in names]
    return list(zip(*columns)) if columns else [()] * layout.row_count


def float_rows(values: pa.Array, *, nan: bool = False, infinite: bool = False,
               negative_zero: bool = False) -> dict[int, str]:
    """Rows of a float64 column holding the special values asked for, named for a report."""
    data = values.to_numpy(zero_copy_only=False)
    valid = ~np.asarray(pc.is_null(values).to_numpy(zero_copy_only=False), dtype=bool)
    found: dict[int, str] = {}
    with np.errstate(invalid="ignore"):
        checks = [(nan, np.isnan(data), "NaN"), (infinite, np.isinf(data), "infinity"),
                  (negative_zero, (data == 0) & np.signbit(data), "-0.0")]
    for wanted, hits, label in checks:
        if wanted:
            for row in np.flatnonzero(hits & valid):
                found[int(row)] = label
    return found


def rows_containing(values: pa.Array, text: str) -> list[int]:
    """Rows of a string column that contain ``text``."""
    hits = pc.fill_null(pc.match_substring(values, text), False)
    return [int(r) for r in np.flatnonzero(hits.to_numpy(zero_copy_only=False))]
