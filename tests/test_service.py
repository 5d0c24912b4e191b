"""The HTTP service: endpoints, auth on and off, hostile inputs, and a schemathesis run against its
own OpenAPI document. Everything goes through the real application (FastAPI's TestClient) or a
real uvicorn server on 127.0.0.1; nothing is mocked.

Oracles: RFC 9457 (problem details), RFC 6750 (bearer tokens), RFC 9110 (HTTP semantics),
RFC 8259 (JSON), RFC 6839 (+json media types), IEEE 754 and ISO/IEC 9075-2 for the few values
checked, and the project's own reference evaluator and compiler for everything computed.
"""

from __future__ import annotations

import collections
import datetime as dt
import importlib
import json
import logging
import os
import re
import signal
import socket
import subprocess
import sys
import time
import warnings
from pathlib import Path

import pytest

pytest.importorskip("fastapi")
pytest.importorskip("orjson")

with warnings.catch_warnings():  # starlette's note about the httpx client it still uses
    warnings.simplefilter("ignore")
    from fastapi.testclient import TestClient

import pyarrow as pa  # noqa: E402

import rexpr  # noqa: E402
from rexpr.catalogue import CAST_RULES, ENTRIES  # noqa: E402
from rexpr.errors import InputProblem  # noqa: E402
from rexpr.typed import to_json  # noqa: E402
from rexpr.values import to_json_value  # noqa: E402
from service.app import create_app  # noqa: E402
from service.server import check_bind, is_loopback  # noqa: E402
from service.settings import ServiceSettings, load_tokens  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
SCHEMA = {"price": "float64", "qty": "int64", "name": "string", "flag": "bool", "day": "date"}
TOKEN = "t0ken-for-tests-0123456789"
PROBLEM = "application/problem+json"


def importable(module: str) -> bool:
    try:
        importlib.import_module(module)
        return True
    except ImportError:
        return False


LOWERING = importable("rexpr.sql.lowering")


def dialect_installed(engine: str) -> bool:
    return importable(f"rexpr.sql.dialects.{engine}")


@pytest.fixture(scope="module")
def client():
    with TestClient(create_app(), raise_server_exceptions=False) as c:
        yield c


def assert_problem(response, status: int, code: str) -> dict:
    """RFC 9457 section 3: media type application/problem+json; members type, title, status,
    detail; ``status`` equals the HTTP status code (section 3.1.2)."""
    assert response.status_code == status, response.text
    assert response.headers["content-type"].startswith(PROBLEM)
    body = response.json()
    assert body["status"] == status
    assert body["code"] == code
    for member in ("type", "title", "detail"):
        assert isinstance(body[member], str) and body[member]
    assert "Traceback" not in response.text
    return body


# ------------------------------------------------------------------------------------ compile
def test_compile_matches_the_compiler(client):
    text = "price * qty > 100.0 and trim(name) = 'ab'"
    response = client.post("/v1/compile", json={"expression": text, "schema": SCHEMA})
    assert response.status_code == 200
    assert response.headers["content-type"] == "application/json"
    body = response.json()
    compiled = rexpr.compile(text, SCHEMA)  # the project's compiler is the oracle
    assert body["tree"] == json.loads(json.dumps(to_json(compiled.tree)))
    assert (body["type"], body["nullable"]) == (compiled.type.name, compiled.nullable) == ("bool", True)
    assert body["fields"] == ["price", "qty", "name"]  # first-use order, as written
    assert body["canonical"] == compiled.canonical_text()
    assert set(body["sql"]) == {"duckdb", "sqlite", "postgres", "mariadb"}


def test_compile_sql_per_engine(client):
    body = client.post("/v1/compile", json={"expression": "qty + 1 > 2", "schema": SCHEMA,
                                            "engines": ["duckdb", "postgres"]}).json()
    assert list(body["sql"]) == ["duckdb", "postgres"]
    if not LOWERING:
        assert {v["status"] for v in body["sql"].values()} == {"unavailable"}
        return
    from rexpr.errors import NotPushable
    from rexpr.sql.lowering import to_sql

    tree = rexpr.compile("qty + 1 > 2", SCHEMA).tree
    for engine, result in body["sql"].items():
        try:
            expected = to_sql(tree, engine, "faithful")
        except NotPushable as exc:
            assert result == {"status": "not_pushable", "reason": exc.message}
        except InputProblem as exc:  # that engine's dialect is not written yet
            assert exc.code == "unknown_engine" and result == {"status": "unavailable", "reason": exc.message}
        else:
            assert result == {"status": "ok", "sql": expected}


