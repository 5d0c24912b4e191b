"""Copies of the demo's port calls on the PostgreSQL and MariaDB servers, when they are reachable.

Connection settings are the engine runners' own (rexpr/engines/settings.py: the defaults, the
``REXPR_ENGINES_CONFIG`` file, the ``REXPR_POSTGRES_*`` / ``REXPR_MARIADB_*`` variables), and so
are the column types, so the pushed SQL meets the storage its lowering was written for.

Each copy is a TEMPORARY table on the very connection the planner is then given (the planner
runs its SQL on the caller's connection, so a temporary table is visible to it). The server
drops a temporary table when the session ends, whatever becomes of this process, and the demo
drops it explicitly on the way out. Creating and loading happen in one transaction, so an
interrupted load leaves no rows behind.
"""

from __future__ import annotations

import importlib.util
import time
from dataclasses import dataclass
from typing import Any

import pyarrow as pa

from rexpr.demo.holding import as_held
from rexpr.engines import get_engine, runner_class, session_for_connection
from rexpr.engines.mariadb_runner import COLUMN_TYPES as MARIADB_TYPES
from rexpr.engines.postgres_runner import COLUMN_TYPES as POSTGRES_TYPES
from rexpr.engines.settings import server_settings
from rexpr.engines.statement import create_table, drop_table, quoted
from rexpr.errors import EngineUnavailable, InputProblem
from rexpr.schema import Schema

SERVER_ENGINES = ("postgres", "mariadb")
DEMO_TABLE = "rexpr_demo_port_calls"
_DRIVERS = {"postgres": "psycopg", "mariadb": "pymysql"}
_MARIADB_BATCH = 20_000  # rows per executemany; PyMySQL packs them into multi-row INSERTs


@dataclass(frozen=True)
class ServerCopy:
    engine: str
    connection: Any        # open, with the runner's session settings applied; holds the table
    where: str             # user@host:port/database, no password
    held: pa.Table         # the rows as the server stores them
    notes: tuple[str, ...]  # values stored altered (see rexpr.demo.holding)
    seconds: float         # time to create and load the table


@dataclass(frozen=True)
class Skipped:
    engine: str
    line: str              # one line for the user: what is missing and that the demo goes on


def open_copy(engine: str, table: pa.Table) -> ServerCopy | Skipped:
    """Connect to ``engine`` and load ``table`` into the demo table; Skipped says why not."""
    if importlib.util.find_spec(_DRIVERS[engine]) is None:
        return Skipped(engine, f"{engine}: the {_DRIVERS[engine]} driver is not installed "
                               "(pip install -e '.[servers]'); skipped")
    try:
        settings = server_settings(engine)
    except InputProblem as exc:
        return Skipped(engine, f"{engine}: connection settings are invalid ({exc.message}); skipped")
    try:
        # The runner's own connect: same timeouts, same driver options, same error text.
        connection = get_engine(engine, settings=settings).connect()
    except EngineUnavailable as exc:
        reason = exc.message.partition(" is not reachable: ")[2] or exc.message
        if reason.startswith("(") and reason.endswith(")"):  # PyMySQL shows its error as a tuple
            reason = reason[1:-1]
        return Skipped(engine, f"{engine}: not reachable at {settings.host}:{settings.port} ({reason}); skipped")
    started = time.perf_counter()
    try:
        session_for_connection(engine, connection)  # the session settings the pushed SQL assumes
        held, notes = as_held(table, engine)
        (_load_postgres if engine == "postgres" else _load_mariadb)(connection, held)
    except Exception as exc:  # noqa: BLE001 - a server that refuses the load is skipped, with its reason
        close_copy_connection(engine, connection)
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        return Skipped(engine, f"{engine}: cannot load the demo table at {settings.describe()} ({first}); skipped")
    except BaseException:  # interrupted: closing the session discards the temporary table
        close_copy_connection(engine, connection)
        raise
    return ServerCopy(engine, connection, settings.describe(), held, notes, time.perf_counter() - started)


def drop_copy(copy: ServerCopy) -> None:
    """Drop the demo table and close the connection (the server would drop it at session end anyway)."""
    close_copy_connection(copy.engine, copy.connection)


def close_copy_connection(engine: str, connection: Any) -> None:
    try:
        statement = drop_table(DEMO_TABLE, runner_class(engine).dialect)
        if engine == "postgres":  # autocommit; the load's transaction block has already ended
            connection.execute(statement)
        else:
            with connection.cursor() as cursor:
                cursor.execute(statement)
    except Exception:  # noqa: BLE001 - a lost connection has lost its temporary table with it
        pass
    finally:
        try:
            connection.close()
        except Exception:  # noqa: BLE001 - already closed
            pass


def _columns(table: pa.Table, types: dict) -> list[tuple[str, str]]:
    return [(name, types[data_type.kind]) for name, data_type in Schema.from_arrow(table.schema).fields]


def _load_postgres(connection: Any, table: pa.Table) -> None:
    names = ", ".join(quoted(n, "postgres") for n in table.column_names)
    with connection.transaction():
        connection.execute(create_table(DEMO_TABLE, _columns(table, POSTGRES_TYPES), "postgres"))
        # Text COPY: psycopg writes floats with repr (exact, NaN and ±inf included) and escapes text.
        with connection.cursor() as cursor, cursor.copy(
                f"COPY {quoted(DEMO_TABLE, 'postgres')} ({names}) FROM STDIN") as copy:
            for batch in table.to_batches(50_000):
                for row in zip(*(column.to_pylist() for column in batch.columns)):
                    copy.write_row(row)


def _load_mariadb(connection: Any, table: pa.Table) -> None:
    # The INSERT names no columns, so field names never pass through PyMySQL's % formatting;
    # the table's columns are in the table's order.
    insert = f"INSERT INTO {quoted(DEMO_TABLE, 'mysql')} VALUES ({', '.join('%s' for _ in table.column_names)})"
    connection.begin()
    try:
        with connection.cursor() as cursor:
            cursor.execute(create_table(DEMO_TABLE, _columns(table, MARIADB_TYPES), "mysql"))
            for batch in table.to_batches(_MARIADB_BATCH):
                cursor.executemany(insert, list(zip(*(column.to_pylist() for column in batch.columns))))
        connection.commit()
    except BaseException:
        try:
            connection.rollback()
        except Exception:  # noqa: BLE001 - an interrupted packet breaks the connection; keep the first error
            pass
        raise
