"""Serve rexpr over HTTP (compile, plan, check, catalogue) on this machine.

Without REXPR_SERVICE_TOKENS or REXPR_SERVICE_TOKENS_FILE, authentication is off and only a
loopback address may be used.
"""

from __future__ import annotations

import argparse

from service.server import DEFAULT_HOST, DEFAULT_PORT, serve


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--host", default=DEFAULT_HOST, help=f"address to listen on (default: {DEFAULT_HOST})")
    parser.add_argument("--port", type=int, default=DEFAULT_PORT, help=f"TCP port (default: {DEFAULT_PORT})")
    parser.add_argument("--workers", type=int, default=1, help="worker processes (default: 1)")


def run(args: argparse.Namespace) -> int:
    serve(args.host, args.port, args.workers)
    return 0
