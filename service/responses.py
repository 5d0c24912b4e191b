"""JSON bodies with orjson, the fast path for every response."""

from __future__ import annotations

import json
from typing import Any

import orjson
from fastapi.responses import JSONResponse


def json_bytes(content: Any) -> bytes:
    try:
        return orjson.dumps(content)
    except orjson.JSONEncodeError:
        # orjson stops at 255 levels of nesting; a typed tree at the parser's depth limit has more
        # (each node is an object holding an args array). The standard library has no such limit.
        return json.dumps(content, ensure_ascii=False, allow_nan=False, separators=(",", ":")).encode()


class FastJSONResponse(JSONResponse):
    """JSONResponse rendered with orjson (with the stdlib fallback above)."""

    def render(self, content: Any) -> bytes:
        return json_bytes(content)


class ProblemResponse(FastJSONResponse):
    media_type = "application/problem+json"
