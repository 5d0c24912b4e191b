"""The plan operation: what a source runs, what stays local, and why (rexpr.planner)."""

from __future__ import annotations

import logging
from typing import Any, Sequence

import rexpr
from rexpr.errors import EngineUnavailable, InputProblem
from service.compiling import schema_from_request


def component_unavailable(what: str) -> EngineUnavailable:
    logging.getLogger("rexpr.service.error").warning("%s cannot be imported", what, exc_info=True)
    return EngineUnavailable(f"{what} is not installed in this build of the service",
                             code="component_unavailable")


def plan_payload(expression: str, schema_spec: dict[str, Any], source: str,
                 columns: Sequence[str] | None) -> dict[str, Any]:
    schema = schema_from_request(schema_spec)
    rexpr.compile(expression, schema)  # expression errors are the caller's, whatever is installed
    try:
        from rexpr.planner.plan import plan
    except ImportError:
        raise component_unavailable("the pushdown planner") from None
    try:
        result = plan(expression, schema, source, list(columns) if columns is not None else None)
    except ImportError:
        # The planner imports the SQL lowering and the Arrow backend only when it needs them.
        raise component_unavailable(f"a part the planner needs for {source}") from None
    except InputProblem as exc:
        if exc.code != "unknown_engine":
            raise
        # The request can name only known sources, so that source's SQL dialect is missing.
        raise component_unavailable(f"the {source} SQL dialect") from None
    return result.to_json()
