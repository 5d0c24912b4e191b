"""Edge-case corpora: TOML files of typed input columns and expressions with the values a
published rule fixes for them. The file format is described in ``corpora/README.md``.

Loading validates everything it can before a test runs: the header, the column types and
values, and every case. Each case is type-checked against the file's schema, because the
expression's result type is what tells ``1.0`` from ``"-0.0"`` in an expected value.
"""

from __future__ import annotations

import datetime as dt
import math
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

import pyarrow as pa

from rexpr.api import compile as compile_expression
from rexpr.catalogue.model import ErrorClass
from rexpr.errors import InputProblem, RexprError
from rexpr.schema import Schema, to_arrow_type
from rexpr.types import INT64_MAX, INT64_MIN, DataType, Kind
from rexpr.values import RowError

CORPUS_ERROR = "invalid_corpus"
DEFAULT_DIRECTORY = Path(__file__).resolve().parent.parent / "corpora"
PLACEHOLDER_COLUMN = "_row"  # gives a file without columns its one row; not in the schema

# TOML has nan and inf but some writers prefer words; "-0.0" keeps the sign visible.
_FLOAT_WORDS = {"NaN": math.nan, "Infinity": math.inf, "-Infinity": -math.inf, "-0.0": -0.0}
_ERROR_NAMES = {e.value: e for e in ErrorClass}
_FILE_KEYS = {"category", "description", "columns", "case"}
_COLUMN_KEYS = {"type", "values"}
_CASE_KEYS = {"expression", "reason", "source", "expected", "compile_error"}


@dataclass(frozen=True)
class Case:
    """One expression with what it must give on every row of its corpus.

    ``expected`` holds one value per row (``None`` for null, :class:`RowError` for an error),
    or is ``None`` when the case states no values. ``compile_error`` is the error code the
    expression must be rejected with; such a case has no ``result_type``.
    """

    number: int  # 1-based position in the file, for messages
    expression: str
    reason: str
    source: str | None
    result_type: DataType | None
    expected: tuple[object, ...] | None
    compile_error: str | None

    @property
    def label(self) -> str:
        return _case_label(self.number, self.expression)


@dataclass(frozen=True, eq=False)  # identity equality: comparing Arrow tables is not what callers mean
class Corpus:
    """One corpus file: the input table (one column per declared column) and its cases."""

    category: str
    description: str
    schema: Schema
    table: pa.Table
    cases: tuple[Case, ...]
    path: Path

    @property
    def name(self) -> str:
        return self.path.stem


def load_corpora(directory: str | Path | None = None) -> tuple[Corpus, ...]:
    """Every ``*.toml`` corpus in ``directory`` (default: the bundled ``corpora/``), by file name."""
    root = Path(directory) if directory is not None else DEFAULT_DIRECTORY
    if not root.is_dir():
        raise InputProblem(f"corpus directory {str(root)!r} does not exist", code=CORPUS_ERROR)
    corpora = tuple(load_corpus(path) for path in sorted(root.glob("*.toml")))
    seen: dict[str, Path] = {}
    for corpus in corpora:
        if corpus.category in seen:
            raise _problem(corpus.path, f"category {corpus.category!r} is also used by {seen[corpus.category].name}")
        seen[corpus.category] = corpus.path
    return corpora


def load_corpus(path: str | Path) -> Corpus:
    path = Path(path)
    try:
        with path.open("rb") as handle:
            data = tomllib.load(handle)
    except FileNotFoundError:
        raise _problem(path, "the file does not exist") from None
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise _problem(path, f"not readable TOML: {exc}") from None
    _only_keys(path, "the file", data, _FILE_KEYS)
    category = _one_line(path, "the header", data, "category")
    description = _text(path, "the header", data, "description")
    schema, table = _read_columns(path, data.get("columns", {}))
    raw_cases = data.get("case")
    if not isinstance(raw_cases, list) or not raw_cases:
        raise _problem(path, "there is no [[case]]; a corpus needs at least one")
    cases = []
    seen: dict[str, int] = {}
    for number, raw in enumerate(raw_cases, 1):
        case = _read_case(path, number, raw, schema, table.num_rows)
        if case.expression in seen:
            raise _problem(path, f"{case.label} repeats case {seen[case.expression]}")
        seen[case.expression] = number
        cases.append(case)
    return Corpus(category, description, schema, table, tuple(cases), path)