def test_native_lowering_warns(client):
    body = client.post("/v1/compile", json={"expression": "qty > 1", "schema": SCHEMA, "lowering": "native",
                                            "engines": ["sqlite"]}).json()
    assert body["lowering"] == "native"
    assert any("native" in w for w in body["warnings"])


def test_expression_error_has_span_with_line_and_column(client):
    # The '*' is the 3rd character of the 2nd line (counted by hand).
    response = client.post("/v1/compile", json={"expression": "qty +\n  * 2", "schema": SCHEMA})
    body = assert_problem(response, 422, "syntax_error")
    assert body["span"]["line"] == 2 and body["span"]["column"] == 3
    assert body["type"] == "/v1/problems/syntax_error"
    # The problem type is dereferenceable (RFC 9457 section 3.1.1: it SHOULD document the type).
    described = client.get(body["type"]).json()
    assert described["code"] == "syntax_error" and described["status"] == 422


@pytest.mark.parametrize("expression, code", [
    ("nope + 1", "unknown_field"),
    ("name + 1", "type_mismatch"),
    ("trim()", "wrong_arity"),
])
def test_type_errors_are_problems(client, expression, code):
    assert_problem(client.post("/v1/compile", json={"expression": expression, "schema": SCHEMA}), 422, code)


def test_invalid_schema_is_a_problem(client):
    response = client.post("/v1/compile", json={"expression": "a", "schema": {"a": "decimal(10)"}})
    assert_problem(response, 422, "invalid_schema")


def test_a_field_named_fields_is_an_ordinary_field(client):
    schema = {"fields": {"port": "string"}, "b": "int64"}
    body = client.post("/v1/compile", json={"expression": "b > 1 and fields.port = 'x'", "schema": schema}).json()
    assert body["fields"] == ["b", "fields.port"]


def test_request_validation_is_a_problem(client):
    response = client.post("/v1/compile", json={"expression": "1", "schema": {}, "engines": ["oracle"]})
    body = assert_problem(response, 422, "invalid_request")
    assert body["errors"][0]["loc"][:2] == ["body", "engines"]
    response = client.post("/v1/compile", json={"expression": "1", "schema": {}, "dsn": "postgres://x"})
    assert_problem(response, 422, "invalid_request")  # no way to pass a connection string


def test_compile_results_are_cached_and_bounded():
    app = create_app(ServiceSettings(cache_entries=2))
    state = app.state.service
    with TestClient(app) as c:
        first = c.post("/v1/compile", json={"expression": "qty > 1", "schema": SCHEMA})
        second = c.post("/v1/compile", json={"expression": "qty > 1", "schema": SCHEMA})
        assert first.content == second.content
        assert state.cache.stats.hits == 1
        c.post("/v1/compile", json={"expression": "qty > 1", "schema": SCHEMA, "lowering": "native"})
        assert state.cache.stats.hits == 1  # options are part of the key
        c.post("/v1/compile", json={"expression": "qty > 2", "schema": SCHEMA})
        assert len(state.cache) == 2
        errors = [c.post("/v1/compile", json={"expression": "qty >", "schema": SCHEMA}) for _ in range(2)]
        assert errors[0].content == errors[1].content and errors[1].status_code == 422


def test_concurrent_misses_share_one_build():
    import asyncio

    import httpx

    from rexpr.api import _compile_cached

    app = create_app()
    request = {"expression": "qty * 3 > 17 and name <> 'single-flight'", "schema": SCHEMA}

    async def burst() -> list[httpx.Response]:
        transport = httpx.ASGITransport(app=app)
        async with httpx.AsyncClient(transport=transport, base_url="http://test") as c:
            return await asyncio.gather(*(c.post("/v1/compile", json=request) for _ in range(12)))

    before = _compile_cached.cache_info().misses
    responses = asyncio.run(burst())
    assert {r.status_code for r in responses} == {200} and len({r.content for r in responses}) == 1
    assert _compile_cached.cache_info().misses - before == 1  # the compiler ran once for twelve requests


