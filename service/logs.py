"""Log records as JSON lines: access lines go out as built; other records become one object each."""

from __future__ import annotations

import datetime as dt
import logging
from typing import Any

import orjson


class JsonLinesFormatter(logging.Formatter):
    def format(self, record: logging.LogRecord) -> str:
        entry: dict[str, Any] = {
            "time": dt.datetime.fromtimestamp(record.created, dt.timezone.utc).isoformat(timespec="milliseconds"),
            "level": record.levelname.lower(),
            "logger": record.name,
            "message": record.getMessage(),
        }
        if record.exc_info:
            entry["exception"] = self.formatException(record.exc_info)  # server log only, never a body
        return orjson.dumps(entry).decode()


def log_config(level: str = "info") -> dict[str, Any]:
    """A logging.config dictionary for uvicorn: access lines to stdout, everything else to stderr."""
    return {
        "version": 1,
        "disable_existing_loggers": False,
        "formatters": {
            "raw": {"format": "%(message)s"},
            "json": {"()": "service.logs.JsonLinesFormatter"},
        },
        "handlers": {
            "access": {"class": "logging.StreamHandler", "formatter": "raw", "stream": "ext://sys.stdout"},
            "errors": {"class": "logging.StreamHandler", "formatter": "json", "stream": "ext://sys.stderr"},
        },
        "loggers": {
            "rexpr.service.access": {"handlers": ["access"], "level": level.upper(), "propagate": False},
            "rexpr.service": {"handlers": ["errors"], "level": level.upper(), "propagate": False},
            "uvicorn": {"handlers": ["errors"], "level": level.upper(), "propagate": False},
            "uvicorn.error": {"level": level.upper()},
            "uvicorn.access": {"handlers": [], "propagate": False},
        },
    }
