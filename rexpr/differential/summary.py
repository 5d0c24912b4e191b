"""Fold case results into the report document: the function x engine matrix, the shrunk
repros, the counts the nightly job alerts on, and the drift against a baseline.

The document is versioned (``format``, ``version``); a reader refuses other formats.
"""

from __future__ import annotations

import datetime as dt
from collections import defaultdict
from typing import Any, Iterable

from rexpr.errors import InputProblem
from rexpr.values import EngineLimit, RowError, to_json_value

REPORT_FORMAT = "rexpr-differential-report"
REPORT_VERSION = 1
NOTE = "Agreement is measured on the corpora and generated cases run here; it is evidence, not proof."
OUTCOMES = ("agree", "disagree", "not_pushable", "unavailable", "failed")
_SCALARS = (type(None), bool, int, float, str)
MAX_FAILURES_LISTED = 200  # the counts in "outcomes" are complete


def json_value(value: object) -> object:
    """JSON-ready form of a value an engine or the reference gave; anything that is not a
    rexpr value (a type mismatch) becomes ``{"mismatch": text}``."""
    import datetime

    if isinstance(value, (RowError, EngineLimit, datetime.date)) or isinstance(value, _SCALARS):
        return to_json_value(value)
    return {"mismatch": str(value)}


def disagreement_key(item: dict[str, Any]) -> str:
    """Identity across runs: the case on an engine and lowering. The function is left out: it
    comes from the shrunk repro, which may differ when a shrink is cut short."""
    return f"{item['engine']}|{item['lowering']}|{item['case_id']}"


def build_document(results: Iterable[dict[str, Any]], engines: dict[str, dict[str, Any]],
                   lowerings: list[str], repros: dict[str, dict[str, Any]], cases: int,
                   started: str, seed: int | None, generated: int) -> dict[str, Any]:
    """``results`` are CaseResult dicts (with ``functions`` and ``key``); ``repros`` map a result
    key to its shrunk repro. A disagreement counts against the function its repro's root calls;
    every other outcome counts for each function the case uses."""
    matrix: dict[str, dict[str, dict[str, dict[str, int]]]] = defaultdict(
        lambda: defaultdict(lambda: defaultdict(lambda: defaultdict(int))))
    disagreements, failures, totals = [], [], {o: 0 for o in OUTCOMES}
    for r in results:
        lowering = r["lowering"]
        totals[r["outcome"]] += 1
        if r["outcome"] == "failed" and len(failures) < MAX_FAILURES_LISTED:
            failures.append({k: r[k] for k in ("case_id", "engine", "lowering", "reason")})
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
    faithful = [d for d in disagreements if d["lowering"] != "native"]
    seen_native: dict[tuple[str, str, str], dict[str, Any]] = {}
    for d in disagreements:
        if d["lowering"] == "native":
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
        "outcomes": totals,
        "faithful_disagreements": len(faithful),
        "native_divergences": [{"category": c, "engine": e, "function": f, "case_id": d["case_id"],
                                "expression": d["expression"]} for (c, e, f), d in sorted(seen_native.items())],
        "matrix": {f: {e: {lw: dict(counts) for lw, counts in by_engine.items()} for e, by_engine in engines_.items()}
                   for f, engines_ in sorted(matrix.items())},
        "disagreements": disagreements,
        "failures": failures,
        "note": NOTE,
    }


def read_document(data: Any, where: str) -> dict[str, Any]:
    """A report document read back (a baseline), checked for its format and version."""
    if not isinstance(data, dict) or data.get("format") != REPORT_FORMAT:
        raise InputProblem(f"{where} is not a rexpr differential report", code="invalid_baseline")
    if data.get("version") != REPORT_VERSION:
        raise InputProblem(f"{where} is report version {data.get('version')}; this rexpr reads version "
                           f"{REPORT_VERSION}: rerun with --update-baseline to write a new one", code="invalid_baseline")
    return data


def apply_baseline(document: dict[str, Any], baseline: dict[str, Any] | None,
                   outcomes: dict[str, str]) -> dict[str, Any]:
    """Mark each disagreement ``new`` or ``still``; list the baseline's disagreements that are
    ``fixed`` (the case ran on that engine and lowering and agreed) and those ``not rerun``
    (engine unavailable, case not selected, or it failed), which are not claimed fixed.
    ``outcomes`` maps a result key (engine|lowering|case_id, as ``disagreement_key``) to its
    outcome in this run."""
    old = {disagreement_key(d): d for d in (baseline or {}).get("disagreements", [])}
    now = {disagreement_key(d): d for d in document["disagreements"]}
    for key, item in now.items():
        item["drift"] = "still" if key in old else "new"
    fixed, not_rerun = [], []
    for key, item in old.items():
        if key in now:
            continue
        short = {k: item[k] for k in ("case_id", "engine", "lowering", "function", "expression")}
        if outcomes.get(key) == "agree":
            fixed.append(short)
        else:
            not_rerun.append({**short, "outcome": outcomes.get(key, "not run")})
    document["drift"] = {
        "baseline": (baseline or {}).get("finished"),
        "new": sum(1 for d in now.values() if d["drift"] == "new"),
        "still": sum(1 for d in now.values() if d["drift"] == "still"),
        "fixed": fixed,
        "not_rerun": not_rerun,
    }
    return document


def alert(document: dict[str, Any]) -> bool:
    """True when a scheduler should alert: any disagreement where the semantics must hold
    (faithful lowering, local backends, the reference against the corpora), or a native
    divergence the baseline did not have."""
    if document["faithful_disagreements"]:
        return True
    return any(d["lowering"] == "native" and d.get("drift", "new") == "new" for d in document["disagreements"])


def evidence_from(document: dict[str, Any], previous: dict[str, Any] | None = None,
                  complete: bool = True) -> dict[str, Any]:
    """The data file the planner reads: function x engine pairs whose faithful lowering disagreed.
    Pairs of engines this run did not reach under the faithful lowering are kept from
    ``previous``: an engine that was down is no evidence that it agrees. A run that was not
    ``complete`` (some corpora left out) only adds pairs."""
    ran = {e["name"] for e in document["engines"] if e.get("status") == "available"} \
        if "faithful" in document["lowerings"] and complete else set()
    pairs = {(d["function"], d["engine"]) for d in document["disagreements"] if d["lowering"] == "faithful"}
    for item in (previous or {}).get("faithful_disagreements", []):
        if item["engine"] not in ran:
            pairs.add((item["function"], item["engine"]))
    return {"about": "function x engine pairs where the faithful lowering disagreed with the reference in the "
                     "last differential run; refreshed by `rexpr diff --update-baseline`",
            "generated": document["finished"],
            "faithful_disagreements": [{"function": f, "engine": e} for f, e in sorted(pairs)]}
