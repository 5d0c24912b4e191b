"""Arrow backend: the typed tree compiled once into a tree of ``pyarrow.compute`` calls.

Every node runs to a :class:`Column`: an Arrow array of values plus an int8 array of error
codes (``rexpr.evaluation.ERROR_CODES``; ``None`` when no row failed). A row that holds an
error is always null in the values, so parent kernels never see garbage and never raise on
it. Errors are data, not exceptions: ``and``/``or`` absorb them, ``case``/``coalesce`` ignore
the ones in branches they do not take, and checked kernels (``add_checked`` ...) are tried
first, the exact overflow mask being computed only when they refuse.

Where Arrow has no kernel with exactly the reference semantics, that node alone falls back
to Python over the distinct values or the few rows that need it: full Unicode case mapping
(non-ASCII strings), float to string (values Arrow does not print positionally), round to
``digits`` places (rows too close to a tie to decide in float64) and calls whose pattern,
characters or digits vary per row (one Arrow call per distinct parameter).

:func:`to_dataset_expression` turns the part of the language whose Arrow expression semantics
provably equal ours into a ``pyarrow.dataset`` filter.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from decimal import ROUND_HALF_UP, Decimal, localcontext
from functools import lru_cache, reduce
from typing import Callable, Sequence

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from rexpr.catalogue.model import ErrorClass
from rexpr.errors import InputProblem, NotPushable
from rexpr.evaluation import CODE_OF, Evaluation
from rexpr.schema import to_arrow_type
from rexpr.typed import TCall, TField, TLiteral, Typed
from rexpr.types import INT64_MAX, INT64_MIN, DataType, Kind

OUT_OF_RANGE = CODE_OF[ErrorClass.OUT_OF_RANGE]
DIVISION_BY_ZERO = CODE_OF[ErrorClass.DIVISION_BY_ZERO]
INVALID_CAST = CODE_OF[ErrorClass.INVALID_CAST]
INVALID_DATETIME = CODE_OF[ErrorClass.INVALID_DATETIME]
INVALID_ARGUMENT = CODE_OF[ErrorClass.INVALID_ARGUMENT]
INVALID_ESCAPE = CODE_OF[ErrorClass.INVALID_ESCAPE]

Codes = np.ndarray  # int8 per row; 0 means no error


# ------------------------------------------------------------------------------ plan shapes
@dataclass(frozen=True)
class Column:
    """A node's result: values (null wherever ``codes`` is non-zero) and per-row error codes."""

    values: pa.Array
    codes: Codes | None = None


@dataclass(frozen=True)
class Frame:
    """One evaluation: the input and the fields already read from it."""

    table: pa.Table | pa.RecordBatch
    length: int
    fields: dict[tuple[str, ...], pa.Array] = field(default_factory=dict)


Step = Callable[[Frame], Column]


@dataclass(frozen=True)
class Plan:
    """A compiled node. ``literal`` is kept so parents can specialise on constant arguments."""

    step: Step
    type: DataType
    literal: TLiteral | None = None
    scalar: pa.Scalar | None = None  # the literal as an Arrow scalar


Kernel = Callable[[list[pa.Array]], "tuple[pa.Array, Codes | None]"]
Builder = Callable[[TCall, tuple[Plan, ...]], Step]


def prepare(node: Typed) -> Callable[[pa.Table | pa.RecordBatch], Evaluation]:
    """Compile ``node`` once; the returned function evaluates it over a Table or RecordBatch."""
    plan = _compile(node)
    target = to_arrow_type(node.type)

    def run(table: pa.Table | pa.RecordBatch) -> Evaluation:
        column = plan.step(Frame(table, table.num_rows))
        values = column.values
        if values.type != target:  # only an untyped null literal: its values are all null
            values = pa.nulls(len(values), target)
        return Evaluation.from_codes(node.type, values, column.codes)

    return run


def _compile(node: Typed) -> Plan:
    if isinstance(node, TLiteral):
        return _literal_plan(node)
    if isinstance(node, TField):
        return Plan(_field_step(node), node.type)
    builder = _BUILDERS.get(node.function)
    if builder is None:
        raise NotPushable(f"the arrow backend has no kernel for function {node.function!r}")
    return Plan(builder(node, tuple(_compile(a) for a in node.args)), node.type)


def _literal_plan(node: TLiteral) -> Plan:
    scalar = pa.scalar(node.value, type=to_arrow_type(node.type))

    def step(frame: Frame) -> Column:
        return Column(pa.repeat(scalar, frame.length))

    return Plan(step, node.type, node, scalar)


def _field_step(node: TField) -> Step:
    target = to_arrow_type(node.type)

    def step(frame: Frame) -> Column:
        values = frame.fields.get(node.path)
        if values is None:
            values = frame.fields[node.path] = _read_field(frame.table, node.path, target)
        return Column(values)

    return step


def _read_field(table: pa.Table | pa.RecordBatch, path: tuple[str, ...], target: pa.DataType) -> pa.Array:
    """One field as a single array of the canonical Arrow type (int32 -> int64, dictionary -> values)."""
    if path[0] not in table.column_names:
        raise InputProblem(f"the input has no column {path[0]!r} that the expression reads")
    values = table.column(path[0])
    if isinstance(values, pa.ChunkedArray):  # one chunk is used as it is, without a copy
        values = values.chunk(0) if values.num_chunks == 1 else values.combine_chunks()
    for depth, name in enumerate(path[1:], 1):
        if not pa.types.is_struct(values.type) or values.type.get_field_index(name) < 0:
            raise InputProblem(f"the input column {'.'.join(path[:depth])!r} has no field {name!r}")
        values = pc.struct_field(values, [name])  # a null struct makes its fields null
    if values.type != target:
        try:
            values = values.cast(target)
        except pa.ArrowException as exc:
            raise InputProblem(f"field {'.'.join(path)!r} cannot be read as {target}: {exc}") from None
    return values


# ------------------------------------------------------------------------------ array helpers
def _valid(values: pa.Array) -> np.ndarray:
    if values.null_count == 0:
        return np.ones(len(values), dtype=bool)
    return pc.is_valid(values).to_numpy(zero_copy_only=False)


def _all_valid(args: Sequence[pa.Array]) -> np.ndarray:
    return reduce(np.logical_and, [_valid(a) for a in args])


def _true(values: pa.Array) -> np.ndarray:
    """Where a bool array is true; null is not true."""
    return pc.fill_null(values, False).to_numpy(zero_copy_only=False)


def _numbers(values: pa.Array, fill: object = 0) -> np.ndarray:
    """Numeric values as numpy with nulls replaced by ``fill`` (callers mask those rows)."""
    if values.null_count:
        values = pc.fill_null(values, fill)
    return values.to_numpy(zero_copy_only=False)


def _from_numpy(data: np.ndarray, arrow_type: pa.DataType, null: np.ndarray) -> pa.Array:
    return pa.array(data, type=arrow_type, mask=null if null.any() else None)


def _null_where(values: pa.Array, rows: np.ndarray) -> pa.Array:
    if not rows.any():
        return values
    return pc.if_else(pa.array(rows), pa.scalar(None, values.type), values)


def _broadcast(values: pa.Array | pa.Scalar, length: int) -> pa.Array:
    return pa.repeat(values, length) if isinstance(values, pa.Scalar) else values


