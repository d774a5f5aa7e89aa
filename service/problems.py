"""Errors as RFC 9457 problem details, in one place.

Every error response of the API is ``application/problem+json`` with ``type``, ``title``,
``status`` and ``detail`` (RFC 9457, section 3.1); validation errors add an ``errors``
list. Renderer errors are mapped here to the status that fits, so route handlers can
let them propagate.
"""

from __future__ import annotations

import errno
import sqlite3
from http import HTTPStatus

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from pydantic import BaseModel, ConfigDict, Field
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.routing import Match

from earfold.renderer.errors import AudioError, RendererError

from .jobs.queue import QueueUnavailable

PROBLEM_TYPE = "application/problem+json"

#: Statuses the contract names (DESIGN.md, "HTTP contract").
BAD_REQUEST, UNAUTHORIZED, NOT_FOUND, CONFLICT = 400, 401, 404, 409
TOO_LARGE, UNSUPPORTED, UNPROCESSABLE, QUEUE_FULL, NO_SPACE = 413, 415, 422, 429, 507
RANGE_NOT_SATISFIABLE = 416
UNAVAILABLE = 503

#: Retry-After of a 503 while the job store is down (s).
UNAVAILABLE_RETRY_S = 5


class FieldError(BaseModel):
    """One invalid field of a request (our extension member ``errors``)."""

    field: str = Field(description="where: 'query.limit', 'stem_id', 'body' ...")
    message: str


class ProblemDetails(BaseModel):
    """The body of every error response (RFC 9457, section 3.1)."""

    model_config = ConfigDict(extra="allow")

    type: str = Field("about:blank", description="RFC 9457 problem type URI")
    title: str = Field(description="the HTTP status phrase, or a short summary")
    status: int = Field(ge=400, le=599)
    detail: str = Field(description="what was wrong and what to do about it")
    instance: str | None = Field(None, description="the request path")
    errors: list[FieldError] | None = Field(None, description="validation errors, one per field")


_PROBLEM_SCHEMA = ProblemDetails.model_json_schema(ref_template="#/components/schemas/{model}")
_PROBLEM_SCHEMA.pop("$defs", None)
_PROBLEM_SCHEMA["properties"]["errors"] = {
    "anyOf": [{"type": "array", "items": FieldError.model_json_schema()}, {"type": "null"}],
    "description": "validation errors, one per field",
}

_WHY = {
    400: "malformed request (e.g. a broken multipart body)",
    401: "an API token is needed or is not valid (only when tokens are on)",
    404: "no such object, or it is not yours",
    409: "the object is in the wrong state for this",
    413: "the upload is larger than this server accepts",
    415: "not multipart, or audio that cannot be decoded",
    416: "the Range cannot be satisfied",
    422: "the request is well-formed but cannot be used (validation errors)",
    429: "the render queue is full; retry after Retry-After seconds",
    503: "the job store (Redis) does not answer; retry after Retry-After seconds",
    507: "the server's disk is full (or would be after the upload); nothing was stored",
}


def problem_responses(*statuses: int) -> dict[int | str, dict]:
    """OpenAPI ``responses`` documenting problem-details answers with ``statuses``.

    Every operation also gets 422, which FastAPI would otherwise document with its own
    validation-error body (not what :func:`install_problem_handlers` sends).
    """
    out: dict[int | str, dict] = {}
    for status in sorted({*statuses, UNPROCESSABLE}):
        out[status] = {
            "description": _WHY.get(status, HTTPStatus(status).phrase),
            "content": {PROBLEM_TYPE: {"schema": _PROBLEM_SCHEMA}},
        }
    return out


class Problem(Exception):
    """An error the API answers with a problem-details body."""

    def __init__(
        self,
        status: int,
        detail: str,
        *,
        title: str | None = None,
        headers: dict[str, str] | None = None,
        **extra: object,
    ) -> None:
        super().__init__(detail)
        self.status = status
        self.detail = detail
        self.title = title or HTTPStatus(status).phrase
        self.headers = headers or {}
        self.extra = extra


def problem_response(
    status: int,
    detail: str,
    *,
    title: str | None = None,
    instance: str | None = None,
    headers: dict[str, str] | None = None,
    **extra: object,
) -> JSONResponse:
    """A problem-details response (RFC 9457)."""
    body: dict = {
        "type": "about:blank",
        "title": title or HTTPStatus(status).phrase,
        "status": status,
        "detail": detail,
    }
    if instance:
        body["instance"] = instance
    body.update(extra)
    return JSONResponse(body, status_code=status, headers=headers, media_type=PROBLEM_TYPE)


#: ``errno`` values of a full disk: no space left, or the user's disk quota used up.
_NO_SPACE_ERRNOS = frozenset({errno.ENOSPC, errno.EDQUOT})

#: What a client is told when a write failed for want of space.
DISK_FULL_DETAIL = (
    "the server's disk is full: nothing was stored; delete stems, renders or comparisons "
    "you no longer need, or try again later"
)


