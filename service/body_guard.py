"""Request bodies: size limit before reading, JSON media type, well-formed UTF-8 JSON, bounded
nesting. Runs before FastAPI parses anything, so hostile bodies never reach a route."""

from __future__ import annotations

from typing import Any

import orjson

from service.problems import problem, send_problem

_BODY_METHODS = frozenset({"POST", "PUT", "PATCH"})


def is_json_media_type(value: bytes) -> bool:
    """``application/json`` or ``application/*+json`` (RFC 6839 section 3.1), charset utf-8 if named:
    JSON exchanged between systems is UTF-8 (RFC 8259 section 8.1)."""
    media, _, params = value.decode("latin-1").partition(";")
    media = media.strip().lower()
    if not (media == "application/json" or (media.startswith("application/") and media.endswith("+json"))):
        return False
    for param in params.split(";"):
        name, _, param_value = param.partition("=")
        if name.strip().lower() == "charset" and param_value.strip().strip('"').lower() not in ("utf-8", "utf8"):
            return False
    return True


def exceeds_depth(value: object, limit: int) -> bool:
    """True when arrays/objects nest deeper than ``limit`` (iterative: no recursion to exhaust)."""
    stack = [(value, 1)]
    while stack:
        item, depth = stack.pop()
        children = item.values() if isinstance(item, dict) else item
        if depth > limit:
            return True
        stack.extend((c, depth + 1) for c in children if isinstance(c, (dict, list)))  # type: ignore[union-attr]
    return False


def _header(headers: list[tuple[bytes, bytes]], wanted: bytes) -> bytes | None:
    for name, value in headers:
        if name == wanted:
            return value
    return None


class BodyGuard:
    def __init__(self, app: Any, *, max_bytes: int, max_depth: int) -> None:
        self.app = app
        self.max_bytes = max_bytes
        self.max_depth = max_depth

    async def __call__(self, scope: dict, receive: Any, send: Any) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        headers = scope["headers"]
        length_header = _header(headers, b"content-length")
        if length_header is not None:
            if not length_header.isdigit():
                await send_problem(send, problem("bad_request", "Content-Length is not a number"))
                return
            if int(length_header) > self.max_bytes:
                await send_problem(send, self._too_large())
                return
        if scope["method"] not in _BODY_METHODS:
            await self.app(scope, receive, send)
            return
        content_type = _header(headers, b"content-type")
        if content_type is None or not is_json_media_type(content_type):
            await send_problem(send, problem("unsupported_media_type",
                                             "send the body as application/json (UTF-8)"))
            return
        body = await self._read_limited(receive)
        if body is None:
            await send_problem(send, self._too_large())
            return
        if body:
            failure = self._json_failure(body)
            if failure is not None:
                await send_problem(send, failure)
                return
        await self.app(scope, _replay(body, receive), send)

    def _too_large(self) -> dict:
        return problem("body_too_large", f"the body is larger than {self.max_bytes:,} bytes")

    async def _read_limited(self, receive: Any) -> bytes | None:
        """The whole body, or None as soon as it passes the limit (the rest is never read)."""
        chunks: list[bytes] = []
        size = 0
        while True:
            message = await receive()
            if message["type"] != "http.request":  # the client went away
                return b"".join(chunks)
            chunk = message.get("body", b"")
            size += len(chunk)
            if size > self.max_bytes:
                return None
            chunks.append(chunk)
            if not message.get("more_body", False):
                return b"".join(chunks)

    def _json_failure(self, body: bytes) -> dict | None:
        try:
            # orjson rejects invalid UTF-8, lone surrogates, NaN/Infinity literals and nesting past
            # 1,024 levels without recursing in Python.
            value = orjson.loads(body)
        except orjson.JSONDecodeError as exc:
            if str(exc).startswith("depth limit exceeded"):
                return problem("json_too_deep", f"the body nests deeper than {self.max_depth} levels")
            return problem("malformed_json", f"the body is not valid JSON: {exc}")
        # Depth d needs at least 2d bytes, so short bodies cannot exceed the limit.
        if len(body) > 2 * self.max_depth and exceeds_depth(value, self.max_depth):
            return problem("json_too_deep", f"the body nests deeper than {self.max_depth} levels")
        return None


def _replay(body: bytes, receive: Any) -> Any:
    sent = False

    async def replay() -> dict:
        nonlocal sent
        if not sent:
            sent = True
            return {"type": "http.request", "body": body, "more_body": False}
        return await receive()  # later calls wait for the disconnect, as the server would

    return replay