# ------------------------------------------------------------------------------ columns
def _read_columns(path: Path, raw: object) -> tuple[Schema, pa.Table]:
    if not isinstance(raw, dict):
        raise _problem(path, "[columns] must be a table of column name -> { type, values }")
    specs: dict[str, str] = {}
    for name, column in raw.items():
        where = f"column {name!r}"
        if not isinstance(column, dict):
            raise _problem(path, f"{where} must be a table with 'type' and 'values'")
        _only_keys(path, where, column, _COLUMN_KEYS)
        specs[name] = _text(path, where, column, "type")
    try:
        schema = Schema.from_mapping(specs)
    except RexprError as exc:
        raise _problem(path, f"[columns]: {exc.message}") from None
    if not schema.fields:
        return schema, pa.table({PLACEHOLDER_COLUMN: pa.array([0], pa.int64())})
    arrays = {}
    lengths = set()
    for name, data_type in schema.fields:
        where = f"column {name!r}"
        if data_type.kind is Kind.STRUCT:
            raise _problem(path, f"{where}: struct columns are not supported in corpora")
        values = raw[name].get("values")
        if not isinstance(values, list) or not values:
            raise _problem(path, f"{where}: 'values' must be a non-empty array")
        typed = [_value(path, f"{where}, value {i}", v, data_type, errors_allowed=False)
                 for i, v in enumerate(values, 1)]
        if not data_type.nullable and any(v is None for v in typed):
            raise _problem(path, f"{where} is {data_type.spelling} but holds a null")
        arrays[name] = pa.array(typed, type=to_arrow_type(data_type))
        lengths.add(len(typed))
    if len(lengths) != 1:
        counts = ", ".join(f"{n}: {len(a)}" for n, a in arrays.items())
        raise _problem(path, f"columns have different numbers of values ({counts})")
    return schema, pa.table(arrays, schema=schema.to_arrow())


# -------------------------------------------------------------------------------- cases
def _read_case(path: Path, number: int, raw: object, schema: Schema, rows: int) -> Case:
    where = f"case {number}"
    if not isinstance(raw, dict):
        raise _problem(path, f"{where} must be a table")
    _only_keys(path, where, raw, _CASE_KEYS)
    expression = _text(path, where, raw, "expression")
    where = _case_label(number, expression)
    reason = _one_line(path, where, raw, "reason")
    source = _one_line(path, where, raw, "source") if "source" in raw else None
    compile_error = _one_line(path, where, raw, "compile_error") if "compile_error" in raw else None
    has_expected = "expected" in raw
    if (has_expected or compile_error) and source is None:
        raise _problem(path, f"{where}: a case that states a result needs a 'source' naming the rule")
    if compile_error is not None:
        if has_expected:
            raise _problem(path, f"{where}: give 'expected' or 'compile_error', not both")
        return Case(number, expression, reason, source, None, None, compile_error)
    try:
        compiled = compile_expression(expression, schema)
    except RexprError as exc:
        first_line = str(exc).splitlines()[0]
        raise _problem(path, f"{where} does not compile: {first_line}") from None
    expected = None
    if has_expected:
        expected = _expected(path, where, raw["expected"], compiled.type, rows, bool(compiled.fields))
    return Case(number, expression, reason, source, compiled.type, expected, None)


