"""The NumPy backend: every node becomes values plus a validity mask plus int8 error codes,
computed column-wise with NumPy kernels and reproducing the reference semantics row for row.

A dispatch table keyed by catalogue function id holds one handler per function. Most are
null-propagating (``_plain``): errors come from the leftmost failing argument, then nulls,
then the kernel runs and may add its own errors on the rows where every argument is a value.
The rest follow the reference's special forms: ``and``/``or`` let a false/true operand absorb
errors, and ``case``/``coalesce`` evaluate a branch only on the rows that reach it.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from functools import reduce
from typing import Callable

import numpy as np
import pyarrow as pa

from rexpr.backends.numpy_casts import CASTS
from rexpr.backends.numpy_columns import DTYPES, TEXT, Col, Ctx, Out, all_valid, first_error, merge_codes
from rexpr.backends.numpy_numbers import KERNELS as NUMBER_KERNELS
from rexpr.backends.numpy_text import KERNELS as TEXT_KERNELS
from rexpr.backends.numpy_text import compare
from rexpr.errors import InputProblem, NotPushable
from rexpr.evaluation import Evaluation
from rexpr.schema import to_arrow_type
from rexpr.typed import TCall, TField, TLiteral, Typed, functions_used, walk
from rexpr.types import DataType, Kind


@dataclass(frozen=True)
class Frame:
    """The input columns an expression reads, for some subset of the table's rows."""

    columns: dict[tuple[str, ...], Col]
    rows: int
    exact_text: bool  # no string anywhere holds U+0000 (see numpy_text)

    def take(self, keep: np.ndarray) -> "Frame":
        if keep.all():
            return self
        return Frame({path: col.take(keep) for path, col in self.columns.items()}, int(keep.sum()),
                     self.exact_text)


Handler = Callable[[Frame, TCall], Col]


def evaluate(frame: Frame, node: Typed) -> Col:
    if isinstance(node, TLiteral):
        return _literal(node, frame.rows)
    if isinstance(node, TField):
        return frame.columns[node.path]
    return HANDLERS[node.function](frame, node)


def _literal(node: TLiteral, rows: int) -> Col:
    kind = node.type.kind
    if node.value is None:
        return Col(_blank(kind, rows), np.zeros(rows, bool), None, True)
    value = node.value
    if kind is Kind.DATE:
        value = np.datetime64(value, "D")
    elif kind is Kind.TIMESTAMP:
        value = np.datetime64(value, "us")
    return Col(np.full(rows, value, DTYPES[kind]), None, None, True)


def _blank(kind: Kind, rows: int) -> np.ndarray:
    return np.full(rows, "", TEXT) if kind is Kind.STRING else np.zeros(rows, DTYPES[kind])


# ---------------------------------------------------------------- null-propagating functions
def _plain(kernel: Callable[..., Out]) -> Handler:
    def handler(frame: Frame, node: TCall) -> Col:
        args = [evaluate(frame, a) for a in node.args]
        return _apply(kernel, frame, args)

    return handler


def _apply(kernel: Callable[..., Out], frame: Frame, args: list[Col]) -> Col:
    codes = first_error(args)
    valid = all_valid(args)
    live = np.ones(frame.rows, bool) if valid is None else valid.copy()
    if codes is not None:
        live &= codes == 0
    cx = Ctx(live, frame.exact_text, tuple(a.constant for a in args))
    values, own = kernel(cx, *(a.values for a in args))
    return Col(values, valid, merge_codes(codes, own))


def _comparison(op: str) -> Handler:
    return _plain(lambda cx, a, b: (compare(op, a, b, cx.exact_text), None))


def _cast(frame: Frame, node: TCall) -> Col:
    source, target = node.args[0].type.kind, node.type.kind
    if source is target:
        return evaluate(frame, node.args[0])
    return _plain(CASTS[(source, target)])(frame, node)


# ---------------------------------------------------------------- three-valued logic
def _truth(cols: list[Col], absorbing: bool) -> Col:
    """``and`` (absorbing False) or ``or`` (absorbing True) over evaluated operands: the
    absorbing value wins over errors and nulls, then the leftmost error, then null."""
    rows = len(cols[0])
    hit = reduce(np.logical_or, (c.usable() & (c.values == absorbing) for c in cols), np.zeros(rows, bool))
    unknown = reduce(np.logical_or, (~c.validity() for c in cols), np.zeros(rows, bool))
    codes = first_error(cols)
    if codes is not None:
        codes = np.where(hit, 0, codes).astype(np.int8)
    values = np.where(hit, absorbing, not absorbing)
    return Col(values, hit | ~unknown, codes)


