"""Per-application state: settings, the response cache and the bounded pool that runs checks."""

from __future__ import annotations

import asyncio
import contextlib
import threading
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any, AsyncIterator, Callable, Hashable

from fastapi import Response

import rexpr
from rexpr.errors import InputProblem, RexprError
from service.cache import LruCache
from service.problems import PROBLEM_MEDIA_TYPE, from_rexpr_error
from service.responses import json_bytes
from service.settings import ServiceSettings


@dataclass(frozen=True)
class Rendered:
    """A finished response body, as cached."""

    status: int
    body: bytes
    media_type: str

    def response(self) -> Response:
        return Response(content=self.body, status_code=self.status, media_type=self.media_type)


def render(build: Callable[[], dict[str, Any]]) -> Rendered:
    """Run ``build``; a rexpr error becomes its problem response (deterministic, so cacheable)."""
    try:
        return Rendered(200, json_bytes(build()), "application/json")
    except RexprError as exc:
        body = from_rexpr_error(exc)
        return Rendered(body["status"], json_bytes(body), PROBLEM_MEDIA_TYPE)


def _retrieve(future: "asyncio.Future[Any]") -> None:
    if not future.cancelled():
        future.exception()  # retrieved, so an overrun's error is not logged as never retrieved


class ServiceState:
    def __init__(self, settings: ServiceSettings) -> None:
        self.settings = settings
        self.cache: LruCache[Rendered] = LruCache(settings.cache_entries)
        self.static: dict[str, Rendered] = {}
        self._building: dict[Hashable, asyncio.Future[Rendered]] = {}
        self._executor: ThreadPoolExecutor | None = None
        self._running_checks = 0
        self._slots_lock = threading.Lock()

    async def cached(self, key: Hashable, build: Callable[[], dict[str, Any]]) -> Response:
        """A hit is answered on the event loop. A miss is built in a thread, so a slow compile
        (lowering to four dialects can take a while) does not stall other connections, and
        concurrent misses on one key share a single build instead of each starting one."""
        hit = self.cache.get(key)
        if hit is not None:
            return hit.response()
        pending = self._building.get(key)
        if pending is None:
            pending = asyncio.ensure_future(asyncio.to_thread(render, build))
            self._building[key] = pending
            pending.add_done_callback(lambda done: self._finish_build(key, done))
        # Shielded: one caller going away must not cancel the build the others wait for.
        return (await asyncio.shield(pending)).response()

    def _finish_build(self, key: Hashable, done: "asyncio.Future[Rendered]") -> None:
        self._building.pop(key, None)
        if done.cancelled() or done.exception() is not None:
            return
        rendered = done.result()
        if rendered.status < 500:  # an unavailable part may come back; do not pin the failure
            self.cache.put(key, rendered)  # on the loop thread: the cache is never touched by threads

    def once(self, name: str, build: Callable[[], dict[str, Any]]) -> Response:
        hit = self.static.get(name)
        if hit is None:
            hit = render(build)
            if hit.status < 500:
                self.static[name] = hit
        return hit.response()

    async def run_check(self, job: Callable[[], dict[str, Any]]) -> dict[str, Any]:
        """Run a check in the pool, bounded in wall-clock time. A check that overruns keeps its
        slot until its thread ends, so overruns cannot pile up work behind the limit."""
        settings = self.settings
        with self._slots_lock:
            if self._running_checks >= settings.check_concurrency:
                raise InputProblem(f"{self._running_checks} checks are already running; retry shortly",
                                   code="too_many_requests")
            self._running_checks += 1
        try:
            if self._executor is None:
                self._executor = ThreadPoolExecutor(settings.check_concurrency, thread_name_prefix="rexpr-check")
            future = asyncio.get_running_loop().run_in_executor(self._executor, self._in_slot, job)
        except BaseException:
            self._release()
            raise
        future.add_done_callback(_retrieve)
        try:
            return await asyncio.wait_for(asyncio.shield(future), settings.check_seconds)
        except TimeoutError:
            raise InputProblem(f"the check took longer than {settings.check_seconds:g} s; send fewer rows "
                               "or engines, or a smaller expression", code="time_limit_exceeded") from None

    def _in_slot(self, job: Callable[[], dict[str, Any]]) -> dict[str, Any]:
        # Released by the thread itself, so the slot frees even if no event loop is left to tell.
        try:
            return job()
        finally:
            self._release()

    def _release(self) -> None:
        with self._slots_lock:
            self._running_checks -= 1

    @property
    def running_checks(self) -> int:
        return self._running_checks

    @contextlib.asynccontextmanager
    async def lifespan(self, app: Any) -> AsyncIterator[None]:
        # Build the parser tables now, so the first request does not pay for them.
        rexpr.compile("1", {})
        yield
        if self._executor is not None:
            self._executor.shutdown(wait=False, cancel_futures=True)
