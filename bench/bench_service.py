"""HTTP service load test on 127.0.0.1: the compile endpoint beside a trivial JSON echo endpoint
served by the same stack (same app, middleware, uvicorn, uvloop, httptools), at 16 and 64
keep-alive connections with 1 and 2 workers, cached and uncached (with and without SQL); then
server memory (RSS of the whole process tree) over a longer run of unique expressions.

    .venv/bin/python bench/bench_service.py [--seconds 5] [--rss-seconds 60]

Each scenario is bounded in time (``--seconds`` after a one-second warm-up) and in count
(``--max-requests``). The load generator is one Python process (uvloop, raw keep-alive
connections) on the same machine, so client and server share the cores: compare the rows of
the table with each other (ratios to the echo baseline), not with numbers from elsewhere.
"""

from __future__ import annotations

import argparse
import asyncio
import os
import socket
import subprocess
import sys
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
from common import print_table  # noqa: E402

SCHEMA = '{"price": "float64", "qty": "int64", "name": "string", "discount": "float64"}'
CACHED_EXPRESSION = "trim(name) = 'ab' and price * qty > 100.0 and coalesce(discount, 0) < 0.3"


def app_with_echo() -> Any:
    """The service app plus the baseline: an echo of the JSON body through the same stack."""
    from fastapi import Response

    from service.app import app_from_environment
    from service.responses import FastJSONResponse

    app = app_from_environment()

    @app.post("/v1/echo", include_in_schema=False)
    async def echo(body: dict[str, Any]) -> Response:
        return FastJSONResponse(body)

    return app


# ------------------------------------------------------------------------------ request bodies
def _post(path: str, body: bytes) -> bytes:
    return (f"POST {path} HTTP/1.1\r\nHost: 127.0.0.1\r\nContent-Type: application/json\r\n"
            f"Content-Length: {len(body)}\r\n\r\n").encode() + body


def cached_request(_: int) -> bytes:
    return _post("/v1/compile", f'{{"expression": "{CACHED_EXPRESSION}", "schema": {SCHEMA}}}'.encode())


def uncached_request(n: int) -> bytes:
    # A new literal every time: misses the service's LRU and the compiler's own cache.
    expression = CACHED_EXPRESSION.replace("100.0", f"{n}.5")
    return _post("/v1/compile", f'{{"expression": "{expression}", "schema": {SCHEMA}}}'.encode())


def uncached_no_sql_request(n: int) -> bytes:
    # The same, with no SQL asked for: the service and compiler without the dialect lowerings.
    expression = CACHED_EXPRESSION.replace("100.0", f"{n}.5")
    body = f'{{"expression": "{expression}", "schema": {SCHEMA}, "engines": []}}'
    return _post("/v1/compile", body.encode())


def echo_request(_: int) -> bytes:
    return _post("/v1/echo", f'{{"expression": "{CACHED_EXPRESSION}", "schema": {SCHEMA}}}'.encode())


REQUESTS: dict[str, Callable[[int], bytes]] = {
    "echo (baseline)": echo_request,
    "compile cached": cached_request,
    "compile uncached": uncached_request,
    "compile uncached, no SQL": uncached_no_sql_request,
}


# ------------------------------------------------------------------------------------- server
@dataclass
class Server:
    process: subprocess.Popen
    port: int

    def stop(self) -> None:
        self.process.terminate()
        try:
            self.process.wait(timeout=20)
        except subprocess.TimeoutExpired:
            self.process.kill()
            self.process.wait()


