"""The FastAPI application: ``create_app(settings)``.

The app owns the storage, the job store and (in ``earfold serve``) nothing else: worker
processes are started by :mod:`earfold.service.serve_cli`. A background task runs the retention
sweep; startup removes leftovers of interrupted uploads.
"""

from __future__ import annotations

import asyncio
import contextlib
from collections.abc import AsyncIterator

from fastapi import FastAPI

from earfold.renderer import __version__

from .jobs import QueueUnavailable, open_queue
from .problems import install_problem_handlers
from .request_gate import RequestGate, streamed_paths
from .retention import TMP_MAX_AGE_S, sweep
from .routes import (
    catalog,
    comparisons,
    headphone_eq,
    listening,
    options,
    presets,
    renders,
    stems,
)
from .routes.docs import install_api_docs
from .routes.pages import install_pages
from .settings import ServiceSettings
from .storage import Storage


def create_app(settings: ServiceSettings) -> FastAPI:
    """The API v1 app for ``settings`` (DESIGN.md, "HTTP contract")."""
    storage = Storage(settings.data_dir)
    queue = open_queue(settings.queue_url, str(storage.root), **settings.broker_options())

    @contextlib.asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        # A shared queue means other API processes may be mid-upload in the same data
        # directory: only then leave recent leftovers to the sweep.
        storage.clean_tmp(older_than_s=TMP_MAX_AGE_S if settings.broker_options() else 0.0)
        await asyncio.to_thread(_warm_up)
        task = asyncio.create_task(_sweep_forever(app))
        try:
            yield
        finally:
            task.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await task

    app = FastAPI(
        title="earfold",
        version=__version__,
        description="Binaural renders of multichannel loudspeaker stems. Upload a stem, "
        "queue a render, poll it, download the two-channel file. Errors are RFC 9457 "
        "problem details.",
        lifespan=lifespan,
        # /docs with assets from a package instead of a CDN (routes/docs.py); no /redoc
        docs_url=None,
        redoc_url=None,
    )
    app.state.settings = settings
    app.state.storage = storage
    app.state.queue = queue
    install_problem_handlers(app)
    app.include_router(catalog.router)
    app.include_router(options.router)
    app.include_router(presets.router)
    app.include_router(headphone_eq.router)
    app.include_router(stems.router)
    # Before the renders router: its /v1/renders/{render_id} would take /v1/renders/events.
    app.include_router(listening.router)
    app.include_router(renders.router)
    app.include_router(comparisons.router)
    install_pages(app)
    install_api_docs(app)
    # Runs before any route reads a body: the token first, then a capped JSON body.
    app.add_middleware(
        RequestGate,
        tokens=settings.tokens,
        max_json_bytes=settings.max_json_bytes,
        streamed=streamed_paths(
            [*catalog.router.routes, *stems.router.routes, *headphone_eq.router.routes]
        ),
    )
    return app


async def _sweep_forever(app: FastAPI) -> None:
    settings: ServiceSettings = app.state.settings
    while True:
        await asyncio.sleep(settings.sweep_s)
        try:
            await asyncio.to_thread(sweep, app.state.storage, app.state.queue, settings.retention_s)
        except QueueUnavailable:
            pass  # the job store is down (a network backend); the next sweep tries again


def _warm_up() -> None:
    """Import what the first render request needs, before the first request comes.

    ``POST /v1/renders`` checks options against the renderer's settings and the shipped
    HRTF sets; importing those (numpy, scipy) on first use cost the first submit most of
    a second (measured: 900 ms submit-to-running on a cold server, 20-50 ms warm).
    """
    import earfold.hrtf_sets  # noqa: F401
    import earfold.renderer.render  # noqa: F401

    from .routes.catalog import room_names

    room_names()