# --------------------------------------------------------------------------------------- plan
def test_plan_for_a_dataset(client):
    if not importable("rexpr.backends.arrow"):
        pytest.skip("the Arrow backend is not installed")
    from rexpr.planner.plan import plan

    request = {"expression": "qty > 1 and price < 10.0", "schema": SCHEMA, "source": "dataset",
               "columns": ["name"]}
    response = client.post("/v1/plan", json=request)
    assert response.status_code == 200
    expected = plan(request["expression"], SCHEMA, "dataset", ["name"]).to_json()
    assert response.json() == json.loads(json.dumps(expected))


@pytest.mark.parametrize("source", ["duckdb", "sqlite", "postgres", "mariadb"])
def test_plan_for_a_sql_source(client, source):
    response = client.post("/v1/plan", json={"expression": "qty > 1", "schema": SCHEMA, "source": source})
    if not (LOWERING and dialect_installed(source)):
        assert_problem(response, 503, "component_unavailable")
        assert response.headers["retry-after"]
        return
    from rexpr.planner.plan import plan

    assert response.status_code == 200, response.text
    assert response.json() == json.loads(json.dumps(plan("qty > 1", SCHEMA, source).to_json()))


def test_plan_reports_expression_errors_before_availability(client):
    response = client.post("/v1/plan", json={"expression": "qty >", "schema": SCHEMA, "source": "postgres"})
    assert_problem(response, 422, "syntax_error")
    response = client.post("/v1/plan", json={"expression": "qty + 1", "schema": SCHEMA, "source": "dataset"})
    assert_problem(response, 422, "not_a_predicate")


def test_plan_accepts_no_connection_or_path(client):
    for extra in ({"source": "postgres://user@host/db"}, {"source": "dataset", "path": "/etc/passwd"}):
        request = {"expression": "qty > 1", "schema": SCHEMA, "source": "dataset", **extra}
        assert_problem(client.post("/v1/plan", json=request), 422, "invalid_request")


# -------------------------------------------------------------------------------------- check
def test_check_on_rows_gives_the_reference_values(client):
    rows = [{"price": 1.5, "qty": 2}, {"price": "NaN", "qty": 0}, {"price": None, "qty": 9223372036854775807},
            {"qty": 4}]
    text = "qty * 2"
    response = client.post("/v1/check", json={"expression": text, "schema": SCHEMA, "rows": rows})
    assert response.status_code == 200, response.text
    body = response.json()
    assert body["rows"] == 4 and body["rows_source"] == "request"
    # int64 overflow is an error (ISO/IEC 9075-2 6.27 and SQLSTATE 22003); 2 * 2 = 4; null stays null.
    assert body["values"][0] == 4 and body["values"][1] == 0 and body["values"][3] == 8
    assert body["values"][2] == {"error": "out_of_range", "detail": body["values"][2]["detail"]}
    table = pa.table({"price": [1.5, float("nan"), None, None], "qty": [2, 0, 9223372036854775807, 4]})
    expected = rexpr.compile(text, SCHEMA).evaluate(table, backend="reference").to_pylist()
    assert body["values"] == [to_json_value(v) for v in expected]
    assert body["results"]["reference"]["status"] == "agree"
    for engine, result in body["results"].items():
        assert result["status"] in ("agree", "disagree", "unavailable", "not_pushable"), engine
        if result["status"] == "disagree":
            assert result["disagreement_count"] == len(result["disagreements"]) > 0


def test_check_nan_and_signed_zero(client):
    rows = [{"price": "NaN"}, {"price": -0.0}]
    body = client.post("/v1/check", json={"expression": "price <> price or price = 0.0", "schema": SCHEMA,
                                          "rows": rows, "engines": ["reference"]}).json()
    # IEEE 754-2019 5.11: NaN is unordered, so NaN <> NaN is true; -0 = +0 is true.
    assert body["values"] == [True, True]


def test_check_strings_with_nul_count_code_points(client):
    rows = [{"name": "a\u0000b"}, {"name": "\U0001F600"}]
    body = client.post("/v1/check", json={"expression": "length(name)", "schema": SCHEMA, "rows": rows,
                                          "engines": ["reference"]}).json()
    # CHAR_LENGTH counts characters (ISO/IEC 9075-2 6.28); U+0000 is one, U+1F600 one (Unicode 15, 3.9).
    assert body["values"] == [3, 1]


def test_check_on_edge_values(client):
    body = client.post("/v1/check", json={"expression": "trim(name) = 'ab'", "schema": SCHEMA}).json()
    from rexpr.rows import edge_table

    assert body["rows_source"] == "edge_values" and body["values"] is None
    assert body["rows"] == edge_table(rexpr.schema.Schema.from_mapping(SCHEMA), {"name"}).num_rows
    assert set(body["results"]) == {"reference", "arrow", "numpy", "duckdb", "sqlite"}