def _expected(path: Path, where: str, raw: object, result: DataType, rows: int,
              reads_fields: bool) -> tuple[object, ...]:
    if isinstance(raw, list):
        if len(raw) != rows:
            raise _problem(path, f"{where}: 'expected' has {len(raw)} values for {rows} rows")
        return tuple(_value(path, f"{where}, expected row {i}", v, result, errors_allowed=True)
                     for i, v in enumerate(raw, 1))
    if reads_fields:
        raise _problem(path, f"{where}: the expression reads columns, so 'expected' needs one value "
                             f"per row ({rows})")
    single = _value(path, f"{where}, expected", raw, result, errors_allowed=True)
    return (single,) * rows


# ------------------------------------------------------------------------------- values
def _value(path: Path, where: str, raw: object, data_type: DataType, *, errors_allowed: bool) -> object:
    """A TOML value read as ``data_type``; a one-key inline table marks a null or an error."""
    if isinstance(raw, dict):
        return _marker(path, where, raw, errors_allowed)
    kind = data_type.kind
    if kind is Kind.BOOL and isinstance(raw, bool):
        return raw
    if kind is Kind.INT64 and isinstance(raw, int) and not isinstance(raw, bool):
        if INT64_MIN <= raw <= INT64_MAX:  # tomllib reads any size of integer
            return raw
        raise _problem(path, f"{where}: {raw} does not fit in int64")
    if kind is Kind.FLOAT64:
        if isinstance(raw, float):
            return raw
        if isinstance(raw, str) and raw in _FLOAT_WORDS:
            return _FLOAT_WORDS[raw]
        if isinstance(raw, int) and not isinstance(raw, bool):
            raise _problem(path, f"{where}: write {raw}.0 for a float64, not the integer {raw}")
    if kind is Kind.STRING and isinstance(raw, str):
        return raw
    if kind is Kind.DATE and isinstance(raw, dt.date) and not isinstance(raw, dt.datetime):
        return raw
    if kind is Kind.TIMESTAMP and isinstance(raw, dt.datetime):
        if raw.tzinfo is not None:
            raise _problem(path, f"{where}: timestamps carry no time zone; drop the offset from {raw}")
        return raw
    raise _problem(path, f"{where}: {raw!r} is not a {data_type.name} value")


def _marker(path: Path, where: str, raw: Mapping[str, Any], errors_allowed: bool) -> object:
    if raw == {"null": True}:
        return None
    if errors_allowed and set(raw) == {"error"}:
        name = raw["error"]
        if name in _ERROR_NAMES:
            return RowError(_ERROR_NAMES[name])
        raise _problem(path, f"{where}: unknown error class {name!r}; known: {', '.join(_ERROR_NAMES)}")
    allowed = "{ null = true } or { error = \"...\" }" if errors_allowed else "{ null = true }"
    raise _problem(path, f"{where}: an inline table here must be {allowed}, not {raw!r}")


# ------------------------------------------------------------------------------ helpers
def _case_label(number: int, expression: str) -> str:
    text = expression if len(expression) <= 60 else expression[:57] + "..."
    return f"case {number} ({text!r})"


def _only_keys(path: Path, where: str, data: Mapping[str, Any], allowed: set[str]) -> None:
    unknown = sorted(set(data) - allowed)
    if unknown:
        raise _problem(path, f"{where}: unknown key{'s' if len(unknown) > 1 else ''} "
                             f"{', '.join(map(repr, unknown))}; allowed: {', '.join(sorted(allowed))}")


def _text(path: Path, where: str, data: Mapping[str, Any], key: str) -> str:
    value = data.get(key)
    if not isinstance(value, str) or not value.strip():
        raise _problem(path, f"{where}: {key!r} must be a non-empty string")
    return value


def _one_line(path: Path, where: str, data: Mapping[str, Any], key: str) -> str:
    value = _text(path, where, data, key)
    if "\n" in value:
        raise _problem(path, f"{where}: {key!r} must be one line")
    return value


def _problem(path: Path, what: str) -> InputProblem:
    return InputProblem(f"corpus {str(path)!r}: {what}", code=CORPUS_ERROR)