def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def start_server(workers: int) -> Server:
    port = _free_port()
    env = {k: v for k, v in os.environ.items() if not k.startswith("REXPR_SERVICE_")}
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT), str(HERE)])
    code = (f"from service.server import serve; serve(port={port}, workers={workers}, "
            "factory='bench_service:app_with_echo', log_level='warning')")
    process = subprocess.Popen([sys.executable, "-c", code], cwd=ROOT, env=env,
                               stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    server = Server(process, port)
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        if process.poll() is not None:
            raise SystemExit("the service exited during start-up")
        try:
            with socket.create_connection(("127.0.0.1", port), timeout=1) as conn:
                conn.sendall(b"GET /v1/health HTTP/1.1\r\nHost: x\r\nConnection: close\r\n\r\n")
                if conn.recv(32).startswith(b"HTTP/1.1 200"):
                    time.sleep(0.5 * workers)  # let every worker finish starting
                    return server
        except OSError:
            time.sleep(0.1)
    server.stop()
    raise SystemExit("the service did not start within 60 s")


def prime(port: int, request: bytes) -> None:
    """One request, waited for, so a cached scenario measures hits only."""
    with socket.create_connection(("127.0.0.1", port), timeout=120) as conn:
        conn.sendall(request.replace(b"HTTP/1.1\r\n", b"HTTP/1.1\r\nConnection: close\r\n", 1))
        while conn.recv(65536):
            pass


def tree_rss_bytes(pid: int) -> int:
    """Resident memory of a process and all its descendants (Linux /proc)."""
    total, stack = 0, [pid]
    while stack:
        current = stack.pop()
        try:
            status = Path(f"/proc/{current}/status").read_text()
            children = Path(f"/proc/{current}/task/{current}/children").read_text().split()
        except OSError:
            continue
        for line in status.splitlines():
            if line.startswith("VmRSS:"):
                total += int(line.split()[1]) * 1024
        stack.extend(int(c) for c in children)
    return total


# ------------------------------------------------------------------------------ load generator
@dataclass
class Result:
    requests: int
    seconds: float
    latencies: list[float]
    errors: int

    @property
    def rate(self) -> float:
        return self.requests / self.seconds if self.seconds else 0.0

    def percentile(self, q: float) -> float:
        if not self.latencies:
            return float("nan")
        ordered = sorted(self.latencies)
        return ordered[min(len(ordered) - 1, int(q * len(ordered)))]


async def _connection(port: int, make: Callable[[int], bytes], counter: list[int], start_at: float,
                      stop_at: float, limit: int, latencies: list[float], errors: list[int]) -> None:
    reader, writer = await asyncio.open_connection("127.0.0.1", port)
    try:
        while True:
            now = time.perf_counter()
            if now >= stop_at or counter[0] >= limit:
                return
            counter[0] += 1
            writer.write(make(counter[0]))
            head = await reader.readuntil(b"\r\n\r\n")
            status = int(head[9:12])
            length = 0
            for line in head.split(b"\r\n"):
                if line[:15].lower() == b"content-length:":
                    length = int(line[15:])
            await reader.readexactly(length)
            done = time.perf_counter()
            if done >= start_at:  # requests finished during the warm-up are not counted
                latencies.append(done - now)
                if status != 200:
                    errors[0] += 1
    finally:
        writer.close()


async def _load(port: int, make: Callable[[int], bytes], connections: int, seconds: float, warmup: float,
                limit: int, counter: list[int]) -> Result:
    latencies: list[float] = []
    errors = [0]
    start_at = time.perf_counter() + warmup
    stop_at = start_at + seconds
    await asyncio.gather(*(_connection(port, make, counter, start_at, stop_at, limit, latencies, errors)
                           for _ in range(connections)))
    measured = min(time.perf_counter(), stop_at) - start_at
    return Result(len(latencies), measured, latencies, errors[0])


def run_load(port: int, make: Callable[[int], bytes], connections: int, seconds: float, limit: int,
             counter: list[int], warmup: float = 1.0) -> Result:
    try:
        import uvloop

        return uvloop.run(_load(port, make, connections, seconds, warmup, limit, counter))
    except ImportError:
        return asyncio.run(_load(port, make, connections, seconds, warmup, limit, counter))


# ----------------------------------------------------------------------------------------- main
def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=5.0, help="measured seconds per scenario")
    parser.add_argument("--rss-seconds", type=float, default=60.0, help="length of the memory run")
    parser.add_argument("--rss-warmup", type=float, default=20.0,
                        help="seconds of the same load before the memory run, so the bounded caches are full")
    parser.add_argument("--max-requests", type=int, default=500_000, help="cap per scenario")
    parser.add_argument("--memory-only", action="store_true", help="skip the throughput table")
    args = parser.parse_args()
    if not args.memory_only:
        throughput(args)
    memory(args)