def _distinct_groups(keys: Sequence[pa.Array], rows: np.ndarray) -> tuple[np.ndarray, list[tuple[tuple, int, int]]]:
    """``rows`` reordered so equal key combinations are adjacent, and for each distinct
    combination its key values and its [start, stop) span in that order."""
    if rows.size == 0:
        return rows, []
    encoded = [pc.dictionary_encode(k.take(rows)) for k in keys]
    codes = np.stack([e.indices.to_numpy(zero_copy_only=False) for e in encoded], axis=1)
    unique, inverse = np.unique(codes, axis=0, return_inverse=True)
    inverse = inverse.reshape(-1)
    order = np.argsort(inverse, kind="stable")
    stops = np.cumsum(np.bincount(inverse, minlength=len(unique)))
    spans = [(tuple(e.dictionary[int(i)].as_py() for e, i in zip(encoded, combination)), int(stop - count), int(stop))
             for combination, stop, count in zip(unique, stops, np.diff(stops, prepend=0))]
    return rows[order], spans


def _utf8(strings: pa.Array) -> tuple[np.ndarray, np.ndarray]:
    """Row offsets (int64, one more than rows, from 0) and the UTF-8 bytes of a string array."""
    _, offsets_buffer, data_buffer = strings.buffers()
    if offsets_buffer is None or len(strings) == 0:
        return np.zeros(len(strings) + 1, dtype=np.int64), np.zeros(0, dtype=np.uint8)
    offsets = np.frombuffer(offsets_buffer, dtype=np.int32, count=len(strings) + 1,
                            offset=strings.offset * 4).astype(np.int64)
    data = np.frombuffer(data_buffer, dtype=np.uint8) if data_buffer is not None else np.zeros(0, np.uint8)
    return offsets - offsets[0], data[offsets[0]:offsets[-1]]  # only this (maybe sliced) array's bytes


def _code_points_before(data: np.ndarray) -> np.ndarray:
    """For each byte position (and the end), how many code points start before it (RFC 3629)."""
    starts = (data & 0xC0) != 0x80  # every byte but a continuation byte 10xxxxxx starts one
    return np.concatenate(([0], np.cumsum(starts)))


# ------------------------------------------------------------------------------ errors
def _first_error(codes: Sequence[Codes | None]) -> Codes | None:
    """Per row, the leftmost non-zero code: errors propagate from arguments, leftmost first."""
    out: Codes | None = None
    for current in reversed(codes):
        if current is not None:
            out = current if out is None else np.where(current != 0, current, out).astype(np.int8)
    return out


def _error_codes(*rules: tuple[int, np.ndarray]) -> Codes | None:
    """Codes from (code, rows) rules; the first rule that covers a row wins."""
    out: Codes | None = None
    for code, rows in reversed(rules):
        if rows.any():
            out = np.where(rows, code, 0 if out is None else out).astype(np.int8)
    return out


def _column(values: pa.Array, codes: Codes | None) -> Column:
    if codes is None or not codes.any():
        return Column(values)
    return Column(_null_where(values, codes != 0), codes)


def _flag(condition: pa.Array, *args: pa.Array) -> np.ndarray:
    """Rows where ``condition`` is true and every argument is valid (a function's own error)."""
    rows = _true(condition)
    for arg in args:
        rows &= _valid(arg)
    return rows


# ------------------------------------------------------------------------------ call shapes
def _call(plans: Sequence[Plan], kernel: Kernel) -> Step:
    """A call whose arguments are all evaluated: argument errors first, then the kernel's own.

    Kernels see error rows as nulls, so their own errors never overlap argument errors."""
    def step(frame: Frame) -> Column:
        columns = [p.step(frame) for p in plans]
        values, own = kernel([c.values for c in columns])
        return _column(values, _first_error([c.codes for c in columns] + [own]))

    return step


def _evaluate(plan: Plan, frame: Frame) -> tuple[pa.Array | pa.Scalar, Codes | None]:
    """A literal as a scalar (kernels broadcast it), anything else as its column."""
    if plan.literal is not None:
        return plan.scalar, None  # type: ignore[return-value]
    column = plan.step(frame)
    return column.values, column.codes


def _vector(plans: Sequence[Plan], function: Callable[..., pa.Array | pa.Scalar]) -> Step:
    """A null-propagating call without errors of its own, done by one Arrow kernel."""
    def step(frame: Frame) -> Column:
        evaluated = [_evaluate(p, frame) for p in plans]
        values = _broadcast(function(*[v for v, _ in evaluated]), frame.length)
        return _column(values, _first_error([c for _, c in evaluated]))

    return step


def _vectorised(function: Callable[..., pa.Array | pa.Scalar]) -> Builder:
    return lambda node, plans: _vector(plans, function)


def _by_kind(int_builder: Builder, float_builder: Builder) -> Builder:
    return lambda node, plans: (int_builder if node.type.kind is Kind.INT64 else float_builder)(node, plans)


def _identity(node: TCall, plans: tuple[Plan, ...]) -> Step:
    return plans[0].step


Apply = Callable[[list[pa.Array], tuple], "tuple[pa.Array, Codes | None]"]


@dataclass(frozen=True)
class _Failure:
    """What a per-row Python function returns for a row that raises an error."""

    code: int


PerRow = Callable[..., object]

# With fewer than this many rows per distinct parameter, rows go one by one through Python
# rather than one Arrow call per group. A tuning choice only: both paths give the same values.
_ROWS_PER_GROUP_CALL = 32


