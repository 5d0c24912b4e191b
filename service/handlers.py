"""Exception handlers: every error FastAPI or rexpr raises becomes an RFC 9457 problem."""

from __future__ import annotations

import logging
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from starlette.exceptions import HTTPException as StarletteHTTPException

from rexpr.errors import RexprError
from service.problems import code_for_status, from_rexpr_error, problem
from service.responses import ProblemResponse

MAX_ISSUES = 20
RETRY_AFTER_SECONDS = "1"


def _respond(body: dict[str, Any], headers: dict[str, str] | None = None) -> ProblemResponse:
    return ProblemResponse(body, status_code=body["status"], headers=headers)


async def on_rexpr_error(request: Request, exc: Exception) -> ProblemResponse:
    assert isinstance(exc, RexprError)
    body = from_rexpr_error(exc)
    headers = {"Retry-After": RETRY_AFTER_SECONDS} if body["status"] in (429, 503) else None
    return _respond(body, headers)


def _issue(error: dict[str, Any]) -> dict[str, Any]:
    # Only location, message and type: pydantic's "input" and "ctx" could echo large or odd values.
    loc = [part if isinstance(part, (str, int)) else str(part) for part in error.get("loc", ())]
    return {"loc": loc, "message": str(error.get("msg", "invalid")), "type": str(error.get("type", "invalid"))}


async def on_validation_error(request: Request, exc: Exception) -> ProblemResponse:
    assert isinstance(exc, RequestValidationError)
    issues = [_issue(e) for e in exc.errors()[:MAX_ISSUES]]
    first = issues[0] if issues else None
    where = ".".join(str(p) for p in first["loc"]) if first else "body"
    detail = f"{where}: {first['message']}" if first else "the request does not match the operation's schema"
    return _respond(problem("invalid_request", detail, errors=issues))


async def on_http_error(request: Request, exc: Exception) -> ProblemResponse:
    assert isinstance(exc, StarletteHTTPException)
    status = exc.status_code if 400 <= exc.status_code < 600 else 500
    detail = str(exc.detail) if status < 500 else "the service failed on this request"
    return _respond(problem(code_for_status(status), detail, status=status), dict(exc.headers or {}) or None)


async def on_unexpected(request: Request, exc: Exception) -> ProblemResponse:
    logging.getLogger("rexpr.service.error").error("unhandled error", exc_info=exc)
    return _respond(problem("internal_error", "the service failed on this request; quote the X-Request-ID "
                                              "response header when reporting it"))


def install(app: FastAPI) -> None:
    app.add_exception_handler(RexprError, on_rexpr_error)
    app.add_exception_handler(RequestValidationError, on_validation_error)
    app.add_exception_handler(StarletteHTTPException, on_http_error)
    app.add_exception_handler(Exception, on_unexpected)
