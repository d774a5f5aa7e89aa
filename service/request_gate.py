"""What a request with a body must pass before a byte of the body is read.

FastAPI reads a JSON body whole before it runs a route's dependencies, so the token
check of :func:`earfold.service.auth.current_owner` would come after a body of any size
was in memory. This ASGI middleware runs first, for every request that carries a body:

1. the API token (when tokens are on): 401 without reading the body;
2. a JSON body's size: 413 from ``Content-Length`` before reading, or, for a body sent
   without one (chunked), as soon as more than the limit has arrived. The body read so
   far (at most the limit) is then handed to the app unchanged.

Streamed uploads (multipart, routes marked with :func:`streams_body`) keep their own,
much larger limits (:mod:`earfold.service.uploads`); only the token is checked here.
"""

from __future__ import annotations

from collections.abc import Awaitable, Callable, MutableMapping
from typing import Any

from starlette.datastructures import Headers

from .auth import owner_for
from .problems import BAD_REQUEST, TOO_LARGE, Problem, problem_response

Scope = MutableMapping[str, Any]
Message = MutableMapping[str, Any]
Receive = Callable[[], Awaitable[Message]]
Send = Callable[[Message], Awaitable[None]]
ASGIApp = Callable[[Scope, Receive, Send], Awaitable[None]]

#: Methods whose requests may carry a body the API reads.
_BODY_METHODS = frozenset({"POST", "PUT", "PATCH", "DELETE"})


def streams_body(endpoint: Callable[..., Any]) -> Callable[..., Any]:
    """Mark a route endpoint that streams its own (multipart) body with its own limits."""
    endpoint.__streams_body__ = True  # type: ignore[attr-defined]
    return endpoint


def streamed_paths(routes: list[Any]) -> frozenset[str]:
    """Paths of the routes marked with :func:`streams_body`."""
    return frozenset(
        getattr(r, "path", "")
        for r in routes
        if getattr(getattr(r, "endpoint", None), "__streams_body__", False)
    )


class RequestGate:
    """ASGI middleware: token first, then a capped JSON body (see the module docstring).

    Parameters
    ----------
    app : ASGI app
        The app behind the gate.
    tokens : tuple of str
        API tokens; empty means no authentication.
    max_json_bytes : int
        Largest body of a route that reads JSON.
    streamed : frozenset of str
        Paths of the routes that stream their own body (:func:`streamed_paths`).
    """

    def __init__(
        self,
        app: ASGIApp,
        *,
        tokens: tuple[str, ...],
        max_json_bytes: int,
        streamed: frozenset[str],
    ) -> None:
        self.app = app
        self.tokens = tokens
        self.max_json_bytes = max_json_bytes
        self.streamed = streamed

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["method"] not in _BODY_METHODS:
            await self.app(scope, receive, send)
            return
        headers = Headers(scope=scope)
        path = scope["path"]
        if "content-length" not in headers and "transfer-encoding" not in headers:
            await self.app(scope, receive, send)  # no body
            return
        try:
            owner_for(self.tokens, headers.get("authorization"))
            if path in self.streamed:
                await self.app(scope, receive, send)
                return
            length = _declared(headers.get("content-length"))
            if length is not None and length > self.max_json_bytes:
                raise Problem(TOO_LARGE, self._too_large(f"{length} bytes"))
            body = await self._read(receive)
        except Problem as exc:
            response = problem_response(
                exc.status, exc.detail, title=exc.title, instance=path, headers=exc.headers
            )
            await response(scope, receive, send)
            return
        await self.app(scope, _replay(body, receive), send)

    async def _read(self, receive: Receive) -> bytes:
        """The whole body, or a 413 :class:`Problem` once it exceeds the limit."""
        chunks: list[bytes] = []
        size = 0
        while True:
            message = await receive()
            if message["type"] == "http.disconnect":
                break  # the app sees the disconnect when it reads
            chunk = message.get("body", b"")
            size += len(chunk)
            if size > self.max_json_bytes:
                raise Problem(TOO_LARGE, self._too_large(f"more than {self.max_json_bytes} bytes"))
            chunks.append(chunk)
            if not message.get("more_body", False):
                break
        return b"".join(chunks)

    def _too_large(self, size: str) -> str:
        return (
            f"the request body is {size}; a JSON body may be at most {self.max_json_bytes} "
            "bytes (uploads go to POST /v1/stems or POST /v1/hrtf-sets as multipart)"
        )


def _declared(value: str | None) -> int | None:
    if value is None:
        return None
    try:
        length = int(value)
    except ValueError:
        raise Problem(BAD_REQUEST, f"Content-Length {value!r} is not a number") from None
    if length < 0:
        raise Problem(BAD_REQUEST, f"Content-Length {value!r} is negative")
    return length


def _replay(body: bytes, receive: Receive) -> Receive:
    """A ``receive`` that gives ``body`` once, then whatever the client sends next
    (a disconnect)."""
    given = False

    async def replay() -> Message:
        nonlocal given
        if not given:
            given = True
            return {"type": "http.request", "body": body, "more_body": False}
        return await receive()

    return replay
