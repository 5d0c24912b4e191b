"""Getting a real engine runner in a test, or a clear skip.

A server engine that is not reachable skips its tests with the reason, except when
``REXPR_REQUIRE_SERVERS=1`` (set in CI): then the test fails, so a missing server can never
turn into a quietly green run. Mark server tests with ``@pytest.mark.servers``.
"""

from __future__ import annotations

import os
from typing import Iterator

import pytest

from rexpr.engines import ENGINE_NAMES, get_engine
from rexpr.engines.base import Runner

SERVER_ENGINES = ("postgres", "mariadb")
REQUIRE_VARIABLE = "REXPR_REQUIRE_SERVERS"


def servers_required() -> bool:
    return os.environ.get(REQUIRE_VARIABLE, "") == "1"


def open_runner(name: str) -> Runner:
    """A connected runner for ``name``; skips (or fails under REXPR_REQUIRE_SERVERS=1) when the
    engine is not available."""
    runner = get_engine(name)
    status = runner.availability()
    if not status.available:
        runner.close()
        message = f"{name} is not available: {status.reason}"
        if servers_required():
            pytest.fail(f"{message} ({REQUIRE_VARIABLE}=1, so this is a failure, not a skip)")
        pytest.skip(message)
    return runner


def engine_params(names: tuple[str, ...] = ENGINE_NAMES) -> list:
    """pytest params for engine names, with the ``servers`` mark on the server engines."""
    return [pytest.param(n, id=n, marks=[pytest.mark.servers] if n in SERVER_ENGINES else []) for n in names]


@pytest.fixture(params=engine_params())
def runner(request: pytest.FixtureRequest) -> Iterator[Runner]:
    """Each engine in turn, connected; closed after the test."""
    opened = open_runner(request.param)
    try:
        yield opened
    finally:
        opened.close()
