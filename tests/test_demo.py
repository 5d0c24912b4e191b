"""The demo (``rexpr demo``): every source it runs on, and what it says when a server is missing.

Oracles: row counts are computed here with plain Python over the generated rows, following
ISO/IEC 9075-2 (a WHERE condition keeps a row only when it is true; a comparison with NULL is
unknown, 8.2 <comparison predicate>), the default trim character being <space> (ISO/IEC 9075-2
6.31) and IEEE 754 comparisons (NaN compares false, 5.11); Python's str and float follow these.
What an engine stores is read back from the real engine (no mocks). The server tests skip with
the reason when a server is not reachable, and fail instead under REXPR_REQUIRE_SERVERS=1.
"""

from __future__ import annotations

import datetime as dt
import math
import re
import socket
import sqlite3

import pyarrow as pa
import pytest

from engines_support import open_runner
from rexpr.cli.main import main
from rexpr.demo.holding import as_held
from rexpr.demo.run import FILTERS, run_demo
from rexpr.demo.scenario import port_calls
from rexpr.demo.servers import DEMO_TABLE, SERVER_ENGINES, ServerCopy, drop_copy, open_copy
from rexpr.engines import session_for_connection

ROWS = 4000  # small enough for a test; every copy then holds all the rows


def _closed_port() -> int:
    """A local TCP port nothing listens on (bound, then released)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _blocks(lines: list[str]) -> dict[str, dict[str, list[str]]]:
    """The demo output per filter title, per source name."""
    text = "\n".join(lines).splitlines()
    out: dict[str, dict[str, list[str]]] = {}
    title = source = None
    for i, line in enumerate(text):
        if line == "=" * 78:
            title, source = text[i + 1], None
            if title.startswith("summary"):
                break
            out[title] = {}
            continue
        match = re.fullmatch(r"  \[(\w+)\]", line)
        if match and title is not None:
            source = match.group(1)
            out[title][source] = []
        elif source is not None and title is not None:
            out[title][source].append(line)
    return out


def _kept(block: list[str]) -> int:
    [line] = [line for line in block if " kept " in line]
    return int(re.search(r"kept ([\d,]+) rows", line).group(1).replace(",", ""))  # type: ignore[union-attr]


def _expected_counts(table: pa.Table) -> dict[str, int]:
    """Rows the first two demo filters keep, by plain Python (see the module docstring)."""
    rows = table.to_pylist()
    late_heavy = sum(1 for r in rows if r["tonnage"] is not None and r["eta"] >= dt.datetime(2026, 10, 1)
                     and r["tonnage"] > 40000)
    deep_kestrel = sum(1 for r in rows if r["vessel"] is not None and r["vessel"].strip(" ") == "Kestrel"
                       and r["draft_m"] is not None and r["draft_m"] * 2 > 11.5)
    return {FILTERS[0][0]: late_heavy, FILTERS[1][0]: deep_kestrel}


def _servers_or_skip() -> None:
    for engine in SERVER_ENGINES:
        open_runner(engine).close()  # skips, or fails under REXPR_REQUIRE_SERVERS=1


@pytest.mark.servers
def test_demo_runs_every_filter_on_all_five_sources() -> None:
    _servers_or_skip()
    lines: list[str] = []
    assert run_demo(rows=ROWS, say=lines.append) == 0
    blocks = _blocks(lines)
    assert list(blocks) == [title for title, _ in FILTERS]
    expected = _expected_counts(port_calls(ROWS))
    for title, per_source in blocks.items():
        assert list(per_source) == ["dataset", "duckdb", "sqlite", "postgres", "mariadb"], title
        for source, block in per_source.items():
            [same] = [line for line in block if "same rows as evaluating the whole filter locally" in line]
            assert "locally: yes;" in same, (title, source, same)
            assert "DISAGREE" not in same and "NOT CHECKED" not in same and "REFUSED" not in same, same
            if title in expected:
                assert _kept(block) == expected[title], (title, source)
    # IEEE 754 isNaN (math.isnan): the NaN drafts the generated rows hold, which SQLite and
    # MariaDB store as NULL (docs/engines.md); the demo must say so, with the right count.
    nans = sum(1 for v in port_calls(ROWS).column("draft_m").to_pylist() if v is not None and math.isnan(v))
    assert nans > 0
    for source in ("sqlite", "mariadb"):
        assert any(line.startswith(f"  {source} copy: draft_m: {nans:,} NaN stored as NULL") for line in lines)
    assert not any(line.startswith("  postgres copy:") for line in lines)  # double precision holds NaN


@pytest.mark.servers
@pytest.mark.parametrize("engine", SERVER_ENGINES)
def test_server_copy_holds_what_the_demo_says_and_is_dropped(engine: str) -> None:
    open_runner(engine).close()
    table = port_calls(2000)
    copy = open_copy(engine, table)
    assert isinstance(copy, ServerCopy), copy
    try:
        stored = session_for_connection(engine, copy.connection).fetch_arrow(
            f"SELECT * FROM {DEMO_TABLE} ORDER BY call_id", table.schema)
        # What the server returns, and what the demo says it holds, differ from the generated rows
        # only where IEEE 754 isNaN holds: MariaDB DOUBLE has no NaN (MariaDB knowledge base, from
        # memory), PostgreSQL double precision has (PostgreSQL manual 8.1.3, from memory).
        for shown in (stored, copy.held):
            assert shown.schema == table.schema
            for name in table.column_names:
                for original, held in zip(table.column(name).to_pylist(), shown.column(name).to_pylist()):
                    if isinstance(original, float) and math.isnan(original):
                        assert held is None if engine == "mariadb" else math.isnan(held)
                    else:
                        assert held == original, (name, original, held)
    finally:
        drop_copy(copy)
    # No permanent table of that name is left behind (the copy is a temporary table).
    runner = open_runner(engine)
    try:
        session = session_for_connection(engine, runner._connection)
        left = session.fetch_arrow(f"SELECT COUNT(*) AS n FROM information_schema.tables WHERE table_name = "
                                   f"'{DEMO_TABLE}'", pa.schema([pa.field("n", pa.int64())]))
        assert left.column("n").to_pylist() == [0]
    finally:
        runner.close()


def test_unreachable_servers_are_skipped_with_one_line(monkeypatch: pytest.MonkeyPatch) -> None:
    port = _closed_port()
    for prefix in ("REXPR_POSTGRES_", "REXPR_MARIADB_"):
        monkeypatch.setenv(prefix + "HOST", "127.0.0.1")
        monkeypatch.setenv(prefix + "PORT", str(port))
    lines: list[str] = []
    assert run_demo(rows=1000, say=lines.append) == 0
    for engine in SERVER_ENGINES:
        [line] = [line for line in lines if line.startswith(f"{engine}:")]
        assert line.startswith(f"{engine}: not reachable at 127.0.0.1:{port} (") and line.endswith("); skipped"), line
    blocks = _blocks(lines)
    assert all(list(per_source) == ["dataset", "duckdb", "sqlite"] for per_source in blocks.values())
    assert lines[-1].startswith("finished in ")


def test_no_servers_option_leaves_them_out(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["demo", "--rows", "1000", "--no-servers"]) == 0
    out = capsys.readouterr().out
    assert "postgres, mariadb: skipped (--no-servers)" in out
    assert "[postgres]" not in out and "[mariadb]" not in out and "[sqlite]" in out


def test_sqlite_copy_is_described_as_sqlite_stores_it() -> None:
    values = [1.5, math.nan, math.inf, -math.inf, -0.0, 0.0, None]
    con = sqlite3.connect(":memory:")  # the real engine says what it stores
    con.execute("CREATE TABLE t (x REAL)")
    con.executemany("INSERT INTO t VALUES (?)", [(v,) for v in values])
    stored = [row[0] for row in con.execute("SELECT x FROM t ORDER BY rowid")]
    con.close()
    held, notes = as_held(pa.table({"x": pa.array(values, pa.float64())}), "sqlite")
    got = held.column("x").to_pylist()
    assert got == stored
    # IEEE 754 copySign: the sign of each zero, which == cannot see.
    assert [math.copysign(1, v) for v in got if v == 0] == [math.copysign(1, v) for v in stored if v == 0]
    assert notes == ("x: 1 -0.0 stored as 0.0, 1 NaN stored as NULL (SQLite REAL has no NaN)",)
