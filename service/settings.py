"""The service's own configuration, read once from the environment. Requests never change it."""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Mapping

from rexpr.errors import InputProblem

TOKENS_VARIABLE = "REXPR_SERVICE_TOKENS"
TOKENS_FILE_VARIABLE = "REXPR_SERVICE_TOKENS_FILE"
MIN_TOKEN_LENGTH = 16  # short shared secrets are guessable; 16 characters is common practice, no source


@dataclass(frozen=True)
class ServiceSettings:
    """Limits and secrets. ``tokens`` empty means authentication is off (loopback only)."""

    tokens: tuple[bytes, ...] = ()
    max_body_bytes: int = 1 << 20       # 1 MiB: 10,000 rows of a few fields fit comfortably
    max_json_depth: int = 32            # request JSON nesting (schemas with structs, rows with structs)
    max_rows: int = 10_000              # rows a check request may send
    max_edge_rows: int = 4_096          # edge-value rows a check builds
    check_seconds: float = 10.0         # wall-clock bound of one check request
    check_concurrency: int = 2          # checks running at once (2 cores); more get 429
    cache_entries: int = 4_096          # compiled results kept (LRU)
    access_log: bool = True

    @property
    def auth_enabled(self) -> bool:
        return bool(self.tokens)


def _config_error(message: str) -> InputProblem:
    return InputProblem(message, code="invalid_service_config")


def parse_tokens(text: str, origin: str) -> tuple[bytes, ...]:
    """Comma- or newline-separated tokens; blank entries and ``#`` comment lines are skipped."""
    tokens = []
    for line in text.splitlines():
        if line.lstrip().startswith("#"):
            continue
        for part in line.split(","):
            token = part.strip()
            if not token:
                continue
            if len(token) < MIN_TOKEN_LENGTH:
                raise _config_error(f"{origin}: a token is shorter than {MIN_TOKEN_LENGTH} characters")
            if not token.isascii() or not token.isprintable() or " " in token:
                raise _config_error(f"{origin}: tokens must be printable ASCII without spaces")
            tokens.append(token.encode("ascii"))
    return tuple(dict.fromkeys(tokens))


def load_tokens(env: Mapping[str, str]) -> tuple[bytes, ...]:
    """Tokens from the variable and/or the file. Naming a source that yields no token is an
    error, not a silent fallback to no authentication."""
    tokens: tuple[bytes, ...] = ()
    if TOKENS_VARIABLE in env:
        found = parse_tokens(env[TOKENS_VARIABLE], TOKENS_VARIABLE)
        if not found:
            raise _config_error(f"{TOKENS_VARIABLE} is set but holds no token; unset it to run without "
                                "authentication on loopback")
        tokens += found
    if TOKENS_FILE_VARIABLE in env:
        path = Path(env[TOKENS_FILE_VARIABLE])
        try:
            text = path.read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            raise _config_error(f"{TOKENS_FILE_VARIABLE}: cannot read {str(path)!r}: {exc}") from None
        found = parse_tokens(text, f"{TOKENS_FILE_VARIABLE} ({path})")
        if not found:
            raise _config_error(f"{TOKENS_FILE_VARIABLE}: {str(path)!r} holds no token")
        tokens += found
    return tuple(dict.fromkeys(tokens))


def from_environment(env: Mapping[str, str] | None = None) -> ServiceSettings:
    env = os.environ if env is None else env
    return ServiceSettings(tokens=load_tokens(env))
