"""Arrow tables to the column-wise Python values the reference evaluator reads."""

from __future__ import annotations

import pyarrow as pa

from rexpr.evaluation import Evaluation
from rexpr.reference.evaluator import evaluate_columns
from rexpr.typed import Typed, fields_read


def field_values(table: pa.Table | pa.RecordBatch, path: tuple[str, ...]) -> list[object]:
    values = table.column(path[0]).to_pylist()
    for part in path[1:]:
        values = [None if v is None else v.get(part) for v in values]
    return values


def evaluate_table(node: Typed, table: pa.Table | pa.RecordBatch) -> Evaluation:
    columns = {path: field_values(table, path) for path in fields_read(node)}
    return Evaluation.from_pylist(node.type, evaluate_columns(node, columns, table.num_rows))
