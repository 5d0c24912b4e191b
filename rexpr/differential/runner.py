"""Evaluate batches on every engine and lowering, and compare each with the reference.

One batch is one table plus many expressions; each SQL engine gets ONE statement per batch
and lowering for every expression the reference says raises on no row, and one statement for
each expression that raises (the engine runners bisect a failed statement to recover per-row
errors, and bisecting one expression's rows is cheaper than splitting many expressions first).
The reference itself is checked against the published answers the corpora state.

Every (case, engine, lowering) ends in one outcome; nothing is dropped silently: a backend that
cannot be loaded is ``unavailable``, one that crashes or loses its connection is ``failed``,
and a lowering that refuses a function is ``not_pushable``. Rows an engine cannot compute because
it cannot represent a value they reach (engine limits) are set aside only where the reference
reaches such a value too (rule 8 of :mod:`rexpr.compare`), and counted in the case's reason.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Iterable, Literal, Sequence

import pyarrow as pa

from rexpr.backends import LOCAL_BACKENDS, get_backend
from rexpr.compare import result_type_problem, row_differences
from rexpr.differential.cases import Batch, DiffCase
from rexpr.errors import NotPushable, RexprError
from rexpr.typed import functions_used
from rexpr.values import EngineLimit, RowError

Outcome = Literal["agree", "disagree", "not_pushable", "unavailable", "failed"]
SQL_ENGINES = ("duckdb", "sqlite", "postgres", "mariadb")
LOWERINGS = ("faithful", "native")
LOCAL = "local"          # the lowering name of in-process backends
DIFF_ROWS = 20           # rows kept per disagreeing case; the first one is shrunk


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
    functions: tuple[str, ...] = ()
    reason: str = ""
    diffs: tuple[RowDiff, ...] = field(default=(), repr=False)
    sql: str | None = None

    @property
    def key(self) -> str:
        return f"{self.engine}|{self.lowering}|{self.case_id}"


@dataclass
class EngineState:
    """Per-shard state of one engine: its runner, or why it cannot be used. ``broken`` is set when
    it fails mid-shard, so its remaining work in the shard is reported failed, not retried."""

    name: str
    runner: object | None = None
    unavailable: str = ""
    broken: str = ""
    info: dict = field(default_factory=dict)


def lowerings_of(engine: str, lowerings: Sequence[str]) -> tuple[str, ...]:
    return tuple(lowerings) if engine in SQL_ENGINES else (LOCAL,)


def _local_info(name: str) -> dict:
    import numpy
    from rexpr import __version__

    versions = {"reference": f"rexpr {__version__}", "arrow": f"pyarrow {pa.__version__}",
                "numpy": f"numpy {numpy.__version__}"}
    return {"version": versions.get(name, "in-process"), "settings": {}}


def open_engines(names: Sequence[str]) -> dict[str, EngineState]:
    states: dict[str, EngineState] = {}
    for name in names:
        state = EngineState(name)
        if name in SQL_ENGINES:
            _open_sql(state)
        elif name in LOCAL_BACKENDS:
            try:
                get_backend(name)
                state.info = _local_info(name)
            except RexprError as exc:
                state.unavailable = exc.message
        else:
            state.unavailable = f"unknown engine {name!r}"
        states[name] = state
    return states


def _open_sql(state: EngineState) -> None:
    try:
        from rexpr.engines import get_engine
        from rexpr.sql.lowering import dialect_of
    except ImportError as exc:  # the lowering and runners are separate parts of a checkout
        state.unavailable = f"SQL support is not installed ({exc})"
        return
    try:
        dialect_of(state.name)
    except RexprError as exc:
        state.unavailable = exc.message
        return
    try:
        runner = get_engine(state.name)
        status = runner.availability()
        if not status.available:
            state.unavailable = status.reason
            return
        state.runner = runner
        info = runner.session_info()
        state.info = {"version": f"{state.name} {info.version}", "settings": dict(info.settings),
                      "notes": list(info.notes)}
    except Exception as exc:  # noqa: BLE001 - a driver that cannot connect is one unavailable engine
        state.unavailable = _describe(exc)


def close_engines(states: dict[str, EngineState]) -> None:
    for state in states.values():
        if state.runner is not None:
            try:
                state.runner.close()  # type: ignore[attr-defined]
            except Exception:  # noqa: BLE001 - closing must not hide the results
                pass


def _describe(exc: BaseException) -> str:
    return exc.message if isinstance(exc, RexprError) else f"{type(exc).__name__}: {exc}"


def _diffs(expected: Sequence[object], observed: Sequence[object]) -> tuple[RowDiff, ...]:
    return tuple(RowDiff(*d) for d in row_differences(list(expected), list(observed), DIFF_ROWS))


def _result(case: DiffCase, engine: str, lowering: str, outcome: Outcome, **kw) -> CaseResult:
    return CaseResult(case.case_id, case.category, case.text, engine, lowering, outcome,
                      functions_used(case.tree), **kw)


def _compared(case: DiffCase, engine: str, lowering: str, expected: list[object], observed: list[object],
              sql: str | None = None, reason: str = "", losses: dict[int, str] | None = None,
              table: pa.Table | None = None) -> CaseResult:
    type_problem = reason
    notes: list[str] = []
    if losses:  # the engine could not hold these rows' input (SQLite has no NaN): not comparable
        observed = [expected[r] if r in losses else v for r, v in enumerate(observed)]
        notes.append(f"{len(losses)} row(s) not compared, the engine altered their input: " +
                     "; ".join(f"row {r}: {what}" for r, what in list(losses.items())[:5]))
    limits = {r: v for r, v in enumerate(observed) if isinstance(v, EngineLimit)}
    if limits and table is not None:  # rule 8: set aside only what the reference explains
        from rexpr.limit_rows import describe, split_limits

        covered, _ = split_limits(case.tree, table, limits)
        if covered:
            observed = [expected[r] if r in covered else v for r, v in enumerate(observed)]
            notes.append(describe(engine, covered))
    reason = "; ".join(([type_problem] if type_problem else []) + notes)
    diffs = _diffs(expected, observed)
    if type_problem and not diffs:  # the values match but the result type does not
        diffs = (RowDiff(-1, "result type", type_problem),)
    return _result(case, engine, lowering, "disagree" if diffs else "agree", diffs=diffs, sql=sql, reason=reason)


# A reference that raises is a bug in the spec: every engine's result for that case is failed.
Expected = dict[str, "list[object] | str"]


def reference_values(batch: Batch) -> Expected:
    run = get_backend("reference")
    out: Expected = {}
    for case in batch.cases:
        try:
            out[case.case_id] = run(case.tree)(batch.table).to_pylist()
        except Exception as exc:  # noqa: BLE001 - reported as failed for this case, never guessed
            out[case.case_id] = f"the reference evaluator raised {_describe(exc)}"
    return out


def run_reference(batch: Batch, expected: Expected) -> list[CaseResult]:
    """The reference against the answers the corpora publish (cases without one are skipped)."""
    results = []
    for case in batch.cases:
        if case.expected is None:
            continue
        ours = expected[case.case_id]
        if isinstance(ours, str):
            results.append(_result(case, "reference", LOCAL, "failed", reason=ours))
        else:
            results.append(_compared(case, "reference", LOCAL, list(case.expected), ours))
    return results


def run_local(batch: Batch, state: EngineState, expected: Expected) -> list[CaseResult]:
    prepare = get_backend(state.name)
    results = []
    for case in batch.cases:
        ours = expected[case.case_id]
        if isinstance(ours, str):
            results.append(_result(case, state.name, LOCAL, "failed", reason=ours))
            continue
        try:
            evaluation = prepare(case.tree)(batch.table)
        except Exception as exc:  # noqa: BLE001 - a crash on one case must not hide the others
            results.append(_result(case, state.name, LOCAL, "failed", reason=_describe(exc)))
            continue
        results.append(_compared(case, state.name, LOCAL, ours, evaluation.to_pylist(),
                                 reason=result_type_problem(case.tree.type, evaluation) or ""))
    return results


def run_sql(batch: Batch, state: EngineState, lowering: str, expected: Expected) -> list[CaseResult]:
    from rexpr.engines.base import SqlItem
    from rexpr.sql.lowering import check_engine_parser, dialect_of, lower

    engine = state.name
    dialect = dialect_of(engine).sqlglot_dialect
    results: list[CaseResult] = []
    items, lowered, sqls = [], [], {}
    for index, case in enumerate(batch.cases):
        if isinstance(expected[case.case_id], str):
            results.append(_result(case, engine, lowering, "failed", reason=expected[case.case_id]))
            continue
        try:
            item = SqlItem(f"c{index}", lower(case.tree, engine, lowering), case.tree.type)  # type: ignore[arg-type]
            sqls[case.case_id] = item.text(dialect)  # what the engine runs, for the report
            # The refusal to_sql gives for SQL the engine's own parser cannot take (SQLite's stack).
            check_engine_parser(f"SELECT {sqls[case.case_id]}", engine, case.tree)
        except NotPushable as exc:
            results.append(_result(case, engine, lowering, "not_pushable", reason=exc.message))
            continue
        except Exception as exc:  # noqa: BLE001 - a lowering bug fails this case only
            results.append(_result(case, engine, lowering, "failed", reason=f"lowering failed: {_describe(exc)}"))
            continue
        items.append(item)
        lowered.append(case)
    if not items:
        return results
    if state.broken:
        return results + [_result(c, engine, lowering, "failed", reason=state.broken, sql=sqls[c.case_id])
                          for c in lowered]
    try:
        evaluations = _evaluate_batch(state.runner, batch.table, items,
                                      [_raises(expected[c.case_id]) for c in lowered])  # type: ignore[arg-type]
    except Exception as exc:  # noqa: BLE001 - connection lost, driver crash: the engine failed
        state.broken = f"engine failed: {_describe(exc)}"
        return results + [_result(c, engine, lowering, "failed", reason=state.broken, sql=sqls[c.case_id])
                          for c in lowered]
    for case, result in zip(lowered, evaluations):
        if isinstance(result, str):
            results.append(_result(case, engine, lowering, "failed", reason=result, sql=sqls[case.case_id]))
            continue
        # Type mismatches stand in place of their rows, so one can never pass for a null.
        results.append(_compared(case, engine, lowering, expected[case.case_id], result.to_pylist(),  # type: ignore[arg-type]
                                 sql=sqls[case.case_id], losses=result.input_losses, table=batch.table))
    return results


def _raises(values: list[object]) -> bool:
    return any(isinstance(v, RowError) for v in values)


def _evaluate_batch(runner, table: pa.Table, items: list, raising: list[bool]) -> list:
    """One statement for every item the reference says raises on no row; one each for the
    others. A statement that raises is bisected by the runner down to (row, item), and an item
    split costs statements for every erroring item, so erroring items are kept apart."""
    groups = [[i for i, r in enumerate(raising) if not r]] + [[i] for i, r in enumerate(raising) if r]
    out: list = [None] * len(items)
    for group in groups:
        if group:
            for i, result in zip(group, evaluate_isolating(runner, table, [items[i] for i in group])):
                out[i] = result
    return out


def evaluate_isolating(runner, table: pa.Table, items: list) -> list:
    """One statement for all items; when the engine refuses it (an error that is not a per-row
    error, such as an operator it lacks), split the items in halves to find the ones it refuses.
    Each refused item becomes its reason (a str). Anything but a RexprError means the engine
    itself failed, and propagates."""
    try:
        out = list(runner.evaluate(table, items))
    except RexprError as exc:
        if len(items) == 1:
            return [f"the engine refused the statement: {exc.message}"]
        middle = len(items) // 2
        return evaluate_isolating(runner, table, items[:middle]) + evaluate_isolating(runner, table, items[middle:])
    if len(out) != len(items):
        raise RuntimeError(f"the runner returned {len(out)} results for {len(items)} items")
    return out


def run_batch(batch: Batch, engines: dict[str, EngineState], lowerings: Iterable[str]) -> list[CaseResult]:
    expected = reference_values(batch)
    results: list[CaseResult] = []
    lowerings = tuple(lowerings)
    for name, state in engines.items():
        if state.unavailable:
            for lowering in lowerings_of(name, lowerings):
                results += [_result(c, name, lowering, "unavailable", reason=state.unavailable)
                            for c in batch.cases if name != "reference" or c.expected is not None]
        elif name == "reference":
            results += run_reference(batch, expected)
        elif name in SQL_ENGINES:
            for lowering in lowerings:
                results += run_sql(batch, state, lowering, expected)
        else:
            results += run_local(batch, state, expected)
    return results
