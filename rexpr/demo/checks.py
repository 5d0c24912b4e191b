"""The demo's two checks of a plan's run on a source: the rows equal local evaluation of the
whole filter, and each pushed conjunct agrees with the reference semantics on a sample."""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass

import pyarrow as pa

from rexpr.api import compile as compile_expression
from rexpr.demo.scenario import SCHEMA
from rexpr.planner.plan import DATASET_SOURCE, Plan
from rexpr.runs import run_on


def local_answer(text: str, table: pa.Table) -> pa.Array:
    """Call ids the whole filter keeps when evaluated locally (Arrow backend, same semantics)."""
    return compile_expression(text, SCHEMA).filter(table, backend="arrow").column("call_id").combine_chunks()


def same_rows(got: pa.Array, expected: pa.Array) -> bool:
    """Same call ids, in any order (a SQL source returns rows in its own order)."""
    return got.equals(expected) or sorted(got.to_pylist()) == sorted(expected.to_pylist())


@dataclass(frozen=True)
class PushedCheck:
    text: str   # one phrase for the per-source line
    ok: bool    # every pushed part ran on the engine and agreed with the reference


def check_pushed(plan_: Plan, sample: pa.Table) -> PushedCheck:
    """Differential check of each pushed conjunct on ``sample``, against the reference."""
    engine = "arrow" if plan_.source == DATASET_SOURCE else plan_.source
    statuses: Counter[str] = Counter()
    reasons: list[str] = []
    for conjunct in plan_.conjuncts:
        if not conjunct.pushed:
            continue
        compiled = compile_expression(conjunct.text, SCHEMA)
        expected = compiled.evaluate(sample, backend="reference").to_pylist()
        result = run_on(engine, compiled, sample, expected)
        statuses[result.status] += 1
        if result.reason:
            reasons.append(result.reason)
    if not statuses:
        return PushedCheck("nothing pushed", True)
    parts = []
    if statuses["agree"]:
        parts.append(f"{statuses['agree']} pushed part(s) agree with the reference on {sample.num_rows} sample rows")
    if statuses["disagree"]:
        parts.append(f"{statuses['disagree']} pushed part(s) DISAGREE with the reference")
    if statuses["unavailable"]:
        parts.append(f"{statuses['unavailable']} pushed part(s) NOT CHECKED ({engine} unavailable)")
    if statuses["limited"]:
        parts.append(f"{statuses['limited']} pushed part(s) agree except on rows {engine} cannot represent "
                     "(engine limit; such a filter raises engine_limit there instead of a wrong row)")
    if statuses["not_pushable"]:
        parts.append(f"{statuses['not_pushable']} pushed part(s) REFUSED by the {engine} lowering")
    text = "; ".join(parts) + (f" ({'; '.join(dict.fromkeys(reasons))})" if reasons else "")
    return PushedCheck(text, statuses["agree"] + statuses["limited"] == sum(statuses.values()))