def _parametrised(apply: Apply, keys: tuple[int, ...], defaults: tuple = (), per_row: PerRow | None = None) -> Builder:
    """A call whose arguments at ``keys`` are parameters of an Arrow kernel (a pattern, a set of
    characters, digits). Literal parameters are bound once; parameters that vary per row run
    one kernel call per distinct combination, or ``per_row`` over the rows when nearly every row
    has its own. Missing optional parameters take ``defaults``."""
    def build(node: TCall, plans: tuple[Plan, ...]) -> Step:
        target = to_arrow_type(node.type)
        present = tuple(k for k in keys if k < len(plans))
        absent = len(keys) - len(present)
        missing = defaults[len(defaults) - absent:] if absent else ()
        if all(plans[k].literal is not None for k in present):
            given = tuple(plans[k].literal.value for k in present)  # type: ignore[union-attr]
            return _bound(plans, present, apply, given + missing, target)

        def grouped(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
            length = len(args[0])
            rows, spans = _distinct_groups([args[k] for k in present], np.flatnonzero(_all_valid(args)))
            if not spans:
                return pa.nulls(length, target), None
            if per_row is not None and len(spans) * _ROWS_PER_GROUP_CALL > rows.size:
                return _python_rows(per_row, target, args, rows, missing)
            ordered = [a.take(rows) for a in args]  # each group is then a zero-copy slice
            pieces, codes_out = [], None
            for params, start, stop in spans:
                values, codes = apply([a.slice(start, stop - start) for a in ordered], params + missing)
                pieces.append(values.cast(target))
                if codes is not None:
                    if codes_out is None:
                        codes_out = np.zeros(length, dtype=np.int8)
                    codes_out[rows[start:stop]] = codes
            where = np.full(length, -1, dtype=np.int64)
            where[rows] = np.arange(rows.size)
            return pa.concat_arrays(pieces).take(pa.array(where, mask=where < 0)), codes_out

        return _call(plans, grouped)

    return build


def _bound(plans: Sequence[Plan], keys: tuple[int, ...], apply: Apply, params: tuple, target: pa.DataType) -> Step:
    """``apply`` with its parameters fixed by literals; those arguments are not evaluated (apply
    gets None in their place) and a null one makes every row null."""
    def step(frame: Frame) -> Column:
        columns = [None if i in keys else p.step(frame) for i, p in enumerate(plans)]
        codes = [c.codes for c in columns if c is not None]
        if any(params[i] is None for i in range(len(keys))):
            return _column(pa.nulls(frame.length, target), _first_error(codes))
        values, own = apply([None if c is None else c.values for c in columns], params)  # type: ignore[misc]
        return _column(values, _first_error(codes + [own]))

    return step


def _python_rows(per_row: PerRow, target: pa.DataType, args: list[pa.Array], rows: np.ndarray,
                 extra: tuple) -> tuple[pa.Array, Codes | None]:
    """``per_row`` on the given rows (all arguments valid there); other rows are null."""
    length = len(args[0])
    out: list[object] = [None] * length
    codes: Codes | None = None
    columns = [a.take(rows).to_pylist() for a in args]
    for row, values in zip(rows.tolist(), zip(*columns)):
        result = per_row(*values, *extra)
        if isinstance(result, _Failure):
            if codes is None:
                codes = np.zeros(length, dtype=np.int8)
            codes[row] = result.code
        else:
            out[row] = result
    return pa.array(out, type=target), codes


# ------------------------------------------------------------------------------ arithmetic
def _checked(checked: Callable[..., pa.Array], exact: Kernel) -> Builder:
    """int64 arithmetic: the checked kernel when no row overflows, else the exact mask."""
    def kernel(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
        try:
            return checked(*args), None
        except pa.ArrowInvalid:  # some valid row overflows: find which ones
            return exact(args)

    return lambda node, plans: _call(plans, kernel)


def _wrapping(combine: Callable, overflowed: Callable) -> Kernel:
    """Two's-complement int64 arithmetic in numpy plus an exact overflow test on the operands."""
    def kernel(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
        valid = _all_valid(args)
        operands = [_numbers(a) for a in args]
        with np.errstate(all="ignore"):
            result = combine(*operands)
            over = valid & overflowed(*operands, result)
        return _from_numpy(result, pa.int64(), ~valid), _error_codes((OUT_OF_RANGE, over))

    return kernel


def _product_overflowed(x: np.ndarray, y: np.ndarray, r: np.ndarray) -> np.ndarray:
    # r is x*y modulo 2^64; it is the true product exactly when r / x gives back y with no
    # remainder. x = -1 is set aside because MIN // -1 itself overflows.
    divisor_ok = (x != 0) & (x != -1)
    safe = np.where(divisor_ok, x, 1)
    quotient, remainder = np.divmod(r, safe)
    return (divisor_ok & ((quotient != y) | (remainder != 0))) | ((x == -1) & (y == INT64_MIN))


_exact_add = _wrapping(np.add, lambda x, y, r: ((x ^ r) & (y ^ r)) < 0)
_exact_subtract = _wrapping(np.subtract, lambda x, y, r: ((x ^ y) & (x ^ r)) < 0)
_exact_multiply = _wrapping(np.multiply, _product_overflowed)
_exact_negate = _wrapping(np.negative, lambda x, r: x == INT64_MIN)
_exact_abs = _wrapping(np.abs, lambda x, r: x == INT64_MIN)


def _divide(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
    a, b = args
    zero = _flag(pc.equal(b, 0.0), a)  # -0.0 = 0.0, so both zeros fail
    return pc.divide(a, b), _error_codes((DIVISION_BY_ZERO, zero))


def _modulo(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
    # Arrow's remainder truncates (sign of the dividend, as ISO/IEC 9075-2 MOD) and is fmod for
    # floats; a zero divisor is swapped for 1 so the kernel cannot trap, then reported.
    a, b = args
    is_zero = pc.equal(b, pa.scalar(0, b.type))
    zero = _flag(is_zero, a)
    safe = pc.if_else(pc.fill_null(is_zero, False), pa.scalar(1, b.type), b)
    return pc.remainder(a, safe), _error_codes((DIVISION_BY_ZERO, zero))


def _div(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
    a, b = args
    zero = _flag(pc.equal(b, 0), a)
    over = _flag(pc.and_(pc.equal(a, INT64_MIN), pc.equal(b, -1)))
    safe = pc.if_else(pa.array(zero | over), 1, b)
    return pc.divide(a, safe), _error_codes((DIVISION_BY_ZERO, zero), (OUT_OF_RANGE, over))


def _sqrt(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
    (x,) = args
    return pc.sqrt(x), _error_codes((INVALID_ARGUMENT, _flag(pc.less(x, 0.0))))


def _ln(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
    (x,) = args
    return pc.ln(x), _error_codes((INVALID_ARGUMENT, _flag(pc.less_equal(x, 0.0))))


def _power(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
    a, b = args
    valid = _all_valid(args)
    x, y = _numbers(a, 0.0), _numbers(b, 0.0)
    with np.errstate(all="ignore"):
        one = (y == 0) | (x == 1)  # before NaN: power(NaN, 0) = power(1, NaN) = 1
        nan = ~one & (np.isnan(x) | np.isnan(y))
        zero_negative = ~one & (x == 0) & (y < 0)
        negative_fraction = ~one & (x < 0) & np.isfinite(y) & (np.trunc(y) != y)
        raised = _numbers(pc.power(a, b), 0.0)  # C pow: IEEE 754 9.2 pow, ±inf on overflow
        result = np.where(one, 1.0, np.where(nan, np.nan, raised))
    failed = valid & (zero_negative | negative_fraction)
    return _from_numpy(result, pa.float64(), ~valid), _error_codes((INVALID_ARGUMENT, failed))


def _half_away(x: np.ndarray) -> np.ndarray:
    """Round to an integer, ties away from zero, exactly: x - trunc(x) is exact in binary64
    (Sterbenz), and the sign of zero is kept (-0.4 -> -0.0). NaN and ±inf pass through."""
    with np.errstate(invalid="ignore"):
        whole = np.trunc(x)
        return np.where(np.abs(x - whole) >= 0.5, whole + np.copysign(1.0, x), whole)


def _round_exact(value: float, digits: int) -> float:
    """round(value, digits) on the exact binary value (Python decimal, ROUND_HALF_UP is away from zero)."""
    with localcontext() as context:
        context.prec = 2000  # more than the 1100 fraction digits a quantize can ask for here
        return float(Decimal(value).quantize(Decimal(1).scaleb(-digits), rounding=ROUND_HALF_UP))


def _round_float(x: pa.Array, digits: int) -> pa.Array:
    valid = _valid(x)
    v = _numbers(x, 0.0)
    finite = np.isfinite(v)
    if digits == 0:
        return _from_numpy(_half_away(v), pa.float64(), ~valid)
    if digits > 1100:  # a float64 has at most 1074 fraction digits: nothing to round
        return x
    if digits < -400:  # beyond 10^308 every finite value rounds to a signed zero
        return _from_numpy(np.where(finite, np.copysign(0.0, v), v), pa.float64(), ~valid)
    unsure = valid & finite
    result = v.copy()
    if abs(digits) <= 22:  # 10^22 is the largest power of ten exact in binary64
        scale = 10.0 ** abs(digits)
        with np.errstate(all="ignore"):
            scaled = v * scale if digits > 0 else v / scale
            rounded = _half_away(scaled)
            guess = rounded / scale if digits > 0 else rounded * scale
            # ``scaled`` is off by at most half an ulp, so the rounding direction is certain
            # unless the fraction is that close to one half (or ``scaled`` lost its fraction).
            fraction = np.abs(scaled - np.trunc(scaled))
            certain = (np.abs(fraction - 0.5) > np.abs(scaled) * 2.0 ** -52) & (np.abs(scaled) < 2.0 ** 52)
        result = np.where(finite, guess, v)
        unsure &= ~certain
    if unsure.any():
        rows = np.flatnonzero(unsure)
        bits, inverse = np.unique(v[rows].view(np.int64), return_inverse=True)
        exact = np.array([_round_exact(float(b), digits) for b in bits.view(np.float64)])
        result[rows] = exact[inverse.reshape(-1)]
    return _from_numpy(result, pa.float64(), ~valid)


def _round_int(x: pa.Array, digits: int) -> tuple[pa.Array, Codes | None]:
    if digits >= 0:
        return x, None
    valid = _valid(x)
    v = _numbers(x)
    if digits <= -20:  # |x| < 2^63 < 10^20 / 2: everything rounds to 0
        return _from_numpy(np.zeros(len(v), dtype=np.int64), pa.int64(), ~valid), None
    unit = np.uint64(10 ** -digits)
    negative = v < 0
    with np.errstate(all="ignore"):
        magnitude = np.where(negative, (-(v + 1)).astype(np.uint64) + np.uint64(1), v.astype(np.uint64))
        quotient, remainder = np.divmod(magnitude, unit)
        quotient += (remainder >= unit - remainder).astype(np.uint64)  # a tie goes away from zero
        rounded = quotient * unit  # at most 10^19 < 2^64
        limit = np.where(negative, np.uint64(2 ** 63), np.uint64(INT64_MAX))
        over = valid & (rounded > limit)
        signed = rounded.view(np.int64)
        result = np.where(negative, -signed, signed)
    return _from_numpy(result, pa.int64(), ~valid), _error_codes((OUT_OF_RANGE, over))


def _round(args: list[pa.Array], params: tuple) -> tuple[pa.Array, Codes | None]:
    (digits,) = params
    x = args[0]
    if pa.types.is_integer(x.type):
        return _round_int(x, digits)
    return _round_float(x, digits), None


# ------------------------------------------------------------------------------ comparison and logic
def _is_distinct(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
    a, b = args
    va, vb = _valid(a), _valid(b)
    same = _true(pc.equal(a, b))
    if pa.types.is_floating(a.type):  # NaN is not distinct from NaN
        same |= _true(pc.is_nan(a)) & _true(pc.is_nan(b))
    same = np.where(va & vb, same, ~va & ~vb)
    return pa.array(~same), None


def _is_null(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
    return pc.is_null(args[0]), None  # NaN is not null (nan_is_null defaults to False)


def _absorb(columns: Sequence[Column], combine: Callable, absorbing: bool) -> Column:
    """Kleene and/or where the absorbing value (false for and, true for or) beats any error."""
    values = reduce(combine, [c.values for c in columns])
    codes = _first_error([c.codes for c in columns])
    if codes is not None:
        decided = _true(values) if absorbing else _true(pc.invert(values))
        codes = np.where(decided, 0, codes).astype(np.int8)
    return _column(values, codes)


def _logic(combine: Callable, absorbing: bool) -> Builder:
    def build(node: TCall, plans: tuple[Plan, ...]) -> Step:
        return lambda frame: _absorb([p.step(frame) for p in plans], combine, absorbing)

    return build


def _compare(function: Callable, left: tuple, right: tuple, length: int) -> Column:
    values = _broadcast(function(left[0], right[0]), length)
    return _column(values, _first_error([left[1], right[1]]))


_SET_MINIMUM = 4  # from this many literal items, one is_in lookup instead of = per item (tuning only)


def _build_in(node: TCall, plans: tuple[Plan, ...]) -> Step:
    operand, items = plans[0], plans[1:]
    if (len(items) >= _SET_MINIMUM and all(i.literal is not None for i in items)
            and operand.type.kind is not Kind.FLOAT64):  # is_in would find NaN and mix up -0.0
        return _in_set(operand, items)

    def step(frame: Frame) -> Column:
        left = _evaluate(operand, frame)
        tests = [_compare(pc.equal, left, _evaluate(i, frame), frame.length) for i in items]
        return _absorb(tests, pc.or_kleene, True)

    return step


def _in_set(operand: Plan, items: tuple[Plan, ...]) -> Step:
    values = [i.literal.value for i in items]  # type: ignore[union-attr]
    value_set = pa.array([v for v in values if v is not None], type=to_arrow_type(operand.type))
    unmatched = pa.scalar(None if None in values else False, pa.bool_())  # = null is never true

    def step(frame: Frame) -> Column:
        column = operand.step(frame)
        found = pc.is_in(column.values, value_set=value_set)  # false for a null operand
        result = pc.if_else(found, True, pc.if_else(pc.is_null(column.values), pa.scalar(None, pa.bool_()),
                                                    unmatched))
        return _column(result, column.codes)

    return step


def _build_between(node: TCall, plans: tuple[Plan, ...]) -> Step:
    def step(frame: Frame) -> Column:
        x, low, high = (_evaluate(p, frame) for p in plans)
        return _absorb([_compare(pc.greater_equal, x, low, frame.length),
                        _compare(pc.less_equal, x, high, frame.length)], pc.and_kleene, False)

    return step


# ------------------------------------------------------------------------------ conditionals
def _build_coalesce(node: TCall, plans: tuple[Plan, ...]) -> Step:
    def step(frame: Frame) -> Column:
        values: pa.Array | None = None
        # Rows with only nulls so far, tracked row by row once an argument has errors; until
        # then they are the nulls of the coalesced values (no NumPy masks in the common case).
        pending: np.ndarray | None = None
        codes: Codes | None = None
        for plan in plans:
            if values is not None and (values.null_count == 0 if pending is None else not pending.any()):
                break  # later arguments are not evaluated: their errors cannot count
            column = plan.step(frame)
            if pending is None and column.codes is not None:
                pending = np.ones(frame.length, dtype=bool) if values is None else ~_valid(values)
                codes = np.zeros(frame.length, dtype=np.int8)
            values = column.values if values is None else pc.coalesce(values, column.values)
            if pending is None:
                continue
            null = ~_valid(column.values)
            if column.codes is not None:
                failed = pending & (column.codes != 0)
                codes[failed] = column.codes[failed]  # type: ignore[index]
                null &= column.codes == 0
            pending &= null
        return _column(values, codes)  # type: ignore[arg-type]

    return step


def _nullif(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
    a, b = args
    return _null_where(a, _true(pc.equal(a, b))), None  # with =, so nullif(NaN, NaN) is NaN


def _build_case(node: TCall, plans: tuple[Plan, ...]) -> Step:
    pairs = [(plans[i], plans[i + 1]) for i in range(0, len(plans) - 1, 2)]
    default = plans[-1]
    target = to_arrow_type(node.type)

    def step(frame: Frame) -> Column:
        pending = np.ones(frame.length, dtype=bool)
        codes = np.zeros(frame.length, dtype=np.int8)
        chosen: list[tuple[np.ndarray, Column]] = []
        for condition_plan, value_plan in pairs:
            if not pending.any():
                break  # branches no row reaches are not evaluated
            condition = condition_plan.step(frame)
            if condition.codes is not None:
                failed = pending & (condition.codes != 0)
                codes[failed] = condition.codes[failed]
                pending &= ~failed
            taken = pending & _true(condition.values)
            pending &= ~taken
            if taken.any():
                chosen.append((taken, value_plan.step(frame)))
        if pending.any():
            chosen.append((pending, default.step(frame)))
        for rows, column in chosen:
            if column.codes is not None:
                codes[rows] = column.codes[rows]
        return _column(_pick(frame.length, target, chosen), codes)

    return step


def _pick(length: int, target: pa.DataType, chosen: list[tuple[np.ndarray, Column]]) -> pa.Array:
    """Row by row, the values of the one branch that row took (null where none did)."""
    if not chosen:
        return pa.nulls(length, target)
    masks = pa.StructArray.from_arrays([pa.array(rows) for rows, _ in chosen],
                                       names=[str(i) for i in range(len(chosen))])
    return pc.case_when(masks, *[column.values.cast(target) for _, column in chosen])


# ------------------------------------------------------------------------------ strings
LikePart = tuple[str, str]  # ("text", a code point), ("any", "%") or ("one", "_")


def _like_parts(pattern: str, escape: str | None) -> list[LikePart] | None:
    """A like pattern as literal code points and wildcards, or None when the escape is invalid
    (ISO/IEC 9075-2 8.5: 22019 invalid escape character, 22025 invalid escape sequence)."""
    if escape is not None and len(escape) != 1:
        return None
    parts: list[LikePart] = []
    i = 0
    while i < len(pattern):
        ch = pattern[i]
        if ch == escape:
            if i + 1 >= len(pattern) or pattern[i + 1] not in ("%", "_", escape):
                return None
            parts.append(("text", pattern[i + 1]))
            i += 2
            continue
        parts.append(("any", ch) if ch == "%" else ("one", ch) if ch == "_" else ("text", ch))
        i += 1
    return parts


def _like_test(subject: pa.Array | pc.Expression, parts: list[LikePart]) -> pa.Array | pc.Expression:
    """The match as Arrow string kernels (arrays or dataset expressions alike). Arrow's own
    match_like is not used: in pyarrow 26 its suffix fast path misreads an escaped backslash
    ('%\\\\' never matches 'a\\')."""
    kinds = [kind for kind, _ in parts]
    lead = len(kinds) - len(_lstrip_any(kinds))
    core = _lstrip_any(kinds[lead:][::-1])[::-1]
    trail = len(kinds) - lead - len(core)
    if "any" not in core and "one" not in core:
        text = "".join(ch for _, ch in parts[lead:lead + len(core)])
        if lead and trail:
            return pc.match_substring(subject, pattern=text)
        if lead:
            return pc.ends_with(subject, pattern=text)
        if trail:
            return pc.starts_with(subject, pattern=text)
        return pc.equal(subject, pa.scalar(text, pa.string()))
    return pc.match_substring_regex(subject, pattern=_like_regex(parts))


def _lstrip_any(kinds: list[str]) -> list[str]:
    i = 0
    while i < len(kinds) and kinds[i] == "any":
        i += 1
    return kinds[i:]


def _like_regex(parts: list[LikePart]) -> str:
    """An RE2 pattern for the whole string: '.' matches one code point (UTF-8 mode), also a
    newline under (?s); every literal but ASCII letters and digits is written as \\x{...}."""
    body = "".join(".*" if kind == "any" else "." if kind == "one"
                   else ch if ch.isascii() and ch.isalnum() else f"\\x{{{ord(ch):x}}}"
                   for kind, ch in parts)
    return f"(?s)\\A{body}\\z"


@lru_cache(maxsize=4096)
def _like_python(pattern: str, escape: str | None) -> "re.Pattern[str] | None":
    parts = _like_parts(pattern, escape)
    if parts is None:
        return None
    return re.compile("".join(".*" if kind == "any" else "." if kind == "one" else re.escape(ch)
                              for kind, ch in parts), re.DOTALL)


def _like_row(s: str, pattern: str, escape: str | None) -> object:
    regex = _like_python(pattern, escape)
    return _Failure(INVALID_ESCAPE) if regex is None else regex.fullmatch(s) is not None


def _like(args: list[pa.Array], params: tuple) -> tuple[pa.Array, Codes | None]:
    pattern, escape = params
    s = args[0]
    parts = _like_parts(pattern, escape)
    if parts is None:
        return pa.nulls(len(s), pa.bool_()), _error_codes((INVALID_ESCAPE, _valid(s)))
    return _like_test(s, parts), None


def _trimmer(function: Callable) -> Apply:
    def apply(args: list[pa.Array], params: tuple) -> tuple[pa.Array, Codes | None]:
        (characters,) = params
        if characters == "":
            return args[0], None
        return function(args[0], characters=characters), None  # a set of code points

    return apply


def _substring_fixed(args: list[pa.Array], params: tuple) -> tuple[pa.Array, Codes | None]:
    s = args[0]
    start, length = params if len(params) == 2 else (params[0], None)
    if length is not None and length < 0:
        return pa.nulls(len(s), pa.string()), _error_codes((INVALID_ARGUMENT, _valid(s)))
    begin = max(start, 1) - 1  # ISO/IEC 9075-2 6.30: positions before 1 exist but are empty
    end = start + length - 1 if length is not None else 2 ** 62
    return pc.utf8_slice_codeunits(s, start=begin, stop=min(max(end, begin), 2 ** 62)), None


def _substring_rows(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
    """substring with per-row bounds: code-point positions mapped to byte offsets in numpy."""
    s = args[0]
    valid = _all_valid(args)
    start = _numbers(args[1])
    offsets, data = _utf8(s)
    before = _code_points_before(data)
    first, last = offsets[:-1], offsets[1:]
    chars = before[last] - before[first]
    begin = np.clip(np.maximum(start, 1) - 1, 0, chars)
    negative = np.zeros(len(s), dtype=bool)
    if len(args) == 3:
        length = _numbers(args[2])
        negative = valid & (length < 0)
        room = np.maximum(length, 0)
        # ISO/IEC 9075-2 6.30: the end is E = S + L, exclusive. Saturate E at INT64_MAX (past it
        # is "to the end") and floor it at 1 before the 1-based to 0-based step, so no int64
        # arithmetic here can wrap around (S = -2^63 with L = 0 once gave E - 1 = INT64_MAX).
        end = np.minimum(start, INT64_MAX - room) + room
        end = np.clip(np.maximum(end, 1) - 1, begin, chars)
    else:
        end = chars
    starts = np.append(np.flatnonzero((data & 0xC0) != 0x80), len(data))

    def byte_of(k: np.ndarray) -> np.ndarray:
        return np.where(k < chars, starts[np.minimum(before[first] + k, len(starts) - 1)], last)

    low, high = byte_of(begin), byte_of(end)
    sizes = np.where(valid & ~negative, high - low, 0)
    new_offsets = np.concatenate(([0], np.cumsum(sizes))).astype(np.int32)
    gather = np.repeat(low - new_offsets[:-1], sizes) + np.arange(int(new_offsets[-1]))
    out = pa.Array.from_buffers(pa.string(), len(s), [None, pa.py_buffer(new_offsets),
                                                       pa.py_buffer(data[gather].tobytes())])
    return _null_where(out, ~valid), _error_codes((INVALID_ARGUMENT, negative))


def _build_substring(node: TCall, plans: tuple[Plan, ...]) -> Step:
    if all(p.literal is not None for p in plans[1:]):
        return _parametrised(_substring_fixed, (1, 2))(node, plans)
    return _call(plans, _substring_rows)


def _case_mapping(python_map: Callable[[str], str], ascii_map: Callable) -> Kernel:
    """Full Unicode case mapping (SpecialCasing, final sigma) as Python's str methods do it:
    Arrow's ASCII kernel for ASCII strings, Python over the distinct others."""
    def kernel(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
        s = args[0]
        out = ascii_map(s)
        other = ~_true(pc.string_is_ascii(s)) & _valid(s)
        if other.any():
            subset = s.filter(pa.array(other))
            distinct = pc.unique(subset)
            mapped = pa.array([python_map(v) for v in distinct.to_pylist()], pa.string())
            out = pc.replace_with_mask(out, pa.array(other), mapped.take(pc.index_in(subset, value_set=distinct)))
        return out, None

    return kernel


def _join(*parts: pa.Array | pa.Scalar | str) -> pa.Array:
    return pc.binary_join_element_wise(*parts, "")


def _concat(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
    # Nulls become '' first: binary_join_element_wise with null_handling="skip" drops rows whose
    # inputs are all null in pyarrow 26 (the result is shorter than the input).
    return _join(*[pc.fill_null(a, "") for a in args]), None


def _replace(args: list[pa.Array], params: tuple) -> tuple[pa.Array, Codes | None]:
    search, replacement = params
    if search == "":  # also: replace_substring never returns on an empty pattern
        return args[0], None
    return pc.replace_substring(args[0], pattern=search, replacement=replacement), None


def _position(args: list[pa.Array], params: tuple) -> tuple[pa.Array, Codes | None]:
    (needle,) = params
    haystack = args[1]
    valid = _valid(haystack)
    if needle == "":
        return _from_numpy(np.ones(len(haystack), dtype=np.int64), pa.int64(), ~valid), None
    found = _numbers(pc.find_substring(haystack, pattern=needle), -1).astype(np.int64)  # a byte offset
    offsets, data = _utf8(haystack)
    if (data >= 0x80).any():  # not all ASCII: count the code points before the match
        before = _code_points_before(data)
        found = np.where(found >= 0, before[offsets[:-1] + np.maximum(found, 0)] - before[offsets[:-1]], -1)
    return _from_numpy(found + 1, pa.int64(), ~valid), None


def _affix(function: Callable) -> Apply:
    return lambda args, params: (function(args[0], pattern=params[0]), None)


def _octets(s: pa.Array | pa.Scalar) -> pa.Array | pa.Scalar:
    return pc.cast(pc.binary_length(s), pa.int64())


def _code_points(s: pa.Array | pa.Scalar) -> pa.Array | pa.Scalar:
    return pc.cast(pc.utf8_length(s), pa.int64())


# ------------------------------------------------------------------------------ casts
_INT_TEXT = r"^[+-]?[0-9]+$"
_FLOAT_TEXT = (r"^[+-]?(?:(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?"
               r"|[iI][nN][fF](?:[iI][nN][iI][tT][yY])?|[nN][aA][nN])$")  # ASCII letters only
_DATE_TEXT = r"^[0-9]{4}-[0-9]{2}-[0-9]{2}$"
_TIMESTAMP_TEXT = r"^[0-9]{4}-[0-9]{2}-[0-9]{2}(?:[ Tt][0-9]{2}:[0-9]{2}:[0-9]{2}(?:\.[0-9]{1,6})?)?$"
_US_PER_DAY = 86_400_000_000


def _body(s: pa.Array) -> pa.Array:
    return pc.utf8_trim(s, characters=" ")  # ISO/IEC 9075-2 6.13: only U+0020 is a <space>


def _float_to_int(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
    (x,) = args
    valid = _valid(x)
    rounded = _half_away(_numbers(x, 0.0))
    with np.errstate(invalid="ignore"):
        fits = (rounded >= -(2.0 ** 63)) & (rounded < 2.0 ** 63)  # false for NaN and ±inf
    result = np.where(fits, rounded, 0.0).astype(np.int64)
    return _from_numpy(result, pa.int64(), ~valid), _error_codes((OUT_OF_RANGE, valid & ~fits))


def _string_to_int(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
    (s,) = args
    valid = _valid(s)
    body = _body(s)
    form = _true(pc.match_substring_regex(body, _INT_TEXT))
    negative = _true(pc.starts_with(body, pattern="-"))
    digits = pc.utf8_ltrim(pc.utf8_ltrim(body, characters="+-"), characters="0")
    width = _numbers(pc.utf8_length(digits))
    short = form & (width <= 19)  # 19 digits always fit in uint64
    safe = pc.fill_null(pc.if_else(pa.array(short & (width > 0)), digits, "0"), "0")
    magnitude = pc.cast(safe, pa.uint64()).to_numpy(zero_copy_only=False)
    limit = np.where(negative, np.uint64(2 ** 63), np.uint64(INT64_MAX))
    fits = short & (magnitude <= limit)
    with np.errstate(over="ignore"):
        signed = magnitude.view(np.int64)
        result = np.where(negative, -signed, signed)  # -(2^63) wraps to exactly INT64_MIN
    codes = _error_codes((INVALID_CAST, valid & ~form), (OUT_OF_RANGE, form & ~fits))
    return _from_numpy(result, pa.int64(), ~valid), codes


def _string_to_float(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
    (s,) = args
    valid = _valid(s)
    body = _body(s)
    form = _true(pc.match_substring_regex(body, _FLOAT_TEXT))
    safe = pc.if_else(pa.array(form), body, "0")
    try:
        values = pc.cast(safe, pa.float64())  # correctly rounded (IEEE 754 5.12.2)
    except pa.ArrowInvalid:  # a numeral Arrow's parser refuses: Python's float is exact too
        values = pa.array([None if t is None else float(t) for t in safe.to_pylist()], pa.float64())
    infinite = np.isinf(_numbers(values, 0.0))
    spelled = _true(pc.match_substring(body, "inf", ignore_case=True))
    codes = _error_codes((INVALID_CAST, valid & ~form), (OUT_OF_RANGE, form & infinite & ~spelled))
    return _null_where(values, ~valid), codes


def _string_to_bool(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
    # ASCII lower-casing is exact here: no non-ASCII code point lower-cases to ASCII letters
    # except U+212A KELVIN SIGN -> 'k' and U+0130 -> 'i' + U+0307, neither of which can spell
    # 'true' or 'false' (Unicode case mapping, checked in the tests against str.lower).
    (s,) = args
    valid = _valid(s)
    body = pc.ascii_lower(_body(s))
    yes, no = _true(pc.equal(body, "true")), _true(pc.equal(body, "false"))
    return _from_numpy(yes, pa.bool_(), ~valid), _error_codes((INVALID_CAST, valid & ~(yes | no)))


def _days_from_civil(year: np.ndarray, month: np.ndarray, day: np.ndarray) -> np.ndarray:
    """Days since 1970-01-01 in the proleptic Gregorian calendar (the era-based algorithm for
    civil dates, from memory; checked in the tests against datetime.date.toordinal)."""
    y = year - (month <= 2)
    era = np.floor_divide(y, 400)
    year_of_era = y - era * 400
    day_of_year = (153 * ((month + 9) % 12) + 2) // 5 + day - 1
    day_of_era = year_of_era * 365 + year_of_era // 4 - year_of_era // 100 + day_of_year
    return era * 146097 + day_of_era - 719468


_MONTH_DAYS = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31])


def _parse_datetime(s: pa.Array, with_time: bool) -> tuple[pa.Array, Codes | None]:
    """'YYYY-MM-DD' (and for timestamps '[ Tt]HH:MM:SS[.f{1,6}]'), fields read from the bytes."""
    valid = _valid(s)
    body = _body(s)
    form = _true(pc.match_substring_regex(body, _TIMESTAMP_TEXT if with_time else _DATE_TEXT))
    rows = np.flatnonzero(form)
    result = np.zeros(len(s), dtype=np.int64)
    good = np.zeros(len(s), dtype=bool)
    if rows.size:
        offsets, data = _utf8(body)
        start = offsets[rows]
        size = offsets[rows + 1] - start

        def number(at: int, width: int) -> np.ndarray:
            # Matched rows are ASCII of a fixed layout; indices are clipped only for the rows
            # (date-only timestamps) whose value is discarded anyway.
            value = np.zeros(rows.size, dtype=np.int64)
            for k in range(width):
                index = np.minimum(start + at + k, len(data) - 1)
                value = value * 10 + (data[index].astype(np.int64) - 48)
            return value

        year, month, day = number(0, 4), number(5, 2), number(8, 2)
        leap = ((year % 4 == 0) & (year % 100 != 0)) | (year % 400 == 0)
        month_days = _MONTH_DAYS[np.clip(month, 1, 12) - 1] + ((month == 2) & leap)
        ok = (year >= 1) & (month >= 1) & (month <= 12) & (day >= 1) & (day <= month_days)
        value = _days_from_civil(year, month, day)
        if with_time:
            timed = size > 10
            hour, minute, second = (np.where(timed, number(at, 2), 0) for at in (11, 14, 17))
            fraction = np.zeros(rows.size, dtype=np.int64)
            for k in range(6):
                digit = np.where(size > 20 + k, data[np.minimum(start + 20 + k, len(data) - 1)].astype(np.int64) - 48, 0)
                fraction = fraction * 10 + digit
            ok &= (hour <= 23) & (minute <= 59) & (second <= 59)
            value = value * _US_PER_DAY + ((hour * 60 + minute) * 60 + second) * 1_000_000 + fraction
        result[rows] = np.where(ok, value, 0)
        good[rows] = ok
    target = pa.timestamp("us") if with_time else pa.date32()
    data_out = result if with_time else result.astype(np.int32)
    return (_from_numpy(data_out, target, ~(valid & good)),
            _error_codes((INVALID_DATETIME, valid & ~good)))


def _float_text(value: float) -> str:
    if value != value:
        return "NaN"
    if value in (float("inf"), float("-inf")):
        return "Infinity" if value > 0 else "-Infinity"
    return repr(value)


def _float_to_string(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
    """Python's repr: Arrow's shortest round-trip digits where it prints them positionally as
    repr does (1e-4 <= |x| < 1e16, no exponent), with the '.0' repr adds to integral values;
    Python over the distinct remaining values."""
    (x,) = args
    valid = _valid(x)
    v = _numbers(x, 0.0)
    text = pc.cast(x, pa.string())
    with np.errstate(invalid="ignore"):
        magnitude = np.abs(v)
        in_range = ((magnitude >= 1e-4) & (magnitude < 1e16)) | (v == 0)
    positional = valid & in_range & ~_true(pc.match_substring(text, "e"))
    text = pc.if_else(pc.match_substring(text, "."), text, _join(text, ".0"))
    other = valid & ~positional
    if other.any():
        rows = np.flatnonzero(other)
        bits, inverse = np.unique(v[rows].view(np.int64), return_inverse=True)
        spelled = pa.array([_float_text(float(b)) for b in bits.view(np.float64)], pa.string())
        text = pc.replace_with_mask(text, pa.array(other), spelled.take(inverse.reshape(-1)))
    return text, None


def _timestamp_to_string(args: list[pa.Array]) -> tuple[pa.Array, Codes | None]:
    (t,) = args
    seconds = pc.utf8_slice_codeunits(pc.cast(t, pa.string()), 0, 19)  # 'YYYY-MM-DD HH:MM:SS'
    micros = np.mod(_numbers(t.cast(pa.int64())), 1_000_000)  # floor modulo: right before 1970 too
    digits = pc.utf8_rtrim(pc.utf8_lpad(pa.array(micros).cast(pa.string()), width=6, padding="0"), characters="0")
    fraction = pc.if_else(pa.array(micros != 0), _join(".", digits), "")
    return _join(seconds, fraction), None


def _arrow_cast(target: pa.DataType) -> Kernel:
    return lambda args: (pc.cast(args[0], target, safe=False), None)


I, F, B, S, D, T = Kind.INT64, Kind.FLOAT64, Kind.BOOL, Kind.STRING, Kind.DATE, Kind.TIMESTAMP

_CASTS: dict[tuple[Kind, Kind], Kernel] = {
    (I, F): _arrow_cast(pa.float64()),  # nearest, ties to even (IEEE 754 5.4.2)
    (F, I): _float_to_int,
    (B, I): _arrow_cast(pa.int64()),
    (I, B): _arrow_cast(pa.bool_()),  # 0 is false, anything else true
    (S, I): _string_to_int,
    (S, F): _string_to_float,
    (S, B): _string_to_bool,
    (S, D): lambda args: _parse_datetime(args[0], with_time=False),
    (S, T): lambda args: _parse_datetime(args[0], with_time=True),
    (I, S): _arrow_cast(pa.string()),
    (F, S): _float_to_string,
    (B, S): lambda args: (pc.if_else(args[0], "TRUE", "FALSE"), None),
    (D, S): _arrow_cast(pa.string()),  # 'YYYY-MM-DD', years zero-padded to four digits
    (T, S): _timestamp_to_string,
    (D, T): _arrow_cast(pa.timestamp("us")),
    (T, D): _arrow_cast(pa.date32()),  # the day the instant falls in, also before 1970
}


def _build_cast(node: TCall, plans: tuple[Plan, ...]) -> Step:
    source, target = plans[0].type.kind, node.type.kind
    if source is target:
        return plans[0].step
    return _call(plans, _CASTS[(source, target)])


# ------------------------------------------------------------------------------ dispatch
def _kernel(kernel: Kernel) -> Builder:
    return lambda node, plans: _call(plans, kernel)


_BUILDERS: dict[str, Builder] = {
    "add": _by_kind(_checked(pc.add_checked, _exact_add), _vectorised(pc.add)),
    "subtract": _by_kind(_checked(pc.subtract_checked, _exact_subtract), _vectorised(pc.subtract)),
    "multiply": _by_kind(_checked(pc.multiply_checked, _exact_multiply), _vectorised(pc.multiply)),
    "divide": _kernel(_divide),
    "modulo": _kernel(_modulo),
    "negate": _by_kind(_checked(pc.negate_checked, _exact_negate), _vectorised(pc.negate)),
    "div": _kernel(_div),
    "abs": _by_kind(_checked(pc.abs_checked, _exact_abs), _vectorised(pc.abs)),
    "round": _parametrised(_round, (1,), defaults=(0,)),
    "floor": _by_kind(_identity, _vectorised(pc.floor)),
    "ceil": _by_kind(_identity, _vectorised(pc.ceil)),
    "sqrt": _kernel(_sqrt),
    "power": _kernel(_power),
    "ln": _kernel(_ln),
    "exp": _vectorised(pc.exp),
    "is_nan": _vectorised(pc.is_nan),
    "eq": _vectorised(pc.equal),  # IEEE 754 comparisons: NaN unordered, -0.0 = 0.0
    "ne": _vectorised(pc.not_equal),
    "lt": _vectorised(pc.less),  # strings: UTF-8 byte order is code point order
    "le": _vectorised(pc.less_equal),
    "gt": _vectorised(pc.greater),
    "ge": _vectorised(pc.greater_equal),
    "is_distinct_from": _kernel(_is_distinct),
    "is_null": _kernel(_is_null),
    "and": _logic(pc.and_kleene, absorbing=False),
    "or": _logic(pc.or_kleene, absorbing=True),
    "not": _vectorised(pc.invert),
    "coalesce": _build_coalesce,
    "nullif": _kernel(_nullif),
    "case": _build_case,
    "in": _build_in,
    "between": _build_between,
    "like": _parametrised(_like, (1, 2), defaults=(None,), per_row=_like_row),
    "trim": _parametrised(_trimmer(pc.utf8_trim), (1,), defaults=(" ",), per_row=str.strip),
    "ltrim": _parametrised(_trimmer(pc.utf8_ltrim), (1,), defaults=(" ",), per_row=str.lstrip),
    "rtrim": _parametrised(_trimmer(pc.utf8_rtrim), (1,), defaults=(" ",), per_row=str.rstrip),
    "substring": _build_substring,
    "upper": _kernel(_case_mapping(str.upper, pc.ascii_upper)),
    "lower": _kernel(_case_mapping(str.lower, pc.ascii_lower)),
    "length": _vectorised(_code_points),
    "octet_length": _vectorised(_octets),
    "concat_op": _vectorised(_join),
    "concat": _kernel(_concat),
    "replace": _parametrised(_replace, (1, 2), per_row=lambda s, search, new: s.replace(search, new) if search else s),
    "position": _parametrised(_position, (0,), per_row=lambda needle, haystack: haystack.find(needle) + 1),
    "starts_with": _parametrised(_affix(pc.starts_with), (1,), per_row=str.startswith),
    "ends_with": _parametrised(_affix(pc.ends_with), (1,), per_row=str.endswith),
    "cast": _build_cast,
    "year": _vectorised(pc.year),
    "month": _vectorised(pc.month),
    "day": _vectorised(pc.day),
}

IMPLEMENTED = frozenset(_BUILDERS)


# ------------------------------------------------------------------------------ dataset filters
_COMPARISONS = {"eq": pc.equal, "ne": pc.not_equal, "lt": pc.less, "le": pc.less_equal,
                "gt": pc.greater, "ge": pc.greater_equal}
_NAN_FALSE = {"eq", "lt", "le", "gt", "ge"}  # false whenever an operand is NaN (IEEE 754 5.11)


def to_dataset_expression(node: Typed) -> pc.Expression | None:
    """A ``pyarrow.dataset`` filter keeping exactly the rows where the predicate is true, or
    None when Arrow's semantics are not provably ours. Covered:

    - fields (struct members included) and typed literals;
    - ``= <> < <= > >=`` on int64, string, bool, date and timestamp; ``in`` lists and
      ``between`` over those, with literal items;
    - ``and``, ``or``, ``not``, ``is null``;
    - ``like`` with a literal pattern and valid literal escape; ``starts_with``/``ends_with``
      with a literal affix;
    - float64 ``= < <= > >=`` (and ``in``/``between``) only outside any ``not``.

    Refused: anything that can raise a per-row error (arithmetic, casts, substring, ...),
    because a dataset scan cannot absorb an error the way ``and``/``or`` do; float ``<>``,
    ``is_nan`` and negated float comparisons, because Parquet row-group statistics leave NaN
    out of min/max and the scan then prunes groups whose NaN rows the predicate would keep;
    and int64 -> float64 casts, which the statistics pruning evaluates with a safe cast that
    fails beyond 2^53.
    """
    if node.type.kind is not Kind.BOOL:
        return None
    return _expression(node, positive=True)


def _expression(node: Typed, positive: bool) -> pc.Expression | None:
    if isinstance(node, TLiteral):
        if node.type.kind is Kind.NULL:
            return None
        return pc.scalar(pa.scalar(node.value, type=to_arrow_type(node.type)))
    if isinstance(node, TField):
        return pc.field(node.path if len(node.path) > 1 else node.path[0])
    fid, args = node.function, node.args
    if fid in _COMPARISONS:
        return _comparison(fid, args[0], args[1], positive)
    if fid in ("and", "or"):
        parts = [_expression(a, positive) for a in args]
        if any(p is None for p in parts):
            return None
        return reduce(pc.and_kleene if fid == "and" else pc.or_kleene, parts)
    if fid == "not":
        inner = _expression(args[0], not positive)
        return None if inner is None else pc.invert(inner)
    if fid == "is_null":
        operand = _operand(args[0])
        return None if operand is None else pc.is_null(operand)
    if fid == "in":
        tests = [_comparison("eq", args[0], item, positive) for item in args[1:]]
        return None if any(t is None for t in tests) else reduce(pc.or_kleene, tests)
    if fid == "between":
        low, high = _comparison("ge", args[0], args[1], positive), _comparison("le", args[0], args[2], positive)
        return None if low is None or high is None else pc.and_kleene(low, high)
    if fid in ("like", "starts_with", "ends_with"):
        return _string_test(node)
    return None


def _operand(node: Typed) -> pc.Expression | None:
    if isinstance(node, (TLiteral, TField)):
        return _expression(node, positive=True)
    return None


def _comparison(fid: str, left: Typed, right: Typed, positive: bool) -> pc.Expression | None:
    if left.type.kind is Kind.FLOAT64 and not (positive and fid in _NAN_FALSE):
        return None
    a, b = _operand(left), _operand(right)
    if a is None or b is None:
        return None
    return _COMPARISONS[fid](a, b)


def _string_test(node: TCall) -> pc.Expression | None:
    subject, *params = node.args
    target = _operand(subject)
    if target is None or not all(isinstance(p, TLiteral) and p.value is not None for p in params):
        return None
    values = [p.value for p in params]  # type: ignore[union-attr]
    if node.function == "like":
        parts = _like_parts(values[0], values[1] if len(values) > 1 else None)
        return None if parts is None else _like_test(target, parts)
    function = pc.starts_with if node.function == "starts_with" else pc.ends_with
    return function(target, pattern=values[0])
