"""A differential run: batches from the corpora and the generator, sharded, resumable.

Each batch is a shard. Its results are written to ``<report>/shards/<batch>.json`` atomically
(write, then rename), so a run killed midway loses at most the shards in flight, and
``resume=True`` skips every shard already on disk (after checking that the directory holds the
same campaign). Shards run in this process, in local processes (``jobs``), or on a Dask
cluster (``cluster``). An engine that fails mid-run is reported as failed for its remaining
shards while the other engines finish; a shard that crashes is reported failed for all its
cases and is run again by the next ``resume``.
"""

from __future__ import annotations

import datetime as dt
import difflib
import json
import os
import tempfile
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any, Callable, Iterable, Sequence

import pyarrow as pa

from rexpr.differential.cases import Batch, DiffCase
from rexpr.differential.runner import (LOCAL, CaseResult, EngineState, close_engines, evaluate_isolating,
                                       lowerings_of, open_engines, run_batch)
from rexpr.differential.shrink import NOT_COMPARABLE, EngineProbe, Repro, shrink
from rexpr.differential.summary import json_value
from rexpr.errors import InputProblem, NotPushable
from rexpr.printing import to_text
from rexpr.schema import Schema
from rexpr.typed import Typed, fields_read, functions_used

GENERATED_BATCH = 250  # generated cases per batch: one statement per engine for all of them
GENERATED_ROWS = 64
GENERATED_DEPTH = 4
SHRINK_SECONDS = 30.0  # per disagreement; a repro cut short says it is not minimal
SHARD_FORMAT = "rexpr-differential-shard"
SHARD_VERSION = 1
Progress = Callable[[int, int], None]


@dataclass(frozen=True)
class CampaignSpec:
    engines: tuple[str, ...]
    lowerings: tuple[str, ...]
    corpora_dir: str | None
    generate: int
    seed: int
    report_dir: str
    categories: tuple[str, ...] = ()

    def identity(self) -> dict[str, Any]:
        """What a resumed run must share with the one it resumes."""
        data = asdict(self)
        del data["report_dir"]
        data["corpora_dir"] = str(Path(self.corpora_dir).resolve()) if self.corpora_dir else None
        return json.loads(json.dumps(data))


# ---------------------------------------------------------------------------------- batches
def corpus_batches(directory: str | None, categories: Sequence[str] = ()) -> list[Batch]:
    """One batch per corpus file; ``categories`` selects files by name (``floats``, ``nulls``)."""
    from rexpr.api import compile as compile_expression
    from rexpr.corpus import load_corpora

    corpora = load_corpora(directory)
    names = [c.name for c in corpora]
    for wanted in categories:
        if wanted not in names:
            close = difflib.get_close_matches(wanted, names, n=1)
            hint = f"; did you mean {close[0]!r}?" if close else f"; known: {', '.join(names)}"
            raise InputProblem(f"no corpus named {wanted!r}{hint}", code="unknown_category")
    batches = []
    for corpus in corpora:
        if categories and corpus.name not in categories:
            continue
        cases = []
        for case in corpus.cases:
            if case.compile_error is not None:  # a checker case: nothing to evaluate
                continue
            tree = compile_expression(case.expression, corpus.schema).tree
            cases.append(DiffCase(f"{corpus.name}/{case.number}", corpus.name, case.expression, tree,
                                  case.reason, case.expected, case.source or ""))
        batches.append(Batch(f"corpus-{corpus.name}", corpus.name, corpus.schema, corpus.table, tuple(cases)))
    return batches


GENERATED_SCHEMA = Schema.from_mapping({"i": "int64", "j": "int64", "x": "float64", "y": "float64",
                                        "s": "string", "t": "string", "b": "bool", "d": "date", "ts": "timestamp"})


