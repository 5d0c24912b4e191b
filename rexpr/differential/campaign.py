"""A differential run: batches from the corpora and the generator, sharded, resumable.

Each batch is a shard. Its results are written to ``<report>/shards/<batch>.json`` atomically
(write, then rename), so a run killed midway loses at most the shards in flight and
``resume=True`` skips every shard already on disk. Shards run in this process, in local
processes (``jobs``), or on a Dask cluster (``cluster``). An engine that fails mid-run is
reported as failed for its remaining shards while the other engines finish.
"""

from __future__ import annotations

import datetime as dt
import json
import os
import tempfile
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any, Callable, Iterable, Sequence

import pyarrow as pa

from rexpr.differential.cases import Batch, DiffCase
from rexpr.differential.runner import CaseResult, close_engines, open_engines, run_batch
from rexpr.differential.shrink import shrink
from rexpr.differential.summary import disagreement_key, json_row
from rexpr.errors import InputProblem, NotPushable
from rexpr.printing import to_text
from rexpr.schema import Schema
from rexpr.typed import Typed, functions_used
from rexpr.values import to_json_value

GENERATED_BATCH = 250  # generated cases per batch: one statement per engine for all of them


@dataclass(frozen=True)
class CampaignSpec:
    engines: tuple[str, ...]
    lowerings: tuple[str, ...]
    corpora_dir: str | None
    generate: int
    seed: int
    report_dir: str
    categories: tuple[str, ...] = ()


# ---------------------------------------------------------------------------------- batches
def corpus_batches(directory: str | None, categories: Sequence[str] = ()) -> list[Batch]:
    from rexpr.api import compile as compile_expression
    from rexpr.corpus import load_corpora

    batches = []
    for corpus in load_corpora(directory):
        if categories and corpus.category not in categories:
            continue
        cases = []
        for case in corpus.cases:
            if case.compile_error is not None:  # a checker case: nothing to evaluate
                continue
            tree = compile_expression(case.expression, corpus.schema).tree
            cases.append(DiffCase(f"{corpus.path.stem}/{case.number}", corpus.category, case.expression, tree,
                                  case.reason, case.expected, case.source or ""))
        batches.append(Batch(f"corpus-{corpus.path.stem}", corpus.category, corpus.schema, corpus.table, tuple(cases)))
    return batches


GENERATED_SCHEMA = Schema.from_mapping({"i": "int64", "j": "int64", "x": "float64", "y": "float64",
                                        "s": "string", "t": "string", "b": "bool", "d": "date", "ts": "timestamp"})


def generated_batches(count: int, seed: int, rows: int = 64) -> list[Batch]:
    from rexpr.differential.generator import random_expressions, random_table

    batches = []
    for start in range(0, count, GENERATED_BATCH):
        size = min(GENERATED_BATCH, count - start)
        batch_seed = seed * 1_000_003 + start
        trees = random_expressions(batch_seed, GENERATED_SCHEMA, size, 4)
        table = random_table(batch_seed, GENERATED_SCHEMA, rows)
        cases = tuple(DiffCase(f"gen/{seed}/{start + k}", "generated", to_text(t), t) for k, t in enumerate(trees))
        batches.append(Batch(f"gen-{seed}-{start:08d}", "generated", GENERATED_SCHEMA, table, cases))
    return batches


# ----------------------------------------------------------------------------------- shards
def _atomic_write(path: Path, text: str) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=".tmp-", suffix=path.suffix)
    with os.fdopen(fd, "w", encoding="utf-8") as handle:
        handle.write(text)
    os.replace(tmp, path)


def _result_json(r: CaseResult, tree: Typed) -> dict[str, Any]:
    data = asdict(r)
    data["diffs"] = [json_row(d.row, d.expected, d.observed) for d in r.diffs]
    data["functions"] = list(functions_used(tree))
    data["key"] = f"{r.engine}|{r.lowering}|{r.case_id}"
    return data


def _probe_for(state, lowering: str) -> Callable[[Typed, pa.Table], list[object] | None]:
    from rexpr.backends import LOCAL_BACKENDS, get_backend

    if state.name in LOCAL_BACKENDS:
        return lambda tree, table: get_backend(state.name)(tree)(table).to_pylist()

    def probe(tree: Typed, table: pa.Table) -> list[object] | None:
        from rexpr.engines.base import SqlItem
        from rexpr.sql.lowering import lower

        try:
            expression = lower(tree, state.name, lowering)  # type: ignore[arg-type]
        except NotPushable:
            return None
        [result] = state.runner.evaluate(table, [SqlItem("c0", expression, tree.type)])
        if result.type_mismatches:
            return None
        return result.evaluation.to_pylist()

    return probe


