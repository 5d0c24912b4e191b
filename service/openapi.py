"""The OpenAPI document: FastAPI's, with every error response typed as a problem+json body,
the X-Request-ID header on every response, and the bearer scheme when authentication is on."""

from __future__ import annotations

from typing import Any

from fastapi import FastAPI
from fastapi.openapi.utils import get_openapi

from service import API_VERSION
from service.problems import PROBLEM_MEDIA_TYPE

PROBLEM_REF = {"$ref": "#/components/schemas/Problem"}
DESCRIPTION = ("Compile rexpr expressions, plan filter pushdowns and check engines against the reference "
               "semantics. Errors are RFC 9457 problem details with a stable `code`.")
_REQUEST_ID = {"description": "the request's ID: the one sent, if well-formed, or a new one",
               "required": True, "schema": {"type": "string"}}


def build_openapi(app: FastAPI, *, auth: bool, public_paths: frozenset[str]) -> dict[str, Any]:
    doc = get_openapi(title="rexpr service", version=API_VERSION, description=DESCRIPTION, routes=app.routes)
    for path, item in doc.get("paths", {}).items():
        for operation in item.values():
            responses = operation.setdefault("responses", {})
            if auth and path not in public_paths:
                operation["security"] = [{"bearer": []}]
                responses["401"] = {"description": "A valid bearer token is required"}
            responses["default"] = {"description": "Any other problem"}
            for status, response in responses.items():
                if status == "default" or int(status) >= 400:
                    response["content"] = {PROBLEM_MEDIA_TYPE: {"schema": PROBLEM_REF}}
                response.setdefault("headers", {})["X-Request-ID"] = _REQUEST_ID
    components = doc.setdefault("components", {})
    for unused in ("HTTPValidationError", "ValidationError"):
        components.get("schemas", {}).pop(unused, None)
    if auth:
        components["securitySchemes"] = {"bearer": {"type": "http", "scheme": "bearer"}}
    return doc
