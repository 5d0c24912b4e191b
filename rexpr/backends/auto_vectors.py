"""NumPy kernels for the numeric and boolean part of a tree, used by the auto backend.

A :class:`Vec` is one node's result over one block of rows: values, a validity mask and int8
error codes (``rexpr.evaluation.ERROR_CODES``). A row with an error code is never valid, so a
parent never computes on it. Each kernel reproduces the reference rule of its function id
(rexpr/reference/): errors from the leftmost failing argument, then nulls, then the kernel's
own errors; ``and``/``or`` absorb errors; ``case``/``coalesce`` count errors only on the rows
that reach a branch.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import reduce
from typing import Callable, Sequence

import numpy as np
import pyarrow as pa

from rexpr.backends.auto_scratch import empty
from rexpr.catalogue.model import ErrorClass
from rexpr.evaluation import CODE_OF
from rexpr.typed import TField, TLiteral, Typed
from rexpr.types import INT64_MAX, INT64_MIN, Kind

OUT_OF_RANGE = CODE_OF[ErrorClass.OUT_OF_RANGE]
DIVISION_BY_ZERO = CODE_OF[ErrorClass.DIVISION_BY_ZERO]
INVALID_ARGUMENT = CODE_OF[ErrorClass.INVALID_ARGUMENT]

FAST_KINDS = frozenset({Kind.BOOL, Kind.INT64, Kind.FLOAT64})
DTYPES = {Kind.BOOL: np.dtype(bool), Kind.INT64: np.dtype(np.int64), Kind.FLOAT64: np.dtype(np.float64)}
ARROW_TYPES = {Kind.BOOL: pa.bool_(), Kind.INT64: pa.int64(), Kind.FLOAT64: pa.float64()}


@dataclass(frozen=True)
class Vec:
    values: np.ndarray          # garbage (but harmless) where not valid
    valid: np.ndarray | None    # None: every row is valid
    codes: np.ndarray | None    # None: no row failed


Mask = np.ndarray | None  # None stands for all-true
Rule = tuple[int, np.ndarray]  # (error code, rows) on rows where every argument is a value


# ------------------------------------------------------------------------------ masks
def both(a: Mask, b: Mask) -> Mask:
    if a is None:
        return b
    if b is None:
        return a
    return a & b


def ones(mask: Mask, length: int) -> np.ndarray:
    return np.ones(length, dtype=bool) if mask is None else mask


def first_error(codes: Sequence[np.ndarray | None]) -> np.ndarray | None:
    """Per row the leftmost non-zero code (errors propagate from arguments, leftmost first)."""
    out: np.ndarray | None = None
    for current in reversed(codes):
        if current is not None:
            out = current if out is None else np.where(current != 0, current, out).astype(np.int8)
    return out


def _valid_of(codes: np.ndarray | None) -> Mask:
    return None if codes is None else codes == 0


def _with_rules(valid: Mask, codes: np.ndarray | None, rules: Sequence[Rule], length: int) -> tuple[Mask, np.ndarray | None]:
    """Add a kernel's own errors (first rule wins) on rows where every argument is valid."""
    for code, rows in rules:  # valid drops each rule's rows, so an earlier rule wins
        rows = np.broadcast_to(rows, (length,))  # a rule on a literal operand is a scalar
        rows = rows if valid is None else rows & valid
        if rows.any():
            codes = np.zeros(length, dtype=np.int8) if codes is None else codes.copy()
            codes[rows] = code
            valid = ~rows if valid is None else valid & ~rows
    return valid, codes


