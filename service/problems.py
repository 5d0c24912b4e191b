"""Problem details (RFC 9457) for every error the service returns, keyed by rexpr's stable codes.

Each body has ``type``, ``title``, ``status`` and ``detail`` (RFC 9457 section 3.1) plus our
``code``; expression errors add ``span`` (start, end, line, column) and ``hint``. Nothing from
the server's internals (paths, tracebacks, exception names) goes into a body.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from rexpr.errors import EngineUnavailable, RexprError
from service import API_PREFIX
from service.responses import json_bytes

PROBLEM_MEDIA_TYPE = "application/problem+json"


@dataclass(frozen=True)
class ProblemType:
    code: str
    status: int
    title: str


_TYPES = (
    # the expression and its schema (rexpr.errors codes)
    ProblemType("syntax_error", 422, "The expression is not valid syntax"),
    ProblemType("too_long", 422, "The expression is longer than the limit"),
    ProblemType("too_deep", 422, "The expression nests deeper than the limit"),
    ProblemType("unknown_field", 422, "The expression names a field the schema lacks"),
    ProblemType("unknown_function", 422, "The expression calls an unknown function"),
    ProblemType("type_mismatch", 422, "The expression does not type-check"),
    ProblemType("wrong_arity", 422, "A function got the wrong number of arguments"),
    ProblemType("invalid_literal", 422, "A literal in the expression is invalid"),
    ProblemType("invalid_schema", 422, "The schema is invalid"),
    ProblemType("invalid_input", 422, "The input is invalid"),
    ProblemType("not_a_predicate", 422, "A filter must be a bool expression"),
    ProblemType("unknown_engine", 422, "Unknown engine"),
    ProblemType("unknown_source", 422, "Unknown source"),
    ProblemType("unknown_backend", 422, "Unknown backend"),
    ProblemType("not_pushable", 422, "The expression cannot be pushed to that engine"),
    ProblemType("evaluation_error", 422, "A row raised an error"),
    ProblemType("unknown_row_field", 422, "A row names a field the schema lacks"),
    ProblemType("time_limit_exceeded", 422, "The request took longer than the service allows"),
    # the HTTP request itself
    ProblemType("malformed_json", 400, "The body is not valid JSON"),
    ProblemType("json_too_deep", 400, "The body nests deeper than the limit"),
    ProblemType("bad_request", 400, "The request is malformed"),
    ProblemType("invalid_request", 422, "The request does not match the operation's schema"),
    ProblemType("unauthorized", 401, "A valid bearer token is required"),
    ProblemType("not_found", 404, "No such resource"),
    ProblemType("method_not_allowed", 405, "Method not allowed on this resource"),
    ProblemType("body_too_large", 413, "The body is larger than the limit"),
    ProblemType("unsupported_media_type", 415, "The body must be application/json"),
    ProblemType("too_many_requests", 429, "Too many checks are running; retry shortly"),
    # the service
    ProblemType("engine_unavailable", 503, "The engine is not available"),
    ProblemType("component_unavailable", 503, "A part of rexpr this operation needs is not installed"),
    ProblemType("internal_error", 500, "Internal error"),
)
PROBLEM_TYPES: dict[str, ProblemType] = {t.code: t for t in _TYPES}
_STATUS_CODES = {400: "bad_request", 401: "unauthorized", 404: "not_found", 405: "method_not_allowed",
                 413: "body_too_large", 415: "unsupported_media_type", 422: "invalid_request",
                 429: "too_many_requests", 500: "internal_error", 503: "component_unavailable"}


def type_uri(code: str) -> str:
    # A relative reference (RFC 9457 section 3.1.1 allows it); it resolves to this service's own
    # description of the problem type.
    return f"{API_PREFIX}/problems/{code}"


def problem(code: str, detail: str, *, status: int | None = None, **extra: Any) -> dict[str, Any]:
    known = PROBLEM_TYPES.get(code)
    title = known.title if known else code.replace("_", " ").capitalize()
    return {"type": type_uri(code), "title": title, "status": status or (known.status if known else 422),
            "detail": detail, "code": code, **{k: v for k, v in extra.items() if v is not None}}


def code_for_status(status: int) -> str:
    return _STATUS_CODES.get(status, "bad_request" if 400 <= status < 500 else "internal_error")


def status_of(error: RexprError) -> int:
    known = PROBLEM_TYPES.get(error.code)
    if known is not None:
        return known.status
    # A code added to rexpr after this table: an unavailable engine is the service's condition,
    # everything else is about what the request asked for.
    return 503 if isinstance(error, EngineUnavailable) else 422


def from_rexpr_error(error: RexprError) -> dict[str, Any]:
    data = error.to_dict()
    detail = data.pop("message")
    code = data.pop("code")
    return problem(code, detail, status=status_of(error), **data)


async def send_problem(send: Any, body: dict[str, Any], headers: tuple[tuple[bytes, bytes], ...] = ()) -> None:
    """Send a whole problem response on a raw ASGI channel (used by the middleware)."""
    content = json_bytes(body)
    await send({"type": "http.response.start", "status": body["status"],
                "headers": [(b"content-type", PROBLEM_MEDIA_TYPE.encode()),
                            (b"content-length", str(len(content)).encode()), *headers]})
    await send({"type": "http.response.body", "body": content})