def generated_batches(count: int, seed: int, rows: int = GENERATED_ROWS) -> list[Batch]:
    """Case ``gen/<seed>/<n>`` is ``random_expression(seed, n)``, so any one can be rebuilt alone."""
    from rexpr.differential.generator import random_expression, random_table

    batches = []
    for start in range(0, count, GENERATED_BATCH):
        size = min(GENERATED_BATCH, count - start)
        trees = [random_expression(seed, start + k, GENERATED_SCHEMA, GENERATED_DEPTH) for k in range(size)]
        table = random_table(seed * 1_000_003 + start, GENERATED_SCHEMA, rows)
        cases = tuple(DiffCase(f"gen/{seed}/{start + k}", "generated", to_text(t), t) for k, t in enumerate(trees))
        batches.append(Batch(f"gen-{seed}-{start:08d}", "generated", GENERATED_SCHEMA, table, cases))
    return batches


# ----------------------------------------------------------------------------------- shards
def atomic_write(path: Path, text: str) -> None:
    """Write, flush, then rename: a reader sees the old file or the new one, never a part."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=".tmp-", suffix=".part")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as handle:
            handle.write(text)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def _result_json(r: CaseResult) -> dict[str, Any]:
    return {"case_id": r.case_id, "category": r.category, "text": r.text, "engine": r.engine, "lowering": r.lowering,
            "outcome": r.outcome, "functions": list(r.functions), "reason": r.reason,
            "diffs": [{"row": d.row, "expected": json_value(d.expected), "observed": json_value(d.observed)}
                      for d in r.diffs],
            "sql": r.sql, "key": r.key}


def probe_for(state: EngineState, lowering: str) -> EngineProbe:
    """Evaluate trees on one engine, for the shrinker: one statement for all of them."""
    from rexpr.backends import get_backend

    if lowering == LOCAL:
        return lambda trees, table: [get_backend(state.name)(t)(table).to_pylist() for t in trees]

    def probe(trees: Sequence[Typed], table: pa.Table) -> list[list[object] | None]:
        from rexpr.engines.base import SqlItem
        from rexpr.sql.lowering import lower

        items, where = [], []
        for index, tree in enumerate(trees):
            try:
                items.append(SqlItem(f"c{index}", lower(tree, state.name, lowering), tree.type))  # type: ignore[arg-type]
                where.append(index)
            except NotPushable:
                pass
        out: list[list[object] | None] = [None] * len(trees)
        for index, result in zip(where, evaluate_isolating(state.runner, table, items) if items else []):
            if not isinstance(result, str):
                values = result.to_pylist()
                for row in result.input_losses:  # the engine altered this row's input
                    values[row] = NOT_COMPARABLE
                out[index] = values
        return out

    return probe


def _repro_json(repro: Repro, batch: Batch, state: EngineState, lowering: str) -> dict[str, Any]:
    sql = None
    if lowering != LOCAL:
        from rexpr.differential.paste import paste_sql

        try:
            sql = paste_sql(repro.tree, repro.row, batch.schema, state.name, lowering, state.info.get("settings"))
        except Exception as exc:  # noqa: BLE001 - the repro stands without its SQL; say why
            sql = f"-- could not build the statement: {type(exc).__name__}: {exc}"
    function = repro.tree.function if hasattr(repro.tree, "function") else "field"
    return {"expression": repro.text, "function": function, "row": {k: json_value(v) for k, v in repro.row.items()},
            "expected": json_value(repro.expected), "observed": json_value(repro.observed), "sql": sql,
            "steps": repro.steps, "minimal": repro.minimal}


def _published_repro(case: DiffCase, batch: Batch, row: int, expected: object, observed: object) -> dict[str, Any]:
    """A reference disagreeing with a published answer is shown as the corpus case itself."""
    used = {p[0] for p in fields_read(case.tree)}
    values = {k: json_value(v) for k, v in batch.table.slice(row, 1).to_pylist()[0].items() if k in used}
    return {"expression": case.text, "function": getattr(case.tree, "function", "field"), "row": values,
            "expected": expected, "observed": observed, "sql": None, "steps": 0, "minimal": False,
            "source": case.source}


def run_shard(batch: Batch, engines: Sequence[str], lowerings: Sequence[str]) -> dict[str, Any]:
    """Run one batch on every engine; shrink each disagreement; return the shard document."""
    states = open_engines(engines)
    try:
        results = run_batch(batch, states, lowerings)
        cases = {c.case_id: c for c in batch.cases}
        out, repros, caches = [], {}, {}
        for r in results:
            data = _result_json(r)
            out.append(data)
            if r.outcome != "disagree" or not r.diffs or r.diffs[0].row < 0:
                continue
            case, first = cases[r.case_id], data["diffs"][0]
            if r.engine == "reference":
                repros[r.key] = _published_repro(case, batch, first["row"], first["expected"], first["observed"])
                continue
            state = states[r.engine]
            if state.broken:
                continue
            cache = caches.setdefault((r.engine, r.lowering), {})
            repro = shrink(case.tree, batch.table, r.diffs[0].row, probe_for(state, r.lowering), batch.schema,
                           SHRINK_SECONDS, cache)
            if repro is not None:
                repros[r.key] = _repro_json(repro, batch, state, r.lowering)
        engines_info = {n: ({"status": "unavailable", "reason": s.unavailable} if s.unavailable
                            else {"status": "available", **_plain(s.info)}) for n, s in states.items()}
        for name, state in states.items():
            if state.broken:
                engines_info[name]["failed"] = state.broken
        return {"format": SHARD_FORMAT, "version": SHARD_VERSION, "batch": batch.batch_id, "cases": len(batch.cases),
                "results": out, "repros": repros, "engines": engines_info}
    finally:
        close_engines(states)


def crashed_shard(batch: Batch, spec: CampaignSpec, error: BaseException) -> dict[str, Any]:
    """What a shard whose worker crashed reports: every case failed on every engine."""
    reason = f"shard crashed: {type(error).__name__}: {error}"
    results = [{"case_id": c.case_id, "category": c.category, "text": c.text, "engine": e, "lowering": lw,
                "outcome": "failed", "functions": list(functions_used(c.tree)), "reason": reason, "diffs": [],
                "sql": None, "key": f"{e}|{lw}|{c.case_id}"}
               for e in spec.engines for lw in lowerings_of(e, spec.lowerings) for c in batch.cases
               if e != "reference" or c.expected is not None]
    return {"format": SHARD_FORMAT, "version": SHARD_VERSION, "batch": batch.batch_id, "cases": len(batch.cases),
            "results": results, "repros": {}, "engines": {}, "crashed": reason}


def _plain(info: dict) -> dict:
    return json.loads(json.dumps(info, default=str))


def shard_path(report_dir: str, batch_id: str) -> Path:
    return Path(report_dir) / "shards" / f"{batch_id}.json"


def _finished_shard(path: Path) -> bool:
    """A shard on disk that a resume may keep: complete, current format, not crashed."""
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError):
        return False
    return doc.get("format") == SHARD_FORMAT and doc.get("version") == SHARD_VERSION and not doc.get("crashed")


def _prepare_directory(spec: CampaignSpec, batches: list[Batch], resume: bool) -> list[Batch]:
    """The batches still to run; checks a resumed directory holds the same campaign."""
    root = Path(spec.report_dir)
    marker = root / "campaign.json"
    for stale in (root / "shards").glob(".tmp-*.part"):  # writes a kill interrupted
        stale.unlink()
    identity = {**spec.identity(), "batches": [b.batch_id for b in batches]}
    if resume and marker.is_file():
        try:
            previous = json.loads(marker.read_text(encoding="utf-8"))
        except (OSError, json.JSONDecodeError) as exc:
            raise InputProblem(f"cannot read {marker}: {exc}") from None
        if previous != identity:
            changed = sorted(k for k in set(previous) | set(identity) if previous.get(k) != identity.get(k))
            raise InputProblem(f"--resume: {root} holds a different campaign (differs in {', '.join(changed)}); "
                               "rerun without --resume or use another --report directory", code="resume_mismatch")
        return [b for b in batches if not _finished_shard(shard_path(spec.report_dir, b.batch_id))]
    shard_dir = root / "shards"
    if shard_dir.is_dir():
        for old in shard_dir.glob("*.json"):
            old.unlink()
    atomic_write(marker, json.dumps(identity, indent=1))
    return list(batches)


def run_campaign(spec: CampaignSpec, batches: list[Batch], jobs: int = 1, cluster: Any = None,
                 resume: bool = False, progress: Progress | None = None) -> list[dict[str, Any]]:
    """Run every batch not already finished on disk (with ``resume``) and return all shard
    documents, in batch order. ``cluster`` is a scheduler address or a ``distributed.Client``."""
    todo = _prepare_directory(spec, batches, resume)
    done = len(batches) - len(todo)
    if progress:
        progress(done, len(batches))

    def finished(doc: dict[str, Any]) -> None:
        nonlocal done
        atomic_write(shard_path(spec.report_dir, doc["batch"]), json.dumps(doc, ensure_ascii=False))
        done += 1
        if progress:
            progress(done, len(batches))

    if cluster is not None:
        _run_on_dask(cluster, todo, spec, finished)
    elif jobs > 1 and len(todo) > 1:
        _run_in_processes(jobs, todo, spec, finished)
    else:
        for batch in todo:
            try:
                doc = run_shard(batch, spec.engines, spec.lowerings)
            except Exception as exc:  # noqa: BLE001 - one crashed shard must not lose the others
                doc = crashed_shard(batch, spec, exc)
            finished(doc)
    return [json.loads(shard_path(spec.report_dir, b.batch_id).read_text(encoding="utf-8")) for b in batches]


def _run_in_processes(jobs: int, batches: list[Batch], spec: CampaignSpec, finished: Callable[[dict], None]) -> None:
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor, as_completed

    # forkserver: workers start from a clean process, not a fork of one holding engine threads.
    context = multiprocessing.get_context("forkserver")
    with ProcessPoolExecutor(max_workers=jobs, mp_context=context) as pool:
        futures = {pool.submit(run_shard, b, spec.engines, spec.lowerings): b for b in batches}
        for future in as_completed(futures):
            try:
                doc = future.result()
            except Exception as exc:  # noqa: BLE001 - a worker that died fails its shard only
                doc = crashed_shard(futures[future], spec, exc)
            finished(doc)


def _run_on_dask(cluster: Any, batches: list[Batch], spec: CampaignSpec, finished: Callable[[dict], None]) -> None:
    try:
        from distributed import Client, as_completed
    except ImportError:
        raise InputProblem("--cluster needs Dask distributed: pip install 'rexpr[cluster]'",
                           code="missing_dependency") from None
    own = isinstance(cluster, str)
    try:
        client = Client(cluster, timeout=30) if own else cluster
    except OSError as exc:
        raise InputProblem(f"cannot reach the Dask scheduler at {cluster!r}: {exc}", code="cluster_unreachable") from None
    try:
        futures = {client.submit(run_shard, b, spec.engines, spec.lowerings, pure=False): b for b in batches}
        for future in as_completed(list(futures)):
            try:
                doc = future.result()
            except Exception as exc:  # noqa: BLE001 - a lost worker fails its shard only
                doc = crashed_shard(futures[future], spec, exc)
            finished(doc)
    finally:
        if own:
            client.close()


def merge_shards(shards: Iterable[dict[str, Any]]) -> tuple[list[dict[str, Any]], dict[str, Any], dict[str, Any], int]:
    """(results, repros by key, engine info, case count) over all shards. An engine that was
    available in some shard and unavailable in another went away mid-run: its unavailable
    results there are failures, not skips."""
    results, repros, engines, cases = [], {}, {}, 0
    shards = list(shards)
    ever_available = {name for shard in shards for name, info in shard["engines"].items()
                      if info.get("status") == "available"}
    for shard in shards:
        cases += shard["cases"]
        repros.update(shard["repros"])
        for r in shard["results"]:
            if r["outcome"] == "unavailable" and r["engine"] in ever_available:
                r = {**r, "outcome": "failed", "reason": f"engine went away mid-run: {r['reason']}"}
            results.append(r)
        for name, info in shard["engines"].items():
            if name not in engines or (info.get("status") == "available" and engines[name].get("status") != "available"):
                engines[name] = dict(info)
            if info.get("failed") or (name in ever_available and info.get("status") == "unavailable"):
                engines[name]["failed_shards"] = engines[name].get("failed_shards", 0) + 1
    return results, repros, engines, cases


def now_iso() -> str:
    return dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")


__all__ = ["CampaignSpec", "atomic_write", "corpus_batches", "generated_batches", "merge_shards", "run_campaign",
           "run_shard"]
