"""The NumPy backend: every node becomes values plus a validity mask plus int8 error codes,
computed with NumPy kernels and reproducing the reference semantics row for row.

Input is an Arrow table or NumPy arrays (``numpy_inputs``), read once per call; the tree then
runs over blocks of ``BLOCK_ROWS`` rows, and literals are broadcast views, not full arrays.

A dispatch table keyed by catalogue function id holds one handler per function. Most are
null-propagating (``_plain``): errors come from the leftmost failing argument, then nulls,
then the kernel runs and may add its own errors on the rows where every argument is a value.
The rest follow the reference's special forms: ``and``/``or`` let a false/true operand absorb
errors, and ``case``/``coalesce`` evaluate a branch only on the rows that reach it.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import reduce
from typing import Callable, Iterator, Mapping

import numpy as np
import pyarrow as pa

from rexpr.backends import numpy_inputs
from rexpr.backends.numpy_casts import CASTS
from rexpr.backends.numpy_columns import DTYPES, TEXT, Col, Ctx, Out, all_valid, constant, first_error, merge_codes
from rexpr.backends.numpy_numbers import KERNELS as NUMBER_KERNELS
from rexpr.backends.numpy_text import KERNELS as TEXT_KERNELS
from rexpr.backends.numpy_text import compare
from rexpr.errors import NotPushable
from rexpr.evaluation import Evaluation
from rexpr.schema import to_arrow_type
from rexpr.typed import TCall, TField, TLiteral, Typed, functions_used, walk
from rexpr.types import DataType, Kind


class Frame:
    """The input columns an expression reads, for some subset of the table's rows. A subset
    takes a column from its parent only when a node reads it."""

    def __init__(self, columns: dict[tuple[str, ...], Col], rows: int, exact_text: bool,
                 parent: "Frame | None" = None, keep: np.ndarray | None = None) -> None:
        self._columns = columns
        self.rows = rows
        self.exact_text = exact_text  # no string anywhere holds U+0000 (see numpy_text)
        self._parent, self._keep = parent, keep
        self._everywhere: np.ndarray | None = None

    def column(self, path: tuple[str, ...]) -> Col:
        col = self._columns.get(path)
        if col is None:
            assert self._parent is not None and self._keep is not None, path
            col = self._columns[path] = self._parent.column(path).take(self._keep)
        return col

    @property
    def everywhere(self) -> np.ndarray:
        """All rows (a read-only view, no allocation)."""
        if self._everywhere is None:
            self._everywhere = constant(True, np.dtype(np.bool_), self.rows)
        return self._everywhere

    def take(self, keep: np.ndarray) -> "Frame":
        if keep.all():
            return self
        return Frame({}, int(keep.sum()), self.exact_text, self, keep)


Handler = Callable[[Frame, TCall], Col]


def evaluate(frame: Frame, node: Typed) -> Col:
    if isinstance(node, TLiteral):
        return _literal(node, frame.rows)
    if isinstance(node, TField):
        return frame.column(node.path)
    return HANDLERS[node.function](frame, node)


def _literal(node: TLiteral, rows: int) -> Col:
    """A literal as a read-only broadcast view: one value, no per-row memory."""
    kind = node.type.kind
    dtype = DTYPES[kind]
    if node.value is None:
        return Col(constant(_blank_value(kind), dtype, rows), constant(False, DTYPES[Kind.BOOL], rows), None, True)
    value = node.value
    if kind is Kind.DATE:
        value = np.datetime64(value, "D")
    elif kind is Kind.TIMESTAMP:
        value = np.datetime64(value, "us")
    return Col(constant(value, dtype, rows), None, None, True)


def _blank_value(kind: Kind) -> object:
    return "" if kind is Kind.STRING else np.zeros((), DTYPES[kind])[()]


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
    if codes is None:
        live = frame.everywhere if valid is None else valid
    else:
        live = codes == 0 if valid is None else valid & (codes == 0)
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
    hit: np.ndarray | None = None  # rows where some operand holds the absorbing value
    known: np.ndarray | None = None  # rows where every operand is non-null (None: all rows)
    for c in cols:
        found = c.values if absorbing else ~c.values
        if c.valid is not None or c.codes is not None:
            found = found & c.usable()
        hit = found if hit is None else hit | found
        if c.valid is not None:
            known = c.valid if known is None else known & c.valid
    assert hit is not None
    codes = first_error(cols)
    if codes is not None:
        codes = np.where(hit, 0, codes).astype(np.int8)
    values = hit if absorbing else ~hit
    return Col(values, None if known is None else hit | known, codes)


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
    if all(isinstance(a, (TField, TLiteral)) for a in node.args[1:]):
        # Fields and literals never raise, so evaluating them on every row and picking is the
        # same as evaluating them only where the arguments before are null, and cheaper.
        return _pick_first_set([evaluate(frame, a) for a in node.args])
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


def _pick_first_set(cols: list[Col]) -> Col:
    """Row by row, the first column that is not null there (an error counts as set)."""
    out = cols[-1]
    for col in reversed(cols[:-1]):
        if col.valid is None:
            out = col  # set on every row (a value or an error)
            continue
        settled = col.valid if col.codes is None else col.valid | (col.codes != 0)
        values = np.where(settled, col.values, out.values)
        valid = None if out.valid is None else settled | out.valid  # where unsettled, the later column's
        codes = None
        if col.codes is not None or out.codes is not None:
            codes = np.where(settled, 0 if col.codes is None else col.codes,
                             0 if out.codes is None else out.codes).astype(np.int8)
        out = Col(values, valid, codes)
    return out


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


# ---------------------------------------------------------------- in and out
# Rows per block: every kernel is row-wise, so the tree runs block by block, and the block's
# temporaries stay in cache (64K rows of float64 is 512 KiB) instead of streaming through
# memory once per operator; bench/bench_core.py measures it against whole-array NumPy code.
BLOCK_ROWS = 65_536


def _to_arrow(kind: Kind, col: Col) -> pa.Array:
    """An evaluated column as an Arrow array; failed rows are null. Fixed-width buffers are built
    directly, which is much cheaper than ``pyarrow.array`` with a mask."""
    rows = len(col)
    if kind is Kind.NULL:
        return pa.nulls(rows)
    valid = col.valid
    if col.codes is not None:
        valid = (col.codes == 0) if valid is None else valid & (col.codes == 0)
    values = col.values.astype(DTYPES[kind], copy=False)  # a no-op for every kernel's output
    arrow_type = to_arrow_type(DataType(kind))
    if kind is Kind.STRING:
        return pa.array(values, type=arrow_type, mask=None if valid is None else ~valid)
    if kind is Kind.BOOL:
        data = np.packbits(values, bitorder="little")  # Arrow bitmaps are least significant bit first
    elif kind is Kind.DATE:
        data = values.view(np.int64).astype(np.int32)  # date32: days since the epoch
    else:  # int64, float64, timestamp[us] (int64 microseconds): the same bytes
        data = np.ascontiguousarray(values).view(np.int64 if kind is Kind.TIMESTAMP else values.dtype)
    bitmap = None if valid is None else pa.py_buffer(np.packbits(valid, bitorder="little"))
    return pa.Array.from_buffers(arrow_type, rows, [bitmap, pa.py_buffer(data)])


def _blocks(inputs: numpy_inputs.Inputs, exact_text: bool) -> Iterator[Frame]:
    """The input in blocks; each block takes NumPy's string kernels unless one of its own
    strings holds U+0000 (checking block by block is also cheaper, the strings being in cache)."""
    for start in range(0, max(inputs.rows, 1), BLOCK_ROWS):
        part = slice(start, min(start + BLOCK_ROWS, inputs.rows))
        columns = inputs.columns if inputs.rows <= BLOCK_ROWS else \
            {path: col.slice(part) for path, col in inputs.columns.items()}
        exact = exact_text and not any(numpy_inputs.holds_nul(columns[p].values) for p in inputs.unchecked)
        yield Frame(columns, part.stop - part.start, exact)


Input = pa.Table | pa.RecordBatch | Mapping[str, object]


def prepare(node: Typed) -> Callable[[Input], Evaluation]:
    missing = sorted(set(functions_used(node)) - set(HANDLERS))
    if missing:
        raise NotPushable(f"the numpy backend has no kernel for {', '.join(missing)}")
    fields = numpy_inputs.fields_of(node)
    literal_nul = any(isinstance(n, TLiteral) and isinstance(n.value, str) and "\x00" in n.value for n in walk(node))
    kind = node.type.kind

    def run(data: Input) -> Evaluation:
        """Values of the expression over an Arrow table or record batch, or over NumPy arrays
        (see :mod:`rexpr.backends.numpy_inputs` for the accepted forms)."""
        inputs = numpy_inputs.read(data, fields)
        values, codes = [], []
        for frame in _blocks(inputs, inputs.nul_free and not literal_nul):
            col = evaluate(frame, node)
            values.append(_to_arrow(kind, col))
            codes.append(col.codes)
        if len(values) == 1:
            return Evaluation.from_codes(node.type, values[0], codes[0])
        all_codes = None
        if any(c is not None for c in codes):
            all_codes = np.concatenate([np.zeros(len(v), np.int8) if c is None else c for v, c in zip(values, codes)])
        return Evaluation.from_codes(node.type, pa.concat_arrays(values), all_codes)

    return run