# ------------------------------------------------------------------------------ conversions
def _bits(buffer: pa.Buffer, offset: int, length: int) -> np.ndarray:
    start = offset // 8
    raw = np.frombuffer(buffer, dtype=np.uint8, count=(offset % 8 + length + 7) // 8, offset=start)
    return np.unpackbits(raw, bitorder="little")[offset % 8: offset % 8 + length].view(bool)


def from_arrow(values: pa.Array, codes: np.ndarray | None, kind: Kind) -> Vec:
    """Zero-copy views of an Arrow array's buffers where the layout allows (numeric data)."""
    length = len(values)
    if values.type == pa.null():
        return Vec(np.zeros(length, DTYPES[kind]), np.zeros(length, dtype=bool), codes)
    if values.type != ARROW_TYPES[kind]:
        values = values.cast(ARROW_TYPES[kind])
    buffers = values.buffers()
    valid = None if values.null_count == 0 else _bits(buffers[0], values.offset, length)
    if buffers[1] is None:
        data = np.zeros(length, DTYPES[kind])
    elif kind is Kind.BOOL:
        data = _bits(buffers[1], values.offset, length)
    else:
        data = np.frombuffer(buffers[1], dtype=DTYPES[kind], count=length, offset=values.offset * 8)
    return Vec(data, valid, codes)


def to_arrow(vec: Vec, kind: Kind) -> pa.Array:
    mask = None if vec.valid is None else ~vec.valid
    return pa.array(np.ascontiguousarray(vec.values), type=ARROW_TYPES[kind], mask=mask)


def literal(value: object, kind: Kind, length: int) -> Vec:
    if value is None:
        return Vec(np.zeros(length, DTYPES[kind]), np.zeros(length, dtype=bool), None)
    return Vec(np.broadcast_to(np.asarray(value, DTYPES[kind]), (length,)), None, None)


# ------------------------------------------------------------------------------ null-propagating kernels
Kernel = Callable[..., "tuple[np.ndarray, list[Rule]]"]


def plain(kernel: Kernel, args: Sequence[Vec], length: int) -> Vec:
    valid = reduce(both, [a.valid for a in args], None)
    codes = first_error([a.codes for a in args])
    # Callers run under np.errstate(all="ignore"): garbage in invalid rows may overflow, and
    # is discarded. A broadcast literal goes in as a scalar, which the ufuncs handle faster.
    operands = [a.values for a in args]
    if not all(_broadcast(v) for v in operands):  # keep one full array so results have the length
        operands = [v[0] if _broadcast(v) else v for v in operands]
    values, rules = kernel(*operands)
    valid, codes = _with_rules(valid, codes, rules, length)
    return Vec(values, valid, codes)


def _broadcast(values: np.ndarray) -> bool:
    return len(values) > 1 and values.strides == (0,)


def _length(*xs: object) -> int:
    return next(len(x) for x in xs if np.ndim(x))  # plain() keeps at least one full array


def _float(op: Callable) -> Kernel:
    """A kernel without errors of its own whose result is bool."""
    return lambda *xs: (op(*xs), [])


def _into(op: Callable, dtype: type) -> Callable:
    """``op`` writing its 8-byte result into a buffer of the block's scratch."""
    return lambda *xs: op(*xs, out=empty(dtype, _length(*xs)))


def _float_arith(op: Callable) -> Kernel:
    into = _into(op, np.float64)
    return lambda *xs: (into(*xs), [])


_add, _sub, _mul = _into(np.add, np.int64), _into(np.subtract, np.int64), _into(np.multiply, np.int64)
_xor = _into(np.bitwise_xor, np.int64)


def _sign_flips(a, b, r) -> np.ndarray:
    """Where ``(a ^ r) & (b ^ r)`` is negative: r's sign differs from both a's and b's."""
    flips = _xor(a, r)
    return np.bitwise_and(flips, _xor(b, r), out=flips) < 0


def _int_add(x, y):
    r = _add(x, y)
    if np.ndim(y) == 0 or np.ndim(x) == 0:  # a literal operand: the overflow is a range of the other
        c, v = (int(y), x) if np.ndim(y) == 0 else (int(x), y)
        return r, [(OUT_OF_RANGE, v > INT64_MAX - c if c > 0 else v < INT64_MIN - c)]
    return r, [(OUT_OF_RANGE, _sign_flips(x, y, r))]  # sign flipped against both operands


def _int_subtract(x, y):
    r = _sub(x, y)
    if np.ndim(y) == 0:
        c = int(y)
        return r, [(OUT_OF_RANGE, x < INT64_MIN + c if c > 0 else x > INT64_MAX + c)]
    if np.ndim(x) == 0:
        return r, [(OUT_OF_RANGE, ((x ^ y) & (x ^ r)) < 0)]
    flips = _xor(x, y)  # the operands' signs differ and the result's differs from x's
    return r, [(OUT_OF_RANGE, np.bitwise_and(flips, _xor(x, r), out=flips) < 0)]


def _int_multiply(x, y):
    r = _mul(x, y)  # modulo 2^64
    if np.ndim(y) == 0 or np.ndim(x) == 0:  # a literal factor: the exact product's range is a range of x
        return r, [(OUT_OF_RANGE, _outside_product_range(x, y) if np.ndim(y) == 0 else _outside_product_range(y, x))]
    # The float64 product is within a factor 1 + 2^-52 of the exact one: far from +-2^63 it
    # decides; the rows near the bounds (few) are checked exactly by division.
    approx = np.multiply(x, y, out=empty(np.float64, len(x)), dtype=np.float64)
    np.abs(approx, out=approx)
    over = approx >= 2.0 ** 64
    near = (approx >= 2.0 ** 62) & ~over
    if near.any():
        xs, ys, rs = x[near], y[near], r[near]
        usable = (xs != 0) & (xs != -1)
        quotient, remainder = np.divmod(rs, np.where(usable, xs, 1))
        over[near] = (usable & ((quotient != ys) | (remainder != 0))) | ((xs == -1) & (ys == INT64_MIN))
    return r, [(OUT_OF_RANGE, over)]


def _outside_product_range(x: np.ndarray, c: object) -> np.ndarray | bool:
    """Where x * c (c one int64) falls outside int64, as a range of x: exact integer bounds."""
    c = int(c)  # type: ignore[call-overload]
    if c == 0:
        return False
    low, high = (INT64_MIN, INT64_MAX) if c > 0 else (INT64_MAX, INT64_MIN)
    least, most = -(-low // c), high // c  # ceil(low / c), floor(high / c)
    outside = np.zeros(x.shape, dtype=bool)
    if least > INT64_MIN:
        outside |= x < least
    if most < INT64_MAX:
        outside |= x > most
    return outside


def _int_negate(x):
    return _into(np.negative, np.int64)(x), [(OUT_OF_RANGE, x == INT64_MIN)]


def _int_abs(x):
    return _into(np.abs, np.int64)(x), [(OUT_OF_RANGE, x == INT64_MIN)]


def _divide(x, y):
    return _into(np.divide, np.float64)(x, y), [(DIVISION_BY_ZERO, y == 0)]  # -0.0 == 0 too (IEEE 754 5.11)


def _sqrt(x):
    return _into(np.sqrt, np.float64)(x), [(INVALID_ARGUMENT, x < 0)]  # NaN < 0 is false: sqrt(NaN) = NaN


INT_KERNELS: dict[str, Kernel] = {
    "add": _int_add, "subtract": _int_subtract, "multiply": _int_multiply,
    "negate": _int_negate, "abs": _int_abs,
}
FLOAT_KERNELS: dict[str, Kernel] = {
    "add": _float_arith(np.add), "subtract": _float_arith(np.subtract), "multiply": _float_arith(np.multiply),
    "negate": _float_arith(np.negative), "abs": _float_arith(np.abs), "divide": _divide, "sqrt": _sqrt,
    "floor": _float_arith(np.floor), "ceil": _float_arith(np.ceil), "is_nan": _float(np.isnan),
}
COMPARE_KERNELS: dict[str, Kernel] = {
    "eq": _float(np.equal), "ne": _float(np.not_equal), "lt": _float(np.less),
    "le": _float(np.less_equal), "gt": _float(np.greater), "ge": _float(np.greater_equal),
}


def _float_to_int(x):
    """Round half away from zero (rexpr/catalogue/casts.py): x - trunc(x) is exact in binary64
    (Sterbenz), so the tie test is exact. NaN, ±inf and values outside int64 are errors."""
    n = len(x)
    rounded = np.trunc(x, out=empty(np.float64, n))
    fraction = np.subtract(x, rounded, out=empty(np.float64, n))
    away = (fraction >= 0.5) | (fraction <= -0.5)
    # Branch-free (np.where is slow on a mask that varies row by row): add +-1 or +-0.
    rounded += np.copysign(away, x, out=fraction)
    fits = (rounded >= -(2.0 ** 63)) & (rounded < 2.0 ** 63)  # false for NaN; 2^63 - 1 is no float64
    out = empty(np.int64, n)
    np.copyto(out, rounded, casting="unsafe")  # garbage on the error rows only
    return out, [(OUT_OF_RANGE, ~fits)]


def _converted(dtype: type) -> Kernel:
    def kernel(x):
        out = empty(dtype, len(x))
        np.copyto(out, x, casting="unsafe")
        return out, []
    return kernel


CAST_KERNELS: dict[tuple[Kind, Kind], Kernel] = {
    (Kind.FLOAT64, Kind.INT64): _float_to_int,
    (Kind.INT64, Kind.FLOAT64): _converted(np.float64),  # round to nearest even
    (Kind.BOOL, Kind.INT64): _converted(np.int64),
    (Kind.INT64, Kind.BOOL): _float(lambda x: x != 0),
}
NOT_KERNEL: Kernel = _float(np.logical_not)


# ------------------------------------------------------------------------------ special forms
def logic(args: Sequence[Vec], length: int, absorbing: bool) -> Vec:
    """``and`` (absorbing=False) or ``or`` (absorbing=True) in three-valued logic: the absorbing
    value in any operand decides the row and beats errors elsewhere (reference combine_and/or)."""
    decided: np.ndarray | None = None
    for a in args:
        hit = a.values if absorbing else ~a.values
        hit = hit if a.valid is None else hit & a.valid
        decided = hit if decided is None else decided | hit
    assert decided is not None
    all_valid = reduce(both, [a.valid for a in args], None)
    codes = first_error([a.codes for a in args])
    if codes is not None:
        codes = np.where(decided, 0, codes).astype(np.int8)
    valid = None if all_valid is None else decided | all_valid
    values = decided if absorbing else ~decided
    return Vec(values, valid, codes)


def is_null(arg: Vec, length: int) -> Vec:
    values = np.zeros(length, dtype=bool) if arg.valid is None else ~arg.valid
    return Vec(values, _valid_of(arg.codes), arg.codes)


def is_distinct(a: Vec, b: Vec, kind: Kind, length: int) -> Vec:
    codes = first_error([a.codes, b.codes])
    same = a.values == b.values
    if kind is Kind.FLOAT64:  # NaN is not distinct from NaN
        same = same | (np.isnan(a.values) & np.isnan(b.values))
    va, vb = ones(a.valid, length), ones(b.valid, length)
    same = np.where(va & vb, same, ~va & ~vb)
    return Vec(~same, _valid_of(codes), codes)


def nullif(a: Vec, b: Vec, length: int) -> Vec:
    codes = first_error([a.codes, b.codes])
    equal = ones(both(a.valid, b.valid), length) & (a.values == b.values)  # with =: NaN stays
    valid = ones(a.valid, length) & ~equal
    if codes is not None:
        valid &= codes == 0
    return Vec(a.values, valid, codes)


class Chooser:
    """Builds a result row by row from the branches of ``case`` or ``coalesce``."""

    def __init__(self, kind: Kind, length: int) -> None:
        self.values = np.zeros(length, DTYPES[kind])
        self.valid = np.zeros(length, dtype=bool)
        self.codes: np.ndarray | None = None
        self.pending = np.ones(length, dtype=bool)  # rows no branch has decided yet

    def fail(self, rows: np.ndarray, codes: np.ndarray) -> None:
        if rows.any():
            if self.codes is None:
                self.codes = np.zeros(len(rows), dtype=np.int8)
            self.codes[rows] = codes[rows]

    def take(self, rows: np.ndarray, vec: Vec) -> None:
        """Rows ``rows`` get ``vec``'s value, null or error."""
        self.values = np.where(rows, vec.values, self.values)  # much faster than copyto(where=)
        self.valid |= rows if vec.valid is None else rows & vec.valid
        if vec.codes is not None:
            self.fail(rows & (vec.codes != 0), vec.codes)

    def result(self) -> Vec:
        return Vec(self.values, self.valid, self.codes)


def runs_in_numpy(node: Typed) -> bool:
    """Whether this node itself runs in NumPy (its children are decided separately)."""
    if node.type.kind not in FAST_KINDS:
        return False
    if isinstance(node, (TLiteral, TField)):
        return True
    kinds = [a.type.kind for a in node.args]
    if not all(k in FAST_KINDS for k in kinds):
        return False
    fid, kind = node.function, node.type.kind
    if fid == "cast":
        return kinds[0] is kind or (kinds[0], kind) in CAST_KERNELS
    if fid in COMPARE_KERNELS or fid in ("is_distinct_from", "nullif", "in", "between"):
        return len(set(kinds)) == 1
    if fid in ("floor", "ceil") and kind is Kind.INT64:
        return True
    if fid in INT_KERNELS and kind is Kind.INT64:
        return True
    if fid in FLOAT_KERNELS and kinds[0] is Kind.FLOAT64:
        return True
    return fid in ("and", "or", "not", "is_null", "coalesce", "case")
