"""The Python API: compile expression text against a schema, then evaluate, filter or lower."""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache
from typing import Any, Mapping

import pyarrow as pa
import pyarrow.compute as pc

from rexpr.backends import get_backend
from rexpr.checker import check
from rexpr.errors import InputProblem
from rexpr.evaluation import Evaluation
from rexpr.language.parser import parse
from rexpr.printing import to_text
from rexpr.schema import Schema
from rexpr.typed import Typed, fields_read, functions_used
from rexpr.types import DataType, Kind

SchemaLike = Schema | pa.Schema | Mapping[str, Any] | str


@dataclass(frozen=True, eq=False)
class CompiledExpression:
    """A type-checked expression, ready to run on any backend."""

    text: str
    schema: Schema
    tree: Typed
    _prepared: dict = field(default_factory=dict, repr=False)

    @property
    def type(self) -> DataType:
        return self.tree.type

    @property
    def nullable(self) -> bool:
        return self.tree.type.nullable

    @property
    def fields(self) -> tuple[str, ...]:
        """Dotted field paths the expression reads (the projection a source must supply)."""
        return tuple(".".join(p) for p in fields_read(self.tree))

    @property
    def field_paths(self) -> tuple[tuple[str, ...], ...]:
        return fields_read(self.tree)

    @property
    def functions(self) -> tuple[str, ...]:
        return functions_used(self.tree)

    @property
    def is_predicate(self) -> bool:
        return self.tree.type.kind is Kind.BOOL

    def canonical_text(self) -> str:
        """The expression printed back from the typed tree (implicit casts made explicit)."""
        return to_text(self.tree)

    def to_sql(self, engine: str, lowering: str = "faithful") -> str:
        """The expression as one SQL expression for ``engine`` (duckdb, sqlite, postgres, mariadb).
        The faithful lowering raises :class:`~rexpr.errors.NotPushable` rather than emit SQL that
        would compute something else."""
        from rexpr.sql.lowering import to_sql

        return to_sql(self.tree, engine, lowering)  # type: ignore[arg-type]

    def evaluate(self, table: pa.Table | pa.RecordBatch | Mapping[str, Any], backend: str = "auto") -> Evaluation:
        """Values for every row, with per-row errors (see :class:`Evaluation`).

        ``table`` is an Arrow table or record batch, or NumPy arrays by field name (the forms
        :mod:`rexpr.backends.numpy_inputs` describes); the numpy backend reads those in place,
        the other backends get them as an Arrow table."""
        run = self._prepared.get(backend)
        if run is None:
            run = self._prepared[backend] = get_backend(backend)(self.tree)
        if isinstance(table, Mapping):
            if backend == "numpy":
                return run(table)  # type: ignore[arg-type]
            from rexpr.backends import numpy_inputs

            table = numpy_inputs.to_arrow_table(table, numpy_inputs.fields_of(self.tree))
        return run(_as_table(table))

    def mask(self, table: pa.Table | pa.RecordBatch | Mapping[str, Any], backend: str = "auto") -> pa.BooleanArray:
        """True where the predicate is true; null and false rows are both dropped by a filter.
        Raises :class:`~rexpr.errors.EvaluationFailed` if any row errors: an error beats a guess."""
        if not self.is_predicate:
            raise InputProblem(f"a filter needs a bool expression; this one is {self.type.name}",
                               code="not_a_predicate")
        result = self.evaluate(table, backend)
        result.raise_for_errors()
        return pc.fill_null(result.values, False)

    def filter(self, table: pa.Table | pa.RecordBatch, backend: str = "auto") -> pa.Table:
        """The rows where the predicate is true."""
        if isinstance(table, Mapping):
            raise InputProblem("filter returns an Arrow table, so it needs one; for NumPy columns take "
                               "numpy.asarray(expression.mask(columns)) and index the arrays with it")
        table = _as_table(table)
        return table.filter(self.mask(table, backend))


def _as_table(table: pa.Table | pa.RecordBatch) -> pa.Table:
    if isinstance(table, pa.RecordBatch):
        return pa.Table.from_batches([table])
    if isinstance(table, pa.Table):
        return table
    raise InputProblem(f"expected a pyarrow Table or RecordBatch, or a mapping of field name to NumPy array, "
                       f"got {type(table).__name__}")


@lru_cache(maxsize=4096)
def _compile_cached(text: str, schema: Schema) -> CompiledExpression:
    tree = check(parse(text), schema, text)
    return CompiledExpression(text, schema, tree)


def compile(text: str, schema: SchemaLike) -> CompiledExpression:  # noqa: A001 - the natural name
    """Parse and type-check ``text`` against ``schema`` (cached on text and schema)."""
    return _compile_cached(text, Schema.of(schema))
