"""The result every evaluator returns: one Arrow array plus per-row errors."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from rexpr.catalogue.model import ErrorClass
from rexpr.errors import EvaluationFailed
from rexpr.schema import to_arrow_type
from rexpr.types import DataType
from rexpr.values import RowError

# Compact per-row error codes for vectorised backends: 0 means no error.
ERROR_CODES: tuple[ErrorClass | None, ...] = (None,) + tuple(ErrorClass)
CODE_OF: dict[ErrorClass, int] = {e: i for i, e in enumerate(ERROR_CODES) if e is not None}


@dataclass(frozen=True)
class Evaluation:
    """Values of an expression over a table. Rows that raised an error are null in ``values``
    and listed in ``errors`` (row index -> error), so both shapes line up row for row."""

    type: DataType
    values: pa.Array
    errors: dict[int, RowError]

    def __len__(self) -> int:
        return len(self.values)

    def to_pylist(self) -> list[object]:
        """Python values with :class:`RowError` in place of failed rows."""
        out = self.values.to_pylist()
        for row, error in self.errors.items():
            out[row] = error
        return out

    def raise_for_errors(self) -> None:
        if self.errors:
            row = min(self.errors)
            error = self.errors[row]
            raise EvaluationFailed(f"row {row}: {error.error.value}" + (f": {error.detail}" if error.detail else ""),
                                   row=row, error_class=error.error.value)

    @classmethod
    def from_pylist(cls, data_type: DataType, values: Sequence[object]) -> "Evaluation":
        errors = {i: v for i, v in enumerate(values) if isinstance(v, RowError)}
        clean = [None if isinstance(v, RowError) else v for v in values]
        return cls(data_type, pa.array(clean, type=to_arrow_type(data_type)), errors)

    @classmethod
    def from_codes(cls, data_type: DataType, values: pa.Array, codes: np.ndarray | None) -> "Evaluation":
        """From an int8 array of error codes (None when no row failed); failed rows become null."""
        if codes is None or not codes.any():
            return cls(data_type, values, {})
        rows = np.flatnonzero(codes)
        shared = {code: RowError(ERROR_CODES[code]) for code in np.unique(codes[rows]).tolist()}  # type: ignore[arg-type]
        errors = dict(zip(rows.tolist(), (shared[c] for c in codes[rows].tolist())))
        mask = pa.array(codes != 0)
        cleaned = pc.if_else(mask, pa.scalar(None, type=values.type), values)
        return cls(data_type, cleaned, errors)