def test_check_refuses_server_engines_and_unknown_row_fields(client):
    request = {"expression": "qty > 1", "schema": SCHEMA, "engines": ["postgres"]}
    assert_problem(client.post("/v1/check", json=request), 422, "invalid_request")
    request = {"expression": "qty > 1", "schema": SCHEMA, "rows": [{"qyt": 1}]}
    assert_problem(client.post("/v1/check", json=request), 422, "unknown_row_field")
    request = {"expression": "qty > 1", "schema": SCHEMA, "rows": [{"qty": "one"}]}
    assert_problem(client.post("/v1/check", json=request), 422, "invalid_input")


def test_check_is_bounded_in_rows(client):
    rows = [{"qty": 1}] * 10_001
    body = assert_problem(client.post("/v1/check", json={"expression": "qty", "schema": SCHEMA, "rows": rows}),
                          422, "invalid_request")
    assert body["errors"][0]["loc"] == ["body", "rows"]


def test_check_is_bounded_in_time_and_concurrency():
    app = create_app(ServiceSettings(check_seconds=0.05, check_concurrency=1))
    heavy = {"expression": "qty * 2 + qty % 7 - abs(qty - 5000) > 3 and qty between 10 and 9000 "
                           "or qty in (1, 2, 3, 4, 5)",
             "schema": SCHEMA, "rows": [{"qty": i} for i in range(10_000)]}
    with TestClient(app) as c:
        assert_problem(c.post("/v1/check", json=heavy), 422, "time_limit_exceeded")
        # The overrunning check still holds the only slot: the next one is turned away.
        busy = c.post("/v1/check", json={"expression": "qty", "schema": SCHEMA, "rows": [{"qty": 1}]})
        assert_problem(busy, 429, "too_many_requests")
        assert busy.headers["retry-after"].isdigit()  # RFC 9110 10.2.3: delay-seconds
        deadline = time.monotonic() + 60
        while app.state.service.running_checks and time.monotonic() < deadline:
            time.sleep(0.05)
        assert app.state.service.running_checks == 0  # the slot comes back when the thread ends


# ------------------------------------------------------------------ catalogue, report, health
def test_functions_list_the_catalogue(client):
    body = client.get("/v1/functions").json()
    assert [f["id"] for f in body["functions"]] == [e.id for e in ENTRIES]
    assert len(body["functions"]) == 51  # the catalogue's 51 function ids (docs, project brief)
    assert len(body["casts"]) == len(CAST_RULES)
    assert body["capabilities_available"] == importable("rexpr.sql.capabilities")
    if not body["capabilities_available"]:
        assert all(f["capabilities"] is None for f in body["functions"]) and body["note"]


def test_report_is_the_bundled_file(client):
    data = json.loads((ROOT / "rexpr" / "data" / "disagreements.json").read_text(encoding="utf-8"))
    body = client.get("/v1/report").json()
    assert body["disagreement_count"] == len(data["faithful_disagreements"])
    assert body["generated"] == data["generated"]


def test_health_and_version(client):
    assert client.get("/v1/health").json()["status"] == "ok"
    assert client.get("/v1/version").json() == {"rexpr": rexpr.__version__, "api": "1"}


def test_request_id_is_echoed_or_generated(client):
    assert client.get("/v1/version", headers={"X-Request-ID": "abc-123.x"}).headers["x-request-id"] == "abc-123.x"
    for hostile in ("a b", "x" * 129, "é"):
        echoed = client.get("/v1/version", headers={"X-Request-ID": hostile.encode("utf-8")})
        assert re.fullmatch(r"[0-9a-f]{32}", echoed.headers["x-request-id"])


def test_access_log_is_one_json_line(client, caplog):
    with caplog.at_level(logging.INFO, logger="rexpr.service.access"):
        client.get("/v1/version", headers={"X-Request-ID": "log-me"})
    lines = [json.loads(r.getMessage()) for r in caplog.records if r.name == "rexpr.service.access"]
    line = next(item for item in lines if item["request_id"] == "log-me")
    assert (line["method"], line["path"], line["status"]) == ("GET", "/v1/version", 200)
    dt.datetime.fromisoformat(line["time"])  # RFC 3339 timestamp