def out_of_space(exc: BaseException) -> bool:
    """True if ``exc``, or an error it was raised from, is a full disk: an OSError with
    ``ENOSPC`` or ``EDQUOT``, or SQLite's "database or disk is full" (``SQLITE_FULL``)."""
    seen: set[int] = set()
    current: BaseException | None = exc
    while current is not None and id(current) not in seen:
        seen.add(id(current))
        if isinstance(current, OSError) and current.errno in _NO_SPACE_ERRNOS:
            return True
        if isinstance(current, sqlite3.Error) and (
            getattr(current, "sqlite_errorcode", None) == sqlite3.SQLITE_FULL
            or "database or disk is full" in str(current)
        ):
            return True
        current = current.__cause__ or current.__context__
    return False


def renderer_status(exc: RendererError) -> int:
    """The HTTP status for a renderer error raised on a request's input.

    Undecodable or unsupported audio is 415; everything else the renderer refuses
    (layouts, channel orders, SOFA contents) is a well-formed but unusable request, 422.
    """
    return UNSUPPORTED if isinstance(exc, AudioError) else UNPROCESSABLE


def _location(loc: tuple | list) -> str:
    parts = [str(p) for p in loc if p not in ("body",)]
    return ".".join(parts) or "body"


def install_problem_handlers(app: FastAPI) -> None:
    """Make every error of ``app`` a problem-details response."""

    @app.exception_handler(Problem)
    async def _problem(request: Request, exc: Problem) -> JSONResponse:
        return problem_response(
            exc.status,
            exc.detail,
            title=exc.title,
            instance=request.url.path,
            headers=exc.headers,
            **exc.extra,
        )

    @app.exception_handler(RequestValidationError)
    async def _validation(request: Request, exc: RequestValidationError) -> JSONResponse:
        errors = [
            {"field": _location(e.get("loc", ())), "message": e.get("msg", "invalid")}
            for e in exc.errors()
        ]
        detail = "; ".join(f"{e['field']}: {e['message']}" for e in errors) or "invalid request"
        return problem_response(
            UNPROCESSABLE, detail, title="Invalid request", instance=request.url.path, errors=errors
        )

    @app.exception_handler(StarletteHTTPException)
    async def _http(request: Request, exc: StarletteHTTPException) -> JSONResponse:
        detail = exc.detail if isinstance(exc.detail, str) else HTTPStatus(exc.status_code).phrase
        if exc.status_code == NOT_FOUND and detail == "Not Found":
            detail = f"no such resource: {request.url.path!r}; the API lives under /v1 (see /docs)"
        headers = getattr(exc, "headers", None)
        if exc.status_code == 405:
            allowed = _allowed_methods(request)
            detail = (
                f"{request.method} is not allowed on {request.url.path!r}; "
                f"allowed: {', '.join(allowed)}"
            )
            headers = {**(headers or {}), "Allow": ", ".join(allowed)}
        return problem_response(exc.status_code, detail, instance=request.url.path, headers=headers)

    @app.exception_handler(RendererError)
    async def _renderer(request: Request, exc: RendererError) -> JSONResponse:
        return problem_response(renderer_status(exc), str(exc), instance=request.url.path)

    @app.exception_handler(QueueUnavailable)
    async def _queue_down(request: Request, exc: QueueUnavailable) -> JSONResponse:
        return problem_response(
            UNAVAILABLE,
            f"{exc}; nothing was changed, try again shortly",
            title="Job store unavailable",
            instance=request.url.path,
            headers={"Retry-After": str(UNAVAILABLE_RETRY_S)},
        )

    async def _maybe_disk_full(request: Request, exc: Exception) -> JSONResponse:
        # A full disk is the one outside failure a write in any route can meet: 507.
        # Anything else is a bug, raised on to the 500 handler (which logs it).
        if not out_of_space(exc):
            raise exc
        return problem_response(
            NO_SPACE, DISK_FULL_DETAIL, title="Disk full", instance=request.url.path
        )

    # OSError and SQLite's errors directly; RuntimeError for a job store's error raised
    # from a full disk (the Redis store's scripts)
    for kind in (OSError, sqlite3.Error, RuntimeError):
        app.add_exception_handler(kind, _maybe_disk_full)

    @app.exception_handler(Exception)
    async def _unexpected(request: Request, exc: Exception) -> JSONResponse:
        # Reached only by a bug: say so without leaking internals.
        return problem_response(
            500, "an internal error occurred; the server log has details", instance=request.url.path
        )


def _allowed_methods(request: Request) -> list[str]:
    """Methods of every route on the request's path (RFC 9110, section 15.5.6: a 405
    lists them in ``Allow``). Starlette's own 405 names only the first matching route's,
    but FastAPI makes one route per method."""
    methods: set[str] = set()
    for route in request.app.router.routes:
        match, _ = route.matches({**request.scope, "method": "GET"})
        route_methods = getattr(route, "methods", None)
        if match is not Match.NONE and route_methods:
            methods |= set(route_methods)
    return sorted(methods)
