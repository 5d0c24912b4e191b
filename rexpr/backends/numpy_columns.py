"""The NumPy backend's column: values, validity and per-row error codes, plus the two ways a
kernel reports errors (masks, or a Python function per row)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Iterable

import numpy as np

from rexpr.catalogue.model import ErrorClass
from rexpr.evaluation import CODE_OF
from rexpr.types import Kind

TEXT = np.dtypes.StringDType()

# One NumPy dtype per logical kind; a bare null is carried as an all-invalid bool column.
DTYPES: dict[Kind, np.dtype] = {
    Kind.BOOL: np.dtype(np.bool_), Kind.INT64: np.dtype(np.int64), Kind.FLOAT64: np.dtype(np.float64),
    Kind.STRING: TEXT, Kind.DATE: np.dtype("datetime64[D]"), Kind.TIMESTAMP: np.dtype("datetime64[us]"),
    Kind.NULL: np.dtype(np.bool_),
}

_BOOL = np.dtype(np.bool_)


def constant(value: object, dtype: np.dtype, rows: int) -> np.ndarray:
    """``value`` on every row as a read-only broadcast view (no per-row memory); kernels only
    read their inputs, so a literal never needs a full array."""
    return np.broadcast_to(np.asarray(value, dtype), (rows,))


Codes = np.ndarray | None  # int8 error codes (0: no error), None when no row failed
Out = tuple[np.ndarray, Codes]  # what a kernel returns: values and its own errors


@dataclass(frozen=True)
class Col:
    """An evaluated node. A row is an error where ``codes`` is non-zero, else null where
    ``valid`` is false, else ``values``. Values of null and error rows are arbitrary but harmless.
    ``constant`` marks a broadcast literal, so kernels can pick a fast path once.
    Arrays are shared between columns and may be read-only views: nothing writes into them."""

    values: np.ndarray
    valid: np.ndarray | None = None
    codes: Codes = None
    constant: bool = False

    def __len__(self) -> int:
        return len(self.values)

    def validity(self) -> np.ndarray:
        return constant(True, _BOOL, len(self)) if self.valid is None else self.valid

    def failed(self) -> np.ndarray:
        return constant(False, _BOOL, len(self)) if self.codes is None else self.codes != 0

    def usable(self) -> np.ndarray:
        """Rows holding a value: not null and not an error."""
        return self.validity() & ~self.failed()

    def slice(self, rows: slice) -> "Col":
        """Rows ``rows.start`` to ``rows.stop`` as views (no copy)."""
        return Col(self.values[rows], None if self.valid is None else self.valid[rows],
                   None if self.codes is None else self.codes[rows], self.constant)

    def take(self, rows: np.ndarray) -> "Col":
        return Col(self.values[rows], None if self.valid is None else self.valid[rows],
                   None if self.codes is None else self.codes[rows], self.constant)


@dataclass(frozen=True)
class Ctx:
    """What a kernel knows besides its arguments."""

    live: np.ndarray  # rows where every argument is a value; only these may raise errors
    exact_text: bool  # False when some string may hold U+0000, which NumPy string kernels mishandle
    constant: tuple[bool, ...] = ()  # per argument: a broadcast literal (one value for every row)

    def is_constant(self, arg: int) -> bool:
        return arg < len(self.constant) and self.constant[arg] and len(self.live) > 0


def first_error(cols: Iterable[Col]) -> Codes:
    """The leftmost argument's error, row by row (errors propagate leftmost first)."""
    codes: Codes = None
    for col in cols:
        if col.codes is None:
            continue
        codes = col.codes if codes is None else np.where(codes != 0, codes, col.codes)
    return codes


def all_valid(cols: Iterable[Col]) -> np.ndarray | None:
    valid: np.ndarray | None = None
    for col in cols:
        if col.valid is not None:
            valid = col.valid if valid is None else valid & col.valid
    return valid


def faults(live: np.ndarray, *rules: tuple[np.ndarray, ErrorClass]) -> Codes:
    """Error codes from (condition, error) pairs; the first matching pair wins, dead rows never fail."""
    codes: Codes = None
    for condition, error in reversed(rules):
        hit = condition & live
        if hit.any():
            if codes is None:
                codes = np.zeros(len(live), np.int8)
            codes[hit] = CODE_OF[error]
    return codes


def merge_codes(first: Codes, second: Codes) -> Codes:
    """``first`` where it has an error, else ``second``."""
    if first is None:
        return second
    if second is None:
        return first
    return np.where(first != 0, first, second)


def rowwise(fn: Callable[..., object], cx: Ctx, dtype: np.dtype, *arrays: np.ndarray,
            rows: np.ndarray | None = None) -> Out:
    """Apply a Python function to the live rows (or to ``rows`` among them) where NumPy has no
    exact kernel. ``fn`` returns a value or an :class:`ErrorClass`."""
    selected = cx.live if rows is None else cx.live & rows
    index = np.flatnonzero(selected)
    values = np.zeros(len(cx.live), dtype) if dtype != TEXT else np.full(len(cx.live), "", TEXT)
    if index.size == 0:
        return values, None
    results = [fn(*args) for args in zip(*(a[index].tolist() for a in arrays))]
    failed = [i for i, r in enumerate(results) if isinstance(r, ErrorClass)]
    codes: Codes = None
    if failed:
        codes = np.zeros(len(cx.live), np.int8)
        codes[index[failed]] = [CODE_OF[results[i]] for i in failed]  # type: ignore[index]
        filler = values[0] if len(values) else None
        results = [filler if isinstance(r, ErrorClass) else r for r in results]
    values[index] = np.asarray(results, dtype=dtype) if dtype != TEXT else np.array(results, TEXT)
    return values, codes