def throughput(args: argparse.Namespace) -> None:
    rows: list[list[str]] = []
    counter = [0]  # shared across scenarios, so "uncached" never repeats an expression
    for workers in (1, 2):
        server = start_server(workers)
        try:
            for connections in (16, 64):
                baseline = None
                for name, make in REQUESTS.items():
                    if make is cached_request:
                        for _ in range(4 * workers):  # new connections, so every worker gets one
                            prime(server.port, make(0))
                    result = run_load(server.port, make, connections, args.seconds, args.max_requests, counter)
                    baseline = baseline or result.rate
                    rows.append([str(workers), str(connections), name, f"{result.rate:,.0f}",
                                 f"{result.rate / baseline:.2f}", f"{result.percentile(0.50) * 1000:.2f}",
                                 f"{result.percentile(0.99) * 1000:.2f}", str(result.errors)])
        finally:
            server.stop()
    print(f"compile endpoint vs a JSON echo through the same stack; {args.seconds:g} s per row after a 1 s "
          "warm-up; client and server on one machine")
    print_table(["workers", "conns", "endpoint", "req/s", "x echo", "p50 ms", "p99 ms", "non-200"], rows)


def memory(args: argparse.Namespace) -> None:
    counter = [0]  # a fresh server per worker count, so its caches start empty
    memory_rows = []
    mib = 1 << 20
    marks = (0.25, 0.5, 0.75, 1.0)
    for workers in (1, 2):
        server = start_server(workers)
        try:
            samples: list[tuple[float, int]] = []
            before = tree_rss_bytes(server.process.pid)

            async def sample(start: float, stop_at: float) -> None:
                while time.perf_counter() < stop_at:
                    samples.append((time.perf_counter() - start, tree_rss_bytes(server.process.pid)))
                    await asyncio.sleep(1.0)

            async def loaded() -> Result:
                # Warm-up: the same load until the LRU caches (service and compile) are full, so
                # what follows shows growth beyond the bounded caches, if any.
                await _load(server.port, uncached_no_sql_request, 64, args.rss_warmup, 1.0,
                            args.max_requests * 10, counter)
                start = time.perf_counter()
                sampler = asyncio.ensure_future(sample(start, start + args.rss_seconds + 1.0))
                # Unique expressions without SQL: enough requests to fill the LRU and keep evicting.
                result = await _load(server.port, uncached_no_sql_request, 64, args.rss_seconds, 1.0,
                                     args.max_requests * 10, counter)
                await sampler
                return result

            result = asyncio.run(loaded())
        finally:
            server.stop()
        at = [min(samples, key=lambda s: abs(s[0] - m * (args.rss_seconds + 1.0)))[1] for m in marks]
        growth = (at[-1] - at[0]) / at[0]
        memory_rows.append([str(workers), f"{result.requests:,}", f"{before / mib:.0f}",
                            *(f"{v / mib:.0f}" for v in at), f"{max(v for _, v in samples) / mib:.0f}",
                            f"{growth:+.1%}"])
    print()
    print(f"server RSS (all processes) while compiling unique expressions (no SQL) at 64 connections for "
          f"{args.rss_seconds:g} s, after a {args.rss_warmup:g} s warm-up of the same load that fills the "
          "bounded caches (4,096 results each); growth is from the first to the last mark")
    print_table(["workers", "requests", "idle MiB", *(f"{m * args.rss_seconds:g}s MiB" for m in marks), "peak MiB",
                 "growth"], memory_rows)


if __name__ == "__main__":
    main()