def _and(frame: Frame, node: TCall) -> Col:
    return _truth([evaluate(frame, a) for a in node.args], False)


def _or(frame: Frame, node: TCall) -> Col:
    return _truth([evaluate(frame, a) for a in node.args], True)


def _not(cx: Ctx, a: np.ndarray) -> Out:
    return ~a, None


def _compared(op: str, frame: Frame, a: Col, b: Col) -> Col:
    return _apply(lambda cx, x, y: (compare(op, x, y, cx.exact_text), None), frame, [a, b])


def _in(frame: Frame, node: TCall) -> Col:
    operand = evaluate(frame, node.args[0])
    return _truth([_compared("eq", frame, operand, evaluate(frame, item)) for item in node.args[1:]], True)


def _between(frame: Frame, node: TCall) -> Col:
    x, low, high = (evaluate(frame, a) for a in node.args)
    return _truth([_compared("ge", frame, x, low), _compared("le", frame, x, high)], False)


# ---------------------------------------------------------------- lazy conditionals
@dataclass(frozen=True)
class _Result:
    """A result being filled in row subsets."""

    values: np.ndarray
    valid: np.ndarray
    codes: np.ndarray

    @classmethod
    def blank(cls, kind: Kind, rows: int) -> "_Result":
        return cls(_blank(kind, rows), np.zeros(rows, bool), np.zeros(rows, np.int8))

    def put(self, rows: np.ndarray, col: Col) -> None:
        self.values[rows] = col.values
        self.valid[rows] = col.validity()
        self.codes[rows] = 0 if col.codes is None else col.codes

    def col(self) -> Col:
        return Col(self.values, self.valid, self.codes if self.codes.any() else None)


def _case(frame: Frame, node: TCall) -> Col:
    args = node.args
    out = _Result.blank(node.type.kind, frame.rows)
    pending = np.arange(frame.rows)  # rows of ``frame`` no condition has decided yet
    part = frame
    for i in range(0, len(args) - 1, 2):
        if pending.size == 0:
            return out.col()
        condition = evaluate(part, args[i])
        failed = condition.failed()
        out.codes[pending[failed]] = condition.codes[failed] if condition.codes is not None else 0
        chosen = condition.usable() & condition.values
        if chosen.any():
            out.put(pending[chosen], evaluate(part.take(chosen), args[i + 1]))
        undecided = ~(failed | chosen)
        pending, part = pending[undecided], part.take(undecided)
    if pending.size:
        out.put(pending, evaluate(part, args[-1]))
    return out.col()


def _coalesce(frame: Frame, node: TCall) -> Col:
    out = _Result.blank(node.type.kind, frame.rows)
    pending = np.arange(frame.rows)
    part = frame
    for arg in node.args:
        if pending.size == 0:
            break
        col = evaluate(part, arg)
        settled = col.validity() | col.failed()  # an error is not null, so it is the answer
        out.put(pending[settled], col.take(settled))
        pending, part = pending[~settled], part.take(~settled)
    return out.col()


# ---------------------------------------------------------------- other special forms
def _nullif(frame: Frame, node: TCall) -> Col:
    a, b = (evaluate(frame, x) for x in node.args)
    equal = a.validity() & b.validity() & compare("eq", a.values, b.values, frame.exact_text)
    return Col(a.values, a.validity() & ~equal, first_error([a, b]))


def _is_null(frame: Frame, node: TCall) -> Col:
    a = evaluate(frame, node.args[0])
    return Col(~a.validity(), None, a.codes)


def _is_distinct_from(frame: Frame, node: TCall) -> Col:
    a, b = (evaluate(frame, x) for x in node.args)
    va, vb = a.validity(), b.validity()
    equal = compare("eq", a.values, b.values, frame.exact_text)
    if a.values.dtype.kind == "f":
        equal |= np.isnan(a.values) & np.isnan(b.values)  # NaN is one value here
    same = (~va & ~vb) | (va & vb & equal)
    return Col(~same, None, first_error([a, b]))