def test_no_traceback_or_internals_on_an_unexpected_error():
    app = create_app()

    @app.get("/v1/boom")
    async def boom() -> None:
        raise RuntimeError("secret-internal-detail at /srv/rexpr/secret.py")

    with TestClient(app, raise_server_exceptions=False) as c:
        response = c.get("/v1/boom")
    body = assert_problem(response, 500, "internal_error")
    assert "secret" not in response.text and "RuntimeError" not in response.text
    assert response.headers["x-request-id"] and body["detail"]


def test_unknown_routes_and_methods_are_problems(client):
    assert_problem(client.get("/v1/nothing"), 404, "not_found")
    assert_problem(client.delete("/v1/compile"), 405, "method_not_allowed")
    assert_problem(client.get("/v1/problems/nope"), 404, "not_found")


# ----------------------------------------------------------------------------------------- auth
def test_auth_off_needs_no_header(client):
    assert client.post("/v1/compile", json={"expression": "1", "schema": {}}).status_code == 200
    assert "securitySchemes" not in client.get("/v1/openapi.json").json().get("components", {})


def test_auth_on():
    app = create_app(ServiceSettings(tokens=(TOKEN.encode(),)))
    request = {"expression": "1", "schema": {}}
    with TestClient(app) as c:
        missing = c.post("/v1/compile", json=request)
        assert_problem(missing, 401, "unauthorized")
        # RFC 6750 section 3: the challenge names the Bearer scheme; invalid_token when one was sent.
        assert missing.headers["www-authenticate"].startswith("Bearer")
        wrong = c.post("/v1/compile", json=request, headers={"Authorization": f"Bearer {TOKEN}x"})
        assert_problem(wrong, 401, "unauthorized")
        assert 'error="invalid_token"' in wrong.headers["www-authenticate"]
        assert_problem(c.post("/v1/compile", json=request, headers={"Authorization": f"Basic {TOKEN}"}),
                       401, "unauthorized")
        assert c.post("/v1/compile", json=request, headers={"Authorization": f"Bearer {TOKEN}"}).status_code == 200
        # The auth-scheme is case-insensitive (RFC 9110 section 11.1).
        assert c.post("/v1/compile", json=request, headers={"Authorization": f"bearer {TOKEN}"}).status_code == 200
        assert c.get("/v1/health").status_code == 200  # health stays public for load balancers
        assert_problem(c.get("/v1/openapi.json"), 401, "unauthorized")
        document = c.get("/v1/openapi.json", headers={"Authorization": f"Bearer {TOKEN}"}).json()
        assert document["components"]["securitySchemes"]["bearer"] == {"type": "http", "scheme": "bearer"}
        assert document["paths"]["/v1/compile"]["post"]["security"] == [{"bearer": []}]


def test_tokens_from_variable_and_file(tmp_path):
    token_file = tmp_path / "tokens"
    token_file.write_text(f"# service tokens\n{TOKEN}2\n\n", encoding="utf-8")
    tokens = load_tokens({"REXPR_SERVICE_TOKENS": f"{TOKEN}, {TOKEN}1", "REXPR_SERVICE_TOKENS_FILE": str(token_file)})
    assert tokens == (TOKEN.encode(), f"{TOKEN}1".encode(), f"{TOKEN}2".encode())
    assert load_tokens({}) == ()


@pytest.mark.parametrize("env", [
    {"REXPR_SERVICE_TOKENS": ""},                     # named but empty: not a silent "auth off"
    {"REXPR_SERVICE_TOKENS": "short"},
    {"REXPR_SERVICE_TOKENS_FILE": "/nonexistent/rexpr-tokens"},
])
def test_bad_token_configuration_is_refused(env):
    with pytest.raises(InputProblem) as caught:
        load_tokens(env)
    assert caught.value.code == "invalid_service_config"


def test_without_tokens_only_loopback_binds(monkeypatch):
    # RFC 1122 3.2.1.3 and RFC 4291 2.5.3: 127.0.0.0/8 and ::1 are loopback.
    assert is_loopback("127.0.0.1") and is_loopback("127.1.2.3") and is_loopback("::1") and is_loopback("localhost")
    assert not is_loopback("0.0.0.0") and not is_loopback("10.0.0.1") and not is_loopback("example.invalid")
    with pytest.raises(InputProblem) as caught:
        check_bind("0.0.0.0", auth_enabled=False)
    assert caught.value.code == "unsafe_bind"
    check_bind("0.0.0.0", auth_enabled=True)
    monkeypatch.delenv("REXPR_SERVICE_TOKENS", raising=False)
    monkeypatch.delenv("REXPR_SERVICE_TOKENS_FILE", raising=False)
    from service.server import serve

    with pytest.raises(InputProblem):
        serve(host="0.0.0.0", port=1)  # refused before anything binds


