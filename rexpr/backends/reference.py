"""The reference evaluator as a backend (slow, per row, the oracle)."""

from __future__ import annotations

import pyarrow as pa

from rexpr.evaluation import Evaluation
from rexpr.reference.tables import evaluate_table
from rexpr.typed import Typed


def prepare(node: Typed):
    def run(table: pa.Table | pa.RecordBatch) -> Evaluation:
        return evaluate_table(node, table)

    return run