def _concat(frame: Frame, node: TCall) -> Col:
    cols = [evaluate(frame, a) for a in node.args]
    parts = [np.where(c.validity(), c.values, "") for c in cols]  # nulls count as ''
    return Col(reduce(np.strings.add, parts), None, first_error(cols))


HANDLERS: dict[str, Handler] = {
    **{fid: _plain(kernel) for fid, kernel in {**NUMBER_KERNELS, **TEXT_KERNELS}.items()},
    **{op: _comparison(op) for op in ("eq", "ne", "lt", "le", "gt", "ge")},
    "not": _plain(_not),
    "and": _and, "or": _or, "in": _in, "between": _between,
    "case": _case, "coalesce": _coalesce, "nullif": _nullif,
    "is_null": _is_null, "is_distinct_from": _is_distinct_from, "concat": _concat, "cast": _cast,
    **{part: _plain(lambda cx, v, _part=part: (_date_part(v, _part), None)) for part in ("year", "month", "day")},
}


def _date_part(values: np.ndarray, part: str) -> np.ndarray:
    days = values.astype("datetime64[D]")  # a timestamp's date (floors toward the past)
    months = days.astype("datetime64[M]")
    if part == "year":
        return days.astype("datetime64[Y]").astype(np.int64) + 1970
    if part == "month":
        return months.astype(np.int64) % 12 + 1
    return (days - months.astype("datetime64[D]")).astype(np.int64) + 1


# ---------------------------------------------------------------- Arrow in and out
_FILLERS: dict[Kind, object] = {
    Kind.BOOL: False, Kind.INT64: 0, Kind.FLOAT64: 0.0, Kind.STRING: "",
    Kind.DATE: dt.date(1970, 1, 1), Kind.TIMESTAMP: dt.datetime(1970, 1, 1),
}


def _field_array(table: pa.Table | pa.RecordBatch, path: tuple[str, ...], data_type: DataType) -> pa.Array:
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
    bounds = np.frombuffer(offsets, np.int32)[array.offset:array.offset + len(array) + 1]
    return not np.frombuffer(data, np.uint8)[bounds[0]:bounds[-1]].all()


def _column(array: pa.Array, kind: Kind) -> Col:
    valid = None
    if array.null_count:
        valid = array.is_valid().to_numpy(zero_copy_only=False)
        array = array.fill_null(pa.scalar(_FILLERS[kind], type=array.type))
    values = array.to_numpy(zero_copy_only=False)  # no copy for numbers and timestamps without nulls
    if kind is Kind.STRING:
        values = values.astype(TEXT)
    return Col(values, valid)


def _to_evaluation(data_type: DataType, col: Col) -> Evaluation:
    rows = len(col)
    if data_type.kind is Kind.NULL:
        return Evaluation.from_codes(data_type, pa.nulls(rows), col.codes)
    missing = ~col.validity() | col.failed()
    array = pa.array(col.values, type=to_arrow_type(data_type), mask=missing if missing.any() else None)
    return Evaluation.from_codes(data_type, array, col.codes)


def prepare(node: Typed) -> Callable[[pa.Table | pa.RecordBatch], Evaluation]:
    missing = sorted(set(functions_used(node)) - set(HANDLERS))
    if missing:
        raise NotPushable(f"the numpy backend has no kernel for {', '.join(missing)}")
    fields = [(f.path, f.type) for f in _distinct_fields(node)]
    literal_nul = any(isinstance(n, TLiteral) and isinstance(n.value, str) and "\x00" in n.value for n in walk(node))

    def run(table: pa.Table | pa.RecordBatch) -> Evaluation:
        arrays = {path: (_field_array(table, path, data_type), data_type.kind) for path, data_type in fields}
        exact_text = not literal_nul and not any(kind is Kind.STRING and _has_nul(a) for a, kind in arrays.values())
        columns = {path: _column(a, kind) for path, (a, kind) in arrays.items()}
        return _to_evaluation(node.type, evaluate(Frame(columns, table.num_rows, exact_text), node))

    return run


def _distinct_fields(node: Typed) -> list[TField]:
    by_path: dict[tuple[str, ...], TField] = {}
    for item in walk(node):
        if isinstance(item, TField):
            by_path.setdefault(item.path, item)
    return list(by_path.values())
