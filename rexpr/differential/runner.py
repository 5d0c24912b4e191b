"""Evaluate batches on every engine and lowering, and compare each with the reference.

One batch is one table plus many expressions; each SQL engine gets ONE statement per batch
and lowering (the runners bisect on failure to recover per-row errors).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Iterable, Literal, Sequence

from rexpr.backends import LOCAL_BACKENDS, get_backend
from rexpr.compare import row_differences
from rexpr.differential.cases import Batch, DiffCase
from rexpr.errors import NotPushable, RexprError
from rexpr.typed import Typed

Outcome = Literal["agree", "disagree", "not_pushable", "unavailable", "failed"]
SQL_ENGINES = ("duckdb", "sqlite", "postgres", "mariadb")


@dataclass(frozen=True)
class RowDiff:
    row: int
    expected: object
    observed: object


@dataclass(frozen=True)
class CaseResult:
    case_id: str
    category: str
    text: str
    engine: str
    lowering: str            # "faithful" / "native", or "local" for in-process backends
    outcome: Outcome
    reason: str = ""
    diffs: tuple[RowDiff, ...] = field(default=(), repr=False)
    sql: str | None = None


@dataclass
class EngineState:
    """Per-run state of one engine: its runner, or why it cannot be used."""

    name: str
    runner: object | None = None
    unavailable: str = ""
    info: dict = field(default_factory=dict)


def open_engines(names: Sequence[str]) -> dict[str, EngineState]:
    states: dict[str, EngineState] = {}
    for name in names:
        state = EngineState(name)
        if name in SQL_ENGINES:
            try:
                from rexpr.engines import get_engine

                runner = get_engine(name)
                status = runner.availability()
                if status.available:
                    state.runner = runner
                    state.info = dict(runner.session_info())
                else:
                    state.unavailable = status.reason
            except RexprError as exc:
                state.unavailable = exc.message
        elif name in LOCAL_BACKENDS:
            state.info = {"version": "in-process"}
        else:
            state.unavailable = f"unknown engine {name!r}"
        states[name] = state
    return states


def close_engines(states: dict[str, EngineState]) -> None:
    for state in states.values():
        if state.runner is not None:
            try:
                state.runner.close()  # type: ignore[attr-defined]
            except Exception:  # noqa: BLE001 - closing must not hide the results
                pass


def _compare_rows(expected: Sequence[object], observed: Sequence[object], limit: int = 20) -> tuple[RowDiff, ...]:
    return tuple(RowDiff(*diff) for diff in row_differences(list(expected), list(observed), limit))


def reference_values(batch: Batch) -> dict[str, list[object]]:
    run = get_backend("reference")
    return {case.case_id: run(case.tree)(batch.table).to_pylist() for case in batch.cases}


def run_local(batch: Batch, engine: str, expected: dict[str, list[object]]) -> list[CaseResult]:
    prepare = get_backend(engine)
    results = []
    for case in batch.cases:
        try:
            observed = prepare(case.tree)(batch.table).to_pylist()
        except RexprError as exc:
            results.append(CaseResult(case.case_id, case.category, case.text, engine, "local", "failed", exc.message))
            continue
        diffs = _compare_rows(expected[case.case_id], observed)
        results.append(CaseResult(case.case_id, case.category, case.text, engine, "local",
                                  "disagree" if diffs else "agree", diffs=diffs))
    return results


def run_sql(batch: Batch, state: EngineState, lowering: str, expected: dict[str, list[object]]) -> list[CaseResult]:
    from rexpr.engines.base import SqlItem
    from rexpr.sql.lowering import lower, to_sql

    engine = state.name
    results: list[CaseResult] = []
    items, lowered_cases, sqls = [], [], {}
    for index, case in enumerate(batch.cases):
        try:
            expression = lower(case.tree, engine, lowering)  # type: ignore[arg-type]
            sqls[case.case_id] = to_sql(case.tree, engine, lowering)  # type: ignore[arg-type]
        except NotPushable as exc:
            results.append(CaseResult(case.case_id, case.category, case.text, engine, lowering, "not_pushable",
                                      exc.message))
            continue
        items.append(SqlItem(f"c{index}", expression, case.tree.type))
        lowered_cases.append(case)
    if not items:
        return results
    try:
        evaluations = state.runner.evaluate(batch.table, items)  # type: ignore[attr-defined]
    except RexprError as exc:
        reason = f"engine failed: {exc.message}"
        return results + [CaseResult(c.case_id, c.category, c.text, engine, lowering, "failed", reason,
                                     sql=sqls[c.case_id]) for c in lowered_cases]
    for case, result in zip(lowered_cases, evaluations):
        observed = result.evaluation.to_pylist()
        for row, raw in getattr(result, "type_mismatches", {}).items():
            observed[row] = _Mismatch(raw)
        diffs = _compare_rows(expected[case.case_id], observed)
        results.append(CaseResult(case.case_id, case.category, case.text, engine, lowering,
                                  "disagree" if diffs else "agree", diffs=diffs, sql=sqls[case.case_id]))
    return results


@dataclass(frozen=True)
class _Mismatch:
    """An engine value that has no lossless form in the expected type; never equal to anything."""

    raw: object

    def __str__(self) -> str:
        return f"type mismatch: {self.raw!r}"


def run_batch(batch: Batch, engines: dict[str, EngineState], lowerings: Iterable[str]) -> list[CaseResult]:
    expected = reference_values(batch)
    results: list[CaseResult] = []
    lowerings = tuple(lowerings)
    for name, state in engines.items():
        if name == "reference":
            continue
        if state.unavailable:
            for lowering in (lowerings if name in SQL_ENGINES else ("local",)):
                results += [CaseResult(c.case_id, c.category, c.text, name, lowering, "unavailable",
                                       state.unavailable) for c in batch.cases]
            continue
        if name in SQL_ENGINES:
            for lowering in lowerings:
                results += run_sql(batch, state, lowering, expected)
        else:
            results += run_local(batch, name, expected)
    return results


def culprit_functions(tree: Typed) -> tuple[str, ...]:
    from rexpr.typed import functions_used

    return functions_used(tree)
