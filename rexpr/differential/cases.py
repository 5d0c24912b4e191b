"""What the differential runner runs: batches of expressions over one table."""

from __future__ import annotations

from dataclasses import dataclass, field

import pyarrow as pa

from rexpr.schema import Schema
from rexpr.typed import Typed


@dataclass(frozen=True)
class DiffCase:
    case_id: str          # stable: "<category>/<n>" for corpora, "gen/<seed>/<n>" for generated
    category: str
    text: str
    tree: Typed = field(repr=False)
    reason: str = ""
    expected: tuple[object, ...] | None = field(default=None, repr=False)  # published answer per row
    source: str = ""      # where the expected answer comes from


@dataclass(frozen=True)
class Batch:
    """Many cases over the same rows: one statement per engine and lowering."""

    batch_id: str
    category: str
    schema: Schema
    table: pa.Table = field(repr=False)
    cases: tuple[DiffCase, ...]
