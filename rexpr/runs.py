"""Evaluate one compiled expression on a named engine and compare with the reference.

Local backends (reference, arrow, numpy) run in-process; SQL engines go through the SQL
lowering and the engine runners. Each run ends in one of five statuses; ``limited`` means every
compared row agrees, and some rows could not be computed because the engine cannot represent a
value the reference reaches there (rule 8 of :mod:`rexpr.compare`), listed in ``limited_rows``."""

from __future__ import annotations

import difflib
from dataclasses import dataclass, field
from typing import Literal

import pyarrow as pa

from rexpr.api import CompiledExpression
from rexpr.backends import LOCAL_BACKENDS
from rexpr.compare import row_differences
from rexpr.errors import EngineUnavailable, InputProblem, NotPushable, RexprError
from rexpr.values import EngineLimit

SQL_ENGINES = ("duckdb", "sqlite", "postgres", "mariadb")
ALL_ENGINES = LOCAL_BACKENDS + SQL_ENGINES
Status = Literal["agree", "limited", "disagree", "unavailable", "not_pushable"]


@dataclass(frozen=True)
class Disagreement:
    row: int
    expected: object
    observed: object


@dataclass(frozen=True)
class LimitedRow:
    row: int
    reason: str        # the limit's reason: nan, non_finite, nul
    expected: object   # the reference's value, which the engine could not give


@dataclass(frozen=True)
class EngineRun:
    engine: str
    status: Status
    rows: int = 0
    disagreements: tuple[Disagreement, ...] = ()
    reason: str = ""
    sql: str | None = None
    values: tuple[object, ...] = field(default=(), repr=False)
    limited_rows: tuple[LimitedRow, ...] = ()


def parse_engine_list(text: str | None) -> tuple[str, ...]:
    if not text:
        return ALL_ENGINES
    names = tuple(dict.fromkeys(part.strip() for part in text.split(",") if part.strip()))
    for name in names:
        if name not in ALL_ENGINES:
            close = difflib.get_close_matches(name, ALL_ENGINES, n=1)
            hint = f"; did you mean {close[0]!r}?" if close else f"; known engines: {', '.join(ALL_ENGINES)}"
            raise InputProblem(f"unknown engine {name!r}{hint}", code="unknown_engine")
    return names


def compare(expected: list[object], observed: list[object], limit: int = 1000) -> tuple[Disagreement, ...]:
    return tuple(Disagreement(*diff) for diff in row_differences(expected, observed, limit))


def _evaluate_sql(engine: str, compiled: CompiledExpression, table: pa.Table,
                  lowering: str) -> tuple[list[object], dict[int, str], str]:
    try:
        from rexpr.sql.lowering import lower, to_sql
        from rexpr.engines import get_engine
        from rexpr.engines.base import SqlItem
    except ImportError as exc:  # pragma: no cover - only while a part is not installed
        raise EngineUnavailable(f"SQL support is not available: {exc}") from None
    try:
        expression = lower(compiled.tree, engine, lowering)  # type: ignore[arg-type]
        sql = to_sql(compiled.tree, engine, lowering)  # type: ignore[arg-type]
        runner = get_engine(engine)
    except ImportError as exc:
        raise EngineUnavailable(f"{engine} support is not installed: {exc}") from None
    except InputProblem as exc:
        if exc.code == "unknown_engine":
            raise EngineUnavailable(exc.message) from None
        raise
    status = runner.availability()
    if not status.available:
        raise EngineUnavailable(status.reason)
    try:
        [result] = runner.evaluate(table, [SqlItem("value", expression, compiled.type)])
    finally:
        runner.close()
    # to_pylist keeps type mismatches visible; input losses are rows the engine stored altered.
    return result.to_pylist(), result.input_losses, sql


def run_on(engine: str, compiled: CompiledExpression, table: pa.Table, expected: list[object],
           lowering: str = "faithful") -> EngineRun:
    """Evaluate on one engine; an engine that cannot run says so instead of failing the others."""
    sql = None
    losses: dict[int, str] = {}
    try:
        if engine in LOCAL_BACKENDS:
            observed = compiled.evaluate(table, backend=engine).to_pylist()
        else:
            observed, losses, sql = _evaluate_sql(engine, compiled, table, lowering)
    except NotPushable as exc:
        return EngineRun(engine, "not_pushable", reason=exc.message)
    except EngineUnavailable as exc:
        return EngineRun(engine, "unavailable", reason=exc.message, sql=sql)
    except RexprError as exc:
        if exc.code in ("engine_unavailable",):
            return EngineRun(engine, "unavailable", reason=exc.message, sql=sql)
        raise
    notes = [f"{len(losses)} row(s) not compared: {engine} cannot store their input exactly "
             f"(e.g. {next(iter(losses.values()))})"] if losses else []
    limits = {r: v for r, v in enumerate(observed) if isinstance(v, EngineLimit) and r not in losses}
    covered: dict[int, EngineLimit] = {}
    if limits:
        from rexpr.limit_rows import describe, split_limits

        covered, _ = split_limits(compiled.tree, table, limits)  # the others stay disagreements
        if covered:
            notes.append(describe(engine, covered))
    problems = tuple(d for d in compare(expected, observed) if d.row not in losses and d.row not in covered)
    limited = tuple(LimitedRow(r, covered[r].reason, expected[r]) for r in sorted(covered))
    status: Status = "disagree" if problems else "limited" if limited else "agree"
    return EngineRun(engine, status, len(observed), problems, reason="; ".join(notes), sql=sql,
                     values=tuple(observed), limited_rows=limited)
