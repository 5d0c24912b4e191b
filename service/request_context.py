"""Outermost middleware: a request ID on every response, one JSON access-log line per request,
and the last line of defence that turns an unexpected exception into a bare problem."""

from __future__ import annotations

import datetime as dt
import logging
import re
import time
import uuid
from typing import Any

import orjson

from service.problems import problem, send_problem

ACCESS_LOG = logging.getLogger("rexpr.service.access")
ERROR_LOG = logging.getLogger("rexpr.service.error")
REQUEST_ID_HEADER = b"x-request-id"
# Echo only IDs that are safe in logs and headers; anything else gets a fresh one.
_VALID_ID = re.compile(rb"[A-Za-z0-9._:\-]{1,128}")
_MAX_LOGGED_PATH = 512


def incoming_request_id(headers: list[tuple[bytes, bytes]]) -> bytes | None:
    for name, value in headers:
        if name == REQUEST_ID_HEADER:
            return value if _VALID_ID.fullmatch(value) else None
    return None


class RequestContext:
    def __init__(self, app: Any, *, access_log: bool = True) -> None:
        self.app = app
        self.access_log = access_log

    async def __call__(self, scope: dict, receive: Any, send: Any) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        request_id = incoming_request_id(scope["headers"]) or uuid.uuid4().hex.encode()
        scope.setdefault("state", {})["request_id"] = request_id.decode()
        started = time.perf_counter()
        outcome = {"status": 0, "bytes": 0}

        async def send_with_id(message: dict) -> None:
            if message["type"] == "http.response.start":
                outcome["status"] = message["status"]
                message = {**message, "headers": [*message.get("headers", ()), (REQUEST_ID_HEADER, request_id)]}
            elif message["type"] == "http.response.body":
                outcome["bytes"] += len(message.get("body", b""))
            await send(message)

        try:
            await self.app(scope, receive, send_with_id)
        except Exception:  # noqa: BLE001 - nothing may reach the client as a traceback
            ERROR_LOG.exception("unhandled error in request %s", request_id.decode())
            if outcome["status"] == 0:
                await send_problem(send_with_id, problem(
                    "internal_error", "the service failed on this request; quote the X-Request-ID "
                                      "response header when reporting it"))
        finally:
            if self.access_log and ACCESS_LOG.isEnabledFor(logging.INFO):
                ACCESS_LOG.info(_access_line(scope, request_id, outcome, time.perf_counter() - started))


def _access_line(scope: dict, request_id: bytes, outcome: dict, seconds: float) -> str:
    client = scope.get("client")
    return orjson.dumps({
        "time": dt.datetime.now(dt.timezone.utc).isoformat(timespec="milliseconds"),
        "request_id": request_id.decode(),
        "method": scope.get("method"),
        "path": scope.get("path", "")[:_MAX_LOGGED_PATH],
        "status": outcome["status"],
        "duration_ms": round(seconds * 1000, 3),
        "bytes_out": outcome["bytes"],
        "client": client[0] if client else None,
    }).decode()