def test_cli_arguments_and_refusal(monkeypatch):
    import argparse

    from service import cli

    parser = argparse.ArgumentParser()
    cli.add_arguments(parser)
    args = parser.parse_args([])
    assert (args.host, args.port, args.workers) == ("127.0.0.1", 8787, 1)
    monkeypatch.delenv("REXPR_SERVICE_TOKENS", raising=False)
    monkeypatch.delenv("REXPR_SERVICE_TOKENS_FILE", raising=False)
    with pytest.raises(InputProblem) as caught:
        cli.run(parser.parse_args(["--host", "0.0.0.0", "--port", "1"]))
    assert caught.value.code == "unsafe_bind"


# ------------------------------------------------------------------------------ hostile inputs
def test_huge_body_by_content_length(client):
    body = b'{"expression": "' + b"1" * (2 << 20) + b'", "schema": {}}'
    assert_problem(client.post("/v1/compile", content=body, headers={"content-type": "application/json"}),
                   413, "body_too_large")


def test_deep_nesting_in_the_expression(client):
    for text in ("(" * 10_000 + "qty" + ")" * 10_000, "not " * 10_000 + "flag", "-" * 10_000 + "qty"):
        assert_problem(client.post("/v1/compile", json={"expression": text, "schema": SCHEMA}), 422, "too_deep")


def test_too_long_expression(client):
    text = "qty" + " + qty" * 20_000
    body = assert_problem(client.post("/v1/compile", json={"expression": text, "schema": SCHEMA}), 422, "too_long")
    assert body["span"]["line"] == 1


@pytest.mark.parametrize("depth", [33, 1_000, 10_000])
def test_deep_nesting_in_the_json_body(client, depth):
    nested = '{"a": ' * depth + '"int64"' + "}" * depth
    body = '{"expression": "1", "schema": ' + nested + "}"
    response = client.post("/v1/compile", content=body.encode(), headers={"content-type": "application/json"})
    assert_problem(response, 400, "json_too_deep")
    array = ("[" * depth + "]" * depth).encode()
    assert_problem(client.post("/v1/check", content=array, headers={"content-type": "application/json"}),
                   400, "json_too_deep")


def test_struct_schemas_within_the_depth_limit_work(client):
    schema = {"ship": {"berth": {"slot": "int64"}}}
    body = client.post("/v1/compile", json={"expression": "ship.berth.slot > 1", "schema": schema}).json()
    assert body["fields"] == ["ship.berth.slot"]


def test_nul_bytes(client):
    body = assert_problem(client.post("/v1/compile", json={"expression": "qty\u0000", "schema": SCHEMA}),
                          422, "syntax_error")
    assert body["span"]["column"] == 4
    assert_problem(client.post("/v1/compile", json={"expression": "a", "schema": {"a\u0000": "int64"}}),
                   422, "invalid_schema")
    raw = b'{"expression": "1", "schema": {}}\x00'
    assert_problem(client.post("/v1/compile", content=raw, headers={"content-type": "application/json"}),
                   400, "malformed_json")


@pytest.mark.parametrize("raw", [
    b'{"expression": "\xff", "schema": {}}',              # not UTF-8 (RFC 8259 section 8.1)
    b'{"expression": "\xed\xa0\x80", "schema": {}}',      # an encoded surrogate is not UTF-8 (RFC 3629 3)
    b'{"expression": "\\ud800", "schema": {}}',           # a lone surrogate escape is no character
    b'{"expression": 1e400, "schema": {}}',
    b'{"expression": NaN, "schema": {}}',                 # NaN is not JSON (RFC 8259 section 6)
    b'{"expression": "1", "schema": {}',
    b"\xef\xbb\xbf{}",                                    # RFC 8259 8.1: no byte order mark
])
def test_malformed_json(client, raw):
    assert_problem(client.post("/v1/compile", content=raw, headers={"content-type": "application/json"}),
                   400, "malformed_json")


@pytest.mark.parametrize("content_type", [None, "text/plain", "application/x-www-form-urlencoded",
                                          "application/json; charset=latin-1", "multipart/form-data"])
