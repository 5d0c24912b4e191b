"""The compile operation: typed tree, type, fields read and SQL per engine, as a JSON-ready dict."""

from __future__ import annotations

from typing import Any, Sequence

import rexpr
from rexpr.errors import EngineUnavailable, InputProblem, NotPushable
from rexpr.schema import Schema
from rexpr.typed import Typed, to_json

NATIVE_WARNING = ("native SQL is each engine's plain mapping and may not keep rexpr's semantics; "
                  "push only faithful SQL")


def schema_from_request(spec: dict[str, Any]) -> Schema:
    # The request's schema is always the bare mapping, so build it directly rather than through
    # Schema.from_json, which would unwrap a lone field named "fields".
    return Schema.from_mapping(spec)


def lower_for(tree: Typed, engine: str, lowering: str) -> dict[str, Any]:
    try:
        from rexpr.sql.lowering import to_sql
    except ImportError:
        return {"status": "unavailable", "reason": "the SQL lowering is not installed in this build"}
    try:
        return {"status": "ok", "sql": to_sql(tree, engine, lowering)}  # type: ignore[arg-type]
    except NotPushable as exc:
        return {"status": "not_pushable", "reason": exc.message}
    except EngineUnavailable as exc:
        return {"status": "unavailable", "reason": exc.message}
    except InputProblem as exc:
        if exc.code != "unknown_engine":
            raise
        # The request can only name engines this service knows, so this dialect is not installed.
        return {"status": "unavailable", "reason": exc.message}


def evidence_warnings(functions: Sequence[str], engines: Sequence[str]) -> list[str]:
    """Function x engine pairs the last differential report saw disagree."""
    from rexpr.planner.evidence import load_evidence

    evidence = load_evidence()
    return [f"{fid} disagreed with the reference on {engine} in the last differential report"
            for engine in engines for fid in functions if evidence.disagrees(fid, engine)]


def compile_payload(expression: str, schema_spec: dict[str, Any], engines: Sequence[str],
                    lowering: str) -> dict[str, Any]:
    compiled = rexpr.compile(expression, schema_from_request(schema_spec))
    engines = tuple(dict.fromkeys(engines))
    functions = compiled.functions
    warnings = [NATIVE_WARNING] if lowering == "native" and engines else []
    warnings += evidence_warnings(functions, engines)
    return {
        "expression": compiled.text,
        "canonical": compiled.canonical_text(),
        "type": compiled.type.name,
        "nullable": compiled.nullable,
        "fields": list(compiled.fields),
        "functions": list(functions),
        "tree": to_json(compiled.tree),
        "lowering": lowering,
        "sql": {engine: lower_for(compiled.tree, engine, lowering) for engine in engines},
        "warnings": warnings,
    }