def run_shard(batch: Batch, engines: Sequence[str], lowerings: Sequence[str]) -> dict[str, Any]:
    """Run one batch on every engine; shrink each disagreement; return the shard document."""
    states = open_engines(engines)
    try:
        results = run_batch(batch, states, lowerings)
        trees = {c.case_id: c for c in batch.cases}
        out, repros = [], {}
        for r in results:
            case = trees[r.case_id]
            data = _result_json(r, case.tree)
            out.append(data)
            if r.outcome == "disagree" and r.diffs and r.diffs[0].row >= 0:
                state = states[r.engine]
                repro = shrink(case.tree, batch.table, r.diffs[0].row, _probe_for(state, r.lowering))
                if repro is not None:
                    sql = None
                    if r.lowering in ("faithful", "native"):
                        from rexpr.sql.lowering import to_sql

                        try:
                            sql = to_sql(repro.tree, r.engine, r.lowering)  # type: ignore[arg-type]
                        except NotPushable:
                            sql = None
                    fn = repro.tree.function if hasattr(repro.tree, "function") else "field"
                    repros[data["key"]] = {"expression": to_text(repro.tree), "function": fn,
                                           "row": {k: to_json_value(v) for k, v in repro.row.items()},
                                           "expected": to_json_value(repro.expected),
                                           "observed": to_json_value(repro.observed), "sql": sql}
        engines_info = {n: ({"status": "unavailable", "reason": s.unavailable} if s.unavailable
                            else {"status": "available", **_plain(s.info)}) for n, s in states.items()}
        return {"batch": batch.batch_id, "cases": len(batch.cases), "results": out, "repros": repros,
                "engines": engines_info}
    finally:
        close_engines(states)


def _plain(info: dict) -> dict:
    return json.loads(json.dumps(info, default=str))


def _shard_path(report_dir: str, batch_id: str) -> Path:
    return Path(report_dir) / "shards" / f"{batch_id}.json"


def run_campaign(spec: CampaignSpec, batches: list[Batch], jobs: int = 1, cluster: str | None = None,
                 resume: bool = False, progress: Callable[[int, int], None] | None = None) -> list[dict[str, Any]]:
    """Run every batch not already on disk (with ``resume``) and return all shard documents."""
    todo = [b for b in batches if not (resume and _shard_path(spec.report_dir, b.batch_id).is_file())]
    if not resume:
        shard_dir = Path(spec.report_dir) / "shards"
        if shard_dir.is_dir():
            for old in shard_dir.glob("*.json"):
                old.unlink()
    done = len(batches) - len(todo)
    if progress:
        progress(done, len(batches))

    def finished(doc: dict[str, Any]) -> None:
        nonlocal done
        _atomic_write(_shard_path(spec.report_dir, doc["batch"]), json.dumps(doc, ensure_ascii=False))
        done += 1
        if progress:
            progress(done, len(batches))

    if cluster:
        _run_on_dask(cluster, todo, spec, finished)
    elif jobs > 1 and len(todo) > 1:
        from concurrent.futures import ProcessPoolExecutor, as_completed

        with ProcessPoolExecutor(max_workers=jobs) as pool:
            futures = [pool.submit(run_shard, b, spec.engines, spec.lowerings) for b in todo]
            for future in as_completed(futures):
                finished(future.result())
    else:
        for batch in todo:
            finished(run_shard(batch, spec.engines, spec.lowerings))
    return [json.loads(_shard_path(spec.report_dir, b.batch_id).read_text(encoding="utf-8")) for b in batches]


def _run_on_dask(address: str, batches: list[Batch], spec: CampaignSpec, finished: Callable[[dict], None]) -> None:
    try:
        from distributed import Client, as_completed
    except ImportError:
        raise InputProblem("--cluster needs Dask distributed: pip install 'rexpr[cluster]'",
                           code="missing_dependency") from None
    client = Client(address) if isinstance(address, str) else address
    try:
        futures = [client.submit(run_shard, b, spec.engines, spec.lowerings, pure=False) for b in batches]
        for future in as_completed(futures):
            finished(future.result())
    finally:
        if isinstance(address, str):
            client.close()


def merge_shards(shards: Iterable[dict[str, Any]]) -> tuple[list[dict[str, Any]], dict[str, Any], dict[str, Any], int]:
    results, repros, engines, cases = [], {}, {}, 0
    shards = list(shards)
    ever_available = {name for shard in shards for name, info in shard["engines"].items()
                      if info.get("status") == "available"}
    for shard in shards:
        cases += shard["cases"]
        repros.update(shard["repros"])
        for r in shard["results"]:
            if r["outcome"] == "unavailable" and r["engine"] in ever_available:
                # It answered in other shards: it went away mid-run, which is a failure, not a skip.
                r = {**r, "outcome": "failed", "reason": f"engine went away mid-run: {r['reason']}"}
            results.append(r)
        for name, info in shard["engines"].items():
            if info.get("status") == "available" or name not in engines:
                engines[name] = info
    return results, repros, engines, cases


def now_iso() -> str:
    return dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")


__all__ = ["CampaignSpec", "corpus_batches", "disagreement_key", "generated_batches", "merge_shards",
           "run_campaign", "run_shard"]
