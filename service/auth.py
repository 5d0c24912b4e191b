"""Bearer-token authentication (RFC 6750) in front of every route except health."""

from __future__ import annotations

import hmac
from typing import Any

from service.problems import problem, send_problem

_SCHEME = b"bearer "


def token_matches(given: bytes, tokens: tuple[bytes, ...]) -> bool:
    # Compare with every token, without stopping early, so timing tells nothing about which
    # token (or how much of one) matched.
    matched = False
    for token in tokens:
        matched |= hmac.compare_digest(given, token)
    return matched


def bearer_token(headers: list[tuple[bytes, bytes]]) -> bytes | None:
    for name, value in headers:
        if name == b"authorization":
            # The auth-scheme is case-insensitive (RFC 9110 section 11.1).
            if value[:len(_SCHEME)].lower() == _SCHEME:
                return value[len(_SCHEME):].strip()
            return b""
    return None


class BearerAuth:
    def __init__(self, app: Any, *, tokens: tuple[bytes, ...], public_paths: frozenset[str]) -> None:
        self.app = app
        self.tokens = tokens
        self.public_paths = public_paths

    async def __call__(self, scope: dict, receive: Any, send: Any) -> None:
        if scope["type"] != "http" or scope["path"] in self.public_paths:
            await self.app(scope, receive, send)
            return
        given = bearer_token(scope["headers"])
        if given and token_matches(given, self.tokens):
            await self.app(scope, receive, send)
            return
        # RFC 6750 section 3: name the scheme; say invalid_token when a token was offered.
        challenge = b'Bearer realm="rexpr"' + (b', error="invalid_token"' if given is not None else b"")
        detail = ("send Authorization: Bearer <token>" if given is None
                  else "the bearer token is not one this service accepts")
        await send_problem(send, problem("unauthorized", detail), ((b"www-authenticate", challenge),))
