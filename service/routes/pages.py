"""The web pages: ``/`` (the desk), ``/compare/{id}`` (blind listening), ``/report/{id}``
(a render's report), and ``/static``.

The pages are static HTML, JS and CSS from ``service/static`` with no build step; they
use only the public HTTP API, so they need no token of their own and no server-side
templating. ``/compare/{id}`` and ``/report/{id}`` answer the same page for every id (the
script reads the id from the address), so the page itself tells nothing about a session
or a render.
"""

from __future__ import annotations

import re
from pathlib import Path

from fastapi import APIRouter, FastAPI
from fastapi.responses import FileResponse
from fastapi.staticfiles import StaticFiles

from ..problems import NOT_FOUND, Problem

#: Folder of the page files (package data).
STATIC_DIR = Path(__file__).resolve().parents[1] / "static"

_ID = re.compile(r"[0-9a-f]{32}")
_REVALIDATE = {"Cache-Control": "no-cache"}  # pages: always revalidated, never stale

router = APIRouter(include_in_schema=False)


def _page(name: str) -> FileResponse:
    path = STATIC_DIR / name
    if not path.is_file():
        raise Problem(NOT_FOUND, f"the page {name!r} is not installed")
    return FileResponse(path, media_type="text/html", headers=_REVALIDATE)


@router.get("/")
def index() -> FileResponse:
    return _page("index.html")


@router.get("/compare/{comparison_id}")
def compare(comparison_id: str) -> FileResponse:
    if not _ID.fullmatch(comparison_id):
        raise Problem(NOT_FOUND, f"no comparison {comparison_id!r}")
    return _page("compare.html")


@router.get("/report/{render_id}")
def report(render_id: str) -> FileResponse:
    if not _ID.fullmatch(render_id):
        raise Problem(NOT_FOUND, f"no render {render_id!r}")
    return _page("report.html")


def install_pages(app: FastAPI) -> None:
    """Serve the pages and mount ``/static`` on ``app``."""
    app.include_router(router)
    app.mount("/static", StaticFiles(directory=STATIC_DIR, check_dir=False), name="static")
