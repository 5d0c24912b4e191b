"""Run the service with uvicorn on uvloop and httptools; SIGINT/SIGTERM shut it down gracefully
(in-flight requests finish, bounded by ``GRACEFUL_SECONDS``)."""

from __future__ import annotations

import ipaddress
import logging

from rexpr.errors import InputProblem
from service.logs import log_config
from service.settings import from_environment

DEFAULT_HOST = "127.0.0.1"
DEFAULT_PORT = 8787
GRACEFUL_SECONDS = 10
KEEP_ALIVE_SECONDS = 5
FACTORY = "service.app:app_from_environment"
LOG = logging.getLogger("rexpr.service.server")


def is_loopback(host: str) -> bool:
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False  # a host name could resolve anywhere


def check_bind(host: str, auth_enabled: bool) -> None:
    if not auth_enabled and not is_loopback(host):
        raise InputProblem(
            f"refusing to listen on {host!r} without authentication; set REXPR_SERVICE_TOKENS or "
            "REXPR_SERVICE_TOKENS_FILE, or listen on a loopback address such as 127.0.0.1",
            code="unsafe_bind")


def serve(host: str = DEFAULT_HOST, port: int = DEFAULT_PORT, workers: int = 1, *,
          factory: str = FACTORY, log_level: str = "info") -> None:
    """Serve until interrupted. ``factory`` is an import string of a zero-argument function that
    returns the ASGI app (each worker process calls it)."""
    import logging.config

    import uvicorn

    if workers < 1:
        raise InputProblem("workers must be at least 1", code="invalid_service_config")
    if not 0 <= port <= 65535:
        raise InputProblem(f"port {port} is outside 0..65535", code="invalid_service_config")
    settings = from_environment()  # fail here, once, on a bad token configuration
    check_bind(host, settings.auth_enabled)
    config = log_config(log_level)
    logging.config.dictConfig(config)
    if settings.auth_enabled:
        LOG.info("bearer-token authentication on (%d token(s)); listening on %s:%d", len(settings.tokens),
                 host, port)
    else:
        LOG.warning("no tokens configured: authentication is off, so the service listens on loopback "
                    "only (%s:%d)", host, port)
    uvicorn.run(factory, factory=True, host=host, port=port, workers=workers, loop="uvloop", http="httptools",
                lifespan="on", access_log=False, log_config=config, log_level=log_level, proxy_headers=False,
                server_header=False, timeout_keep_alive=KEEP_ALIVE_SECONDS,
                timeout_graceful_shutdown=GRACEFUL_SECONDS)