def test_wrong_content_types(client, content_type):
    headers = {"content-type": content_type} if content_type else {}
    response = client.post("/v1/compile", content=b'{"expression": "1", "schema": {}}', headers=headers)
    assert_problem(response, 415, "unsupported_media_type")


def test_json_suffix_media_types_are_json(client):
    # RFC 6839 section 3.1: "+json" names a JSON-based format.
    for content_type in ("application/json; charset=utf-8", "application/vnd.rexpr+json"):
        response = client.post("/v1/compile", content=b'{"expression": "1", "schema": {}}',
                               headers={"content-type": content_type})
        assert response.status_code == 200


def test_wrong_json_shapes(client):
    for body in ([], "x", 1, {"expression": None, "schema": {}}, {"expression": "1", "schema": []},
                 {"expression": "1", "schema": {"a": 5}}, {"expression": "1", "schema": {"a": ["int64"]}}):
        response = client.post("/v1/compile", json=body)
        assert response.status_code == 422, body
        assert response.headers["content-type"].startswith(PROBLEM)


# ------------------------------------------------------------------------------- schemathesis
def test_schemathesis_over_the_openapi_document():
    """At least 1,000 generated requests (valid and invalid) over every operation: no 5xx, and
    every status, media type, header and body conforms to the service's own OpenAPI document."""
    schemathesis = pytest.importorskip("schemathesis")
    from hypothesis import HealthCheck, given, settings, strategies as st
    from schemathesis import GenerationMode
    from schemathesis.specs.openapi.checks import (content_type_conformance, response_headers_conformance,
                                                   response_schema_conformance, status_code_conformance)

    # Short checks keep each case bounded in time; the service enforces it, not the test.
    app = create_app(ServiceSettings(check_seconds=2.0, max_edge_rows=512, access_log=False))
    schema = schemathesis.openapi.from_asgi("/v1/openapi.json", app)
    checks = [status_code_conformance, content_type_conformance, response_headers_conformance,
              response_schema_conformance]
    seen: collections.Counter = collections.Counter()
    budgets = {"POST": 400, "GET": 40}
    for result in schema.get_all_operations():
        operation = result.ok()
        strategy = st.one_of(operation.as_strategy(GenerationMode.POSITIVE),
                             operation.as_strategy(GenerationMode.NEGATIVE))

        @settings(max_examples=budgets[operation.method.upper()], deadline=dt.timedelta(seconds=5), database=None,
                  suppress_health_check=list(HealthCheck))
        @given(case=strategy)
        def run(case) -> None:
            response = case.call_and_validate(checks=checks)
            seen[(operation.label, response.status_code)] += 1
            if response.status_code >= 500:
                # The one documented 5xx: a part of rexpr not installed in this build (a SQL
                # dialect the planner needs). Anything else is a failure.
                assert response.status_code == 503, response.text
                assert response.json()["code"] == "component_unavailable"
                assert operation.path == "/v1/plan" and not dialect_installed(case.body["source"])

        run()
    total = sum(seen.values())
    assert total >= 1_000, seen
    assert all(status < 500 or status == 503 for _, status in seen)


# -------------------------------------------------------------------------------- real server
def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


