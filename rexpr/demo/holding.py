"""What each demo source stores of the generated rows.

Some engines cannot hold every float64 value (docs/engines.md): SQLite's REAL has no NaN and
stores -0.0 as 0.0; MariaDB's DOUBLE has no NaN or ±inf and stores -0.0 as 0.0. The demo
compares each source's answer with local evaluation of the rows *as that source stores them*,
and says which values were stored altered, instead of hiding it.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from rexpr.engines.layout import float_rows


@dataclass(frozen=True)
class FloatLimits:
    """The float64 values a source cannot hold; NaN and ±inf become NULL, -0.0 becomes 0.0."""

    why: str
    nan: bool = False
    infinite: bool = False
    negative_zero: bool = False


LIMITS: dict[str, FloatLimits] = {
    "sqlite": FloatLimits("SQLite REAL has no NaN", nan=True, negative_zero=True),
    "mariadb": FloatLimits("MariaDB DOUBLE has no NaN or infinity", nan=True, infinite=True, negative_zero=True),
}
_STORED_AS = {"NaN": "NULL", "infinity": "NULL", "-0.0": "0.0"}


def as_held(table: pa.Table, source: str) -> tuple[pa.Table, tuple[str, ...]]:
    """``table`` as ``source`` stores it, and one note per altered column, e.g.
    ``"draft_m: 503 NaN stored as NULL (SQLite REAL has no NaN)"``."""
    limits = LIMITS.get(source)
    if limits is None:
        return table, ()
    notes: list[str] = []
    for index, field in enumerate(table.schema):
        if not pa.types.is_float64(field.type):
            continue
        values = table.column(index).combine_chunks()
        found = float_rows(values, nan=limits.nan, infinite=limits.infinite, negative_zero=limits.negative_zero)
        if not found:
            continue
        to_null = np.zeros(len(values), dtype=bool)
        to_zero = np.zeros(len(values), dtype=bool)
        for row, label in found.items():
            (to_zero if _STORED_AS[label] == "0.0" else to_null)[row] = True
        stored = pc.if_else(pa.array(to_zero), pa.scalar(0.0, pa.float64()), values)
        stored = pc.if_else(pa.array(to_null), pa.scalar(None, pa.float64()), stored)
        table = table.set_column(index, field, stored)
        counts = Counter(found.values())
        altered = ", ".join(f"{n:,} {label} stored as {_STORED_AS[label]}" for label, n in sorted(counts.items()))
        notes.append(f"{field.name}: {altered} ({limits.why})")
    return table, tuple(notes)
