"""API tokens and ownership.

With tokens configured, every request (but the health check and the docs) must carry
``Authorization: Bearer TOKEN``; what it creates belongs to that token, and another
token is answered 404, as if the object did not exist. The owner recorded with an object
is a hash of the token, so the data directory holds no secret.
"""

from __future__ import annotations

import hashlib
import hmac

from fastapi import Request

from .problems import UNAUTHORIZED, Problem

#: Owner of everything when tokens are off.
ANONYMOUS = ""


def owner_of(token: str) -> str:
    """The owner id recorded for a token: the first 16 hex digits of its SHA-256."""
    return hashlib.sha256(token.encode()).hexdigest()[:16]


async def current_owner(request: Request) -> str:
    """FastAPI dependency: the caller's owner id, or 401 when tokens are on and none fits.

    ``async`` although it awaits nothing: FastAPI runs a plain function dependency in its
    thread pool, a hop per request that a poll does not need. Requests with a body were
    already checked before it was read (:mod:`earfold.service.request_gate`).
    """
    return owner_for(request.app.state.settings.tokens, request.headers.get("authorization"))


def owner_for(tokens: tuple[str, ...], header: str | None) -> str:
    """The owner id of an ``Authorization`` header value; a 401 :class:`Problem` when
    tokens are on and the header carries none of them."""
    if not tokens:
        return ANONYMOUS
    scheme, _, given = (header or "").partition(" ")
    if scheme.lower() != "bearer" or not given.strip():
        raise Problem(
            UNAUTHORIZED,
            "this server needs an API token: send 'Authorization: Bearer TOKEN'",
            headers={"WWW-Authenticate": "Bearer"},
        )
    given = given.strip()
    # Compare against every token in constant time, so timing does not leak a prefix.
    match = [t for t in tokens if hmac.compare_digest(t.encode(), given.encode())]
    if not match:
        raise Problem(
            UNAUTHORIZED,
            "the API token is not valid on this server",
            headers={"WWW-Authenticate": "Bearer"},
        )
    return owner_of(match[0])
