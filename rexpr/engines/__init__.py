"""SQL engine runners, by name: duckdb, sqlite, postgres, mariadb.

``get_engine(name)`` returns a new runner (see :mod:`rexpr.engines.base` for the interface);
``session_for_connection(name, connection)`` runs SQL on a connection the caller opened.
"""

from __future__ import annotations

import difflib
import importlib
from typing import TYPE_CHECKING, Any

from rexpr.engines.base import Runner
from rexpr.errors import InputProblem

if TYPE_CHECKING:
    from rexpr.engines.borrowed import BorrowedSession

_RUNNERS = {
    "duckdb": ("rexpr.engines.duckdb_runner", "DuckDBRunner"),
    "sqlite": ("rexpr.engines.sqlite_runner", "SQLiteRunner"),
    "postgres": ("rexpr.engines.postgres_runner", "PostgresRunner"),
    "mariadb": ("rexpr.engines.mariadb_runner", "MariaDBRunner"),
}
ENGINE_NAMES = tuple(_RUNNERS)


def runner_class(name: str) -> type[Runner]:
    entry = _RUNNERS.get(name)
    if entry is None:
        close = difflib.get_close_matches(name, ENGINE_NAMES, n=1)
        hint = f"; did you mean {close[0]!r}?" if close else f"; known engines: {', '.join(ENGINE_NAMES)}"
        raise InputProblem(f"unknown engine {name!r}{hint}", code="unknown_engine")
    module, attribute = entry
    return getattr(importlib.import_module(module), attribute)


def get_engine(name: str, **options: Any) -> Runner:
    """A new, not yet connected runner; ``options`` go to its constructor (e.g. ``settings=``)."""
    return runner_class(name)(**options)


def session_for_connection(name: str, connection: Any) -> "BorrowedSession":
    from rexpr.engines.borrowed import BorrowedSession

    return BorrowedSession(runner_class(name)().adopt(connection))


__all__ = ["ENGINE_NAMES", "Runner", "get_engine", "runner_class", "session_for_connection"]
