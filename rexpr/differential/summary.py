"""Fold case results into the report document: the function x engine matrix, the shrunk
repros, the counts the nightly job alerts on, and the drift against a baseline."""

from __future__ import annotations

import datetime as dt
from collections import defaultdict
from typing import Any, Iterable

from rexpr.values import to_json_value

REPORT_FORMAT = "rexpr-differential-report"
REPORT_VERSION = 1


def disagreement_key(item: dict[str, Any]) -> str:
    return f"{item['engine']}|{item['lowering']}|{item['function']}|{item['case_id']}"


def build_document(results: Iterable[dict[str, Any]], engines: dict[str, dict[str, Any]],
                   lowerings: list[str], repros: dict[str, dict[str, Any]], cases: int,
                   started: str, seed: int | None, generated: int) -> dict[str, Any]:
    """``results`` are CaseResult dicts with a ``functions`` list; ``repros`` map a
    disagreement key to its shrunk repro."""
    matrix: dict[str, dict[str, dict[str, dict[str, int]]]] = defaultdict(
        lambda: defaultdict(lambda: defaultdict(lambda: defaultdict(int))))
    disagreements = []
    for r in results:
        lowering = r["lowering"]
        if r["outcome"] == "disagree":
            repro = repros.get(r["key"]) or {}
            function = repro.get("function") or (r["functions"][0] if r["functions"] else "field")
            matrix[function][r["engine"]][lowering]["disagree"] += 1
            disagreements.append({
                "case_id": r["case_id"], "category": r["category"], "engine": r["engine"],
                "lowering": lowering, "function": function, "expression": r["text"], "sql": r.get("sql"),
                "rows": r["diffs"], "repro": repro or None,
            })
        else:
            for function in r["functions"] or ["field"]:
                matrix[function][r["engine"]][lowering][r["outcome"]] += 1
    faithful = [d for d in disagreements if d["lowering"] in ("faithful", "local")]
    native = [d for d in disagreements if d["lowering"] == "native"]
    seen_native = {}
    for d in native:
        seen_native.setdefault((d["category"], d["engine"], d["function"]), d)
    return {
        "format": REPORT_FORMAT,
        "version": REPORT_VERSION,
        "started": started,
        "finished": dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds"),
        "seed": seed,
        "generated_cases": generated,
        "engines": [{"name": n, **info} for n, info in engines.items()],
        "lowerings": lowerings,
        "cases": cases,
        "faithful_disagreements": len(faithful),
        "native_divergences": [{"category": c, "engine": e, "function": f, "case_id": d["case_id"],
                                "expression": d["expression"]} for (c, e, f), d in sorted(seen_native.items())],
        "matrix": {f: {e: {lw: dict(counts) for lw, counts in by_engine.items()} for e, by_engine in engines_.items()}
                   for f, engines_ in sorted(matrix.items())},
        "disagreements": disagreements,
        "note": "Agreement is measured on the corpora and generated cases run here; it is evidence, not proof.",
    }


def apply_baseline(document: dict[str, Any], baseline: dict[str, Any] | None) -> dict[str, Any]:
    """Mark each disagreement new or still present, and list the fixed ones."""
    old = {disagreement_key(d): d for d in (baseline or {}).get("disagreements", [])}
    now = {disagreement_key(d): d for d in document["disagreements"]}
    for key, item in now.items():
        item["drift"] = "still" if key in old else "new"
    fixed = [{k: v for k, v in old[key].items() if k in ("case_id", "engine", "lowering", "function", "expression")}
             for key in old if key not in now]
    document["drift"] = {
        "baseline": (baseline or {}).get("finished"),
        "new": sum(1 for d in now.values() if d["drift"] == "new"),
        "still": sum(1 for d in now.values() if d["drift"] == "still"),
        "fixed": fixed,
    }
    return document


def alert(document: dict[str, Any]) -> bool:
    """True when a scheduler should alert: any faithful disagreement, or a new native divergence."""
    if document["faithful_disagreements"]:
        return True
    return any(d["lowering"] == "native" and d.get("drift", "new") == "new" for d in document["disagreements"])


def evidence_from(document: dict[str, Any]) -> dict[str, Any]:
    """The data file the planner reads: pairs whose faithful lowering disagreed."""
    pairs = sorted({(d["function"], d["engine"]) for d in document["disagreements"] if d["lowering"] == "faithful"})
    return {"about": "function x engine pairs where the faithful lowering disagreed with the reference in the "
                     "last differential run; refreshed by `rexpr diff --update-baseline`",
            "generated": document["finished"],
            "faithful_disagreements": [{"function": f, "engine": e} for f, e in pairs]}


def json_row(row: int, expected: object, observed: object) -> dict[str, Any]:
    return {"row": row, "expected": to_json_value(expected), "observed": _observed_json(observed)}


def _observed_json(value: object) -> object:
    text = str(value) if type(value).__name__ == "_Mismatch" else None
    return {"mismatch": text} if text else to_json_value(value)
