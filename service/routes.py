"""The HTTP operations under /v1. Each handler is thin: validate, look in the cache, call the
module that does the work."""

from __future__ import annotations

import importlib
from functools import lru_cache
from typing import Any

from fastapi import APIRouter, Response

import rexpr
from rexpr.errors import InputProblem
from service import API_PREFIX, API_VERSION
from service.cache import freeze
from service.catalogue import functions_payload
from service.checking import check_payload, compile_for_check
from service.compiling import compile_payload
from service.models import (CheckRequest, CheckResult, CompileRequest, CompileResult, FunctionsResult,
                            HealthResult, PlanRequest, PlanResult, Problem, ProblemTypeInfo, ProblemTypes,
                            ReportResult, VersionResult)
from service.planning import plan_payload
from service.problems import PROBLEM_TYPES, problem, type_uri
from service.report import report_payload
from service.responses import FastJSONResponse, ProblemResponse
from service.state import ServiceState, render

HEALTH_PATH = f"{API_PREFIX}/health"
# Optional parts of rexpr, reported by the health endpoint.
_COMPONENTS = {
    "sql_lowering": "rexpr.sql.lowering",
    "capabilities": "rexpr.sql.capabilities",
    "planner": "rexpr.planner.plan",
    "arrow": "rexpr.backends.arrow",
    "numpy": "rexpr.backends.numpy",
    "duckdb": "rexpr.engines.duckdb_runner",
    "sqlite": "rexpr.engines.sqlite_runner",
}


def errors(*statuses: int) -> dict[int | str, dict[str, Any]]:
    """OpenAPI entries for the problems an operation can return (every one has a body schema)."""
    common = (400, 413)
    return {status: {"model": Problem, "description": _describe(status)}
            for status in sorted(set(common + statuses))}


_DESCRIPTIONS = {
    400: "Malformed request: bad JSON, too deep, or bad headers",
    404: "No such resource",
    413: "The body is larger than the limit",
    415: "The body is not application/json",
    422: "The expression, schema, rows or a request field is invalid; see code",
    429: "Too many checks are running; retry after the Retry-After seconds",
    503: "A part of rexpr this operation needs is not installed",
}


def _describe(status: int) -> str:
    return _DESCRIPTIONS.get(status, "Problem")


@lru_cache(maxsize=1)
def components() -> dict[str, bool]:
    found = {}
    for name, module in _COMPONENTS.items():
        try:
            importlib.import_module(module)
            found[name] = True
        except ImportError:
            found[name] = False
    return found


def build_router(state: ServiceState) -> APIRouter:
    router = APIRouter(prefix=API_PREFIX, default_response_class=FastJSONResponse)
    settings = state.settings

    @router.post("/compile", response_model=CompileResult, responses=errors(415, 422),
                 operation_id="compile", summary="Compile an expression against a schema; SQL per engine")
    async def compile_expression(body: CompileRequest) -> Response:
        key = ("compile", body.expression, freeze(body.schema_), tuple(body.engines), body.lowering)
        return await state.cached(key, lambda: compile_payload(body.expression, body.schema_, body.engines,
                                                         body.lowering))

    @router.post("/plan", response_model=PlanResult, responses=errors(415, 422, 503),
                 operation_id="plan", summary="Plan a filter pushdown for a source: pushed SQL and residual")
    async def plan_pushdown(body: PlanRequest) -> Response:
        columns = tuple(body.columns) if body.columns is not None else None
        key = ("plan", body.expression, freeze(body.schema_), body.source, columns)
        return await state.cached(key, lambda: plan_payload(body.expression, body.schema_, body.source, columns))

    @router.post("/check", response_model=CheckResult, responses=errors(415, 422, 429),
                 operation_id="check", summary="Evaluate on rows or edge values; compare embedded engines")
    async def check_expression(body: CheckRequest) -> Response:
        if body.rows is not None and len(body.rows) > settings.max_rows:
            raise InputProblem(f"{len(body.rows):,} rows; this service checks at most {settings.max_rows:,}",
                               code="invalid_input")
        compiled = compile_for_check(body.expression, body.schema_)
        payload = await state.run_check(
            lambda: check_payload(compiled, body.rows, body.engines, settings.max_edge_rows))
        return FastJSONResponse(payload)

    @router.get("/functions", response_model=FunctionsResult, responses=errors(),
                operation_id="functions", summary="The function catalogue with the engine capability table")
    async def list_functions() -> Response:
        return state.once("functions", functions_payload)

    @router.get("/report", response_model=ReportResult, responses=errors(503),
                operation_id="report", summary="Summary of the latest differential report")
    async def latest_report() -> Response:
        return render(report_payload).response()  # read each time: the report may be refreshed

    @router.get("/health", response_model=HealthResult, responses=errors(),
                operation_id="health", summary="Liveness, and which optional parts can be loaded")
    async def health() -> Response:
        return FastJSONResponse({"status": "ok", "components": components()})

    @router.get("/version", response_model=VersionResult, responses=errors(),
                operation_id="version", summary="Versions of rexpr and of this API")
    async def version() -> Response:
        return FastJSONResponse({"rexpr": rexpr.__version__, "api": API_VERSION})

    @router.get("/problems", response_model=ProblemTypes, responses=errors(),
                operation_id="problem_types", summary="Every problem type this service returns")
    async def problem_types() -> Response:
        return FastJSONResponse({"problems": [_problem_info(code) for code in PROBLEM_TYPES]})

    @router.get("/problems/{code}", response_model=ProblemTypeInfo, responses=errors(404),
                operation_id="problem_type", summary="One problem type, by code")
    async def problem_type(code: str) -> Response:
        if code not in PROBLEM_TYPES:
            return ProblemResponse(problem("not_found", f"no problem type {code[:80]!r}"), status_code=404)
        return FastJSONResponse(_problem_info(code))

    return router


def _problem_info(code: str) -> dict[str, Any]:
    known = PROBLEM_TYPES[code]
    return {"type": type_uri(code), "code": code, "status": known.status, "title": known.title}