@pytest.fixture(scope="module")
def server():
    """The service as ``serve()`` runs it: uvicorn, uvloop, httptools, on 127.0.0.1."""
    port = _free_port()
    env = {k: v for k, v in os.environ.items() if not k.startswith("REXPR_SERVICE_")}
    env["PYTHONPATH"] = str(ROOT)
    process = subprocess.Popen([sys.executable, "-c", f"from service.server import serve; serve(port={port})"],
                               cwd=ROOT, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        try:
            with socket.create_connection(("127.0.0.1", port), timeout=1) as conn:
                conn.sendall(b"GET /v1/health HTTP/1.1\r\nHost: x\r\nConnection: close\r\n\r\n")
                if conn.recv(64).startswith(b"HTTP/1.1 200"):
                    break
        except OSError:
            time.sleep(0.1)
    else:
        process.kill()
        pytest.fail("the service did not start: " + process.communicate()[1][-2000:])
    yield port, process
    if process.poll() is None:
        process.kill()
        process.communicate()


def _read_response(conn: socket.socket) -> tuple[int, bytes]:
    data = b""
    while b"\r\n\r\n" not in data:
        chunk = conn.recv(65536)
        if not chunk:
            break
        data += chunk
    head, _, rest = data.partition(b"\r\n\r\n")
    status = int(head.split(b" ")[1])
    length = int(re.search(rb"(?i)content-length: (\d+)", head).group(1))
    while len(rest) < length:
        rest += conn.recv(65536)
    return status, rest[:length]


def test_server_keep_alive_round_trips(server):
    port, _ = server
    body = b'{"expression": "qty > 1", "schema": {"qty": "int64"}}'
    request = (b"POST /v1/compile HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\n"
               b"Content-Length: " + str(len(body)).encode() + b"\r\n\r\n" + body)
    with socket.create_connection(("127.0.0.1", port), timeout=10) as conn:
        for _ in range(3):  # one connection, several requests (RFC 9112 9.3 persistence)
            conn.sendall(request)
            status, content = _read_response(conn)
            assert status == 200 and json.loads(content)["type"] == "bool"


def test_server_stops_reading_an_oversized_streamed_body(server):
    """A chunked body (no Content-Length) is cut off at the limit: the 413 arrives while the
    client is still sending, long before the 64 MiB it offers."""
    port, _ = server
    with socket.create_connection(("127.0.0.1", port), timeout=20) as conn:
        conn.sendall(b"POST /v1/compile HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\n"
                     b"Transfer-Encoding: chunked\r\n\r\n")
        chunk = b"f" * 65536
        framed = f"{len(chunk):x}\r\n".encode() + chunk + b"\r\n"  # RFC 9112 section 7.1
        sent = 0
        conn.settimeout(0.0)
        response = b""
        while sent < 64 << 20:
            try:
                conn.sendall(framed)
                sent += len(chunk)
            except (BlockingIOError, BrokenPipeError, ConnectionResetError):
                pass
            try:
                response += conn.recv(65536)
            except BlockingIOError:
                pass
            if b"\r\n\r\n" in response:
                break
            time.sleep(0.001)
    assert response.startswith(b"HTTP/1.1 413"), response[:200]
    assert sent < 8 << 20


def test_server_logs_json_lines_and_shuts_down_gracefully(server):
    """SIGTERM lets a request in flight finish, then the server exits."""
    port, process = server
    rows = ",".join(f'{{"qty": {i}}}' for i in range(10_000))
    body = ('{"expression": "qty * 2 + qty % 7 - abs(qty - 5000) > 3", "schema": {"qty": "int64"}, '
            f'"engines": ["reference", "arrow", "numpy"], "rows": [{rows}]}}').encode()
    with socket.create_connection(("127.0.0.1", port), timeout=30) as conn:
        conn.sendall(b"POST /v1/check HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\n"
                     b"Content-Length: " + str(len(body)).encode() + b"\r\n\r\n" + body)
        time.sleep(0.2)  # the check is running (it takes about half a second)
        process.send_signal(signal.SIGTERM)
        status, content = _read_response(conn)
    assert status == 200 and json.loads(content)["rows"] == 10_000
    out, err = process.communicate(timeout=30)
    # uvicorn re-raises the signal once shutdown is complete, so the exit is "by SIGTERM".
    assert process.returncode in (0, -signal.SIGTERM)
    access = [json.loads(line) for line in out.splitlines() if line.strip()]
    assert access and all({"request_id", "method", "path", "status"} <= set(item) for item in access)
    assert any(item["path"] == "/v1/check" and item["status"] == 200 for item in access)
    logged = [json.loads(line) for line in err.splitlines() if line.strip()]
    assert any("authentication is off" in item["message"] for item in logged)
    assert any("shutdown complete" in item["message"].lower() for item in logged)


def test_compiles_in_threads_agree_with_one_thread():
    """Cache misses compile in worker threads, so compiling must not share state across threads."""
    from concurrent.futures import ThreadPoolExecutor

    texts = [f"(qty + {i}) * 2 > {i} and trim(name) = 'x{i}' or price between {i}.5 and {i + 1}.5"
             for i in range(200)]
    with ThreadPoolExecutor(8) as pool:
        threaded = list(pool.map(lambda t: to_json(rexpr.compile(t, SCHEMA).tree), texts))
    from rexpr.checker import check
    from rexpr.language.parser import parse
    from rexpr.schema import Schema

    schema = Schema.from_mapping(SCHEMA)
    assert threaded == [to_json(check(parse(t), schema, t)) for t in texts]
