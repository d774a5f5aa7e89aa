"""The API's documentation page, ``/docs``, served whole from this server (works offline).

FastAPI's own page loads its script and style sheet from a CDN; here they come from the
``swagger-ui-bundle-v2`` package (a dependency), mounted under ``/docs/assets``, so the
page works on a machine without Internet access and asks no third party for anything.
The page reads the schema from ``/openapi.json``. The second documentation page FastAPI
offers (``/redoc``) is turned off: its assets ship in no package.
"""

from __future__ import annotations

from pathlib import Path

from fastapi import FastAPI
from fastapi.openapi.docs import get_swagger_ui_html, get_swagger_ui_oauth2_redirect_html
from fastapi.responses import HTMLResponse
from fastapi.staticfiles import StaticFiles

#: Where the page's assets are served.
ASSETS = "/docs/assets"

#: The page's OAuth2 redirect helper (FastAPI's default address).
OAUTH2_REDIRECT = "/docs/oauth2-redirect"


def assets_dir() -> Path:
    """The folder of the packaged documentation page assets."""
    from swagger_ui_bundle import swagger_ui_path

    return Path(swagger_ui_path)


def install_api_docs(app: FastAPI) -> None:
    """Serve ``/docs`` with local assets on ``app`` (made with ``docs_url=None``)."""
    app.mount(ASSETS, StaticFiles(directory=assets_dir()), name="docs-assets")
    openapi_url = app.openapi_url or "/openapi.json"
    title = f"{app.title} {app.version}: HTTP API"

    @app.get("/docs", include_in_schema=False)
    def api_docs() -> HTMLResponse:
        return get_swagger_ui_html(
            openapi_url=openapi_url,
            title=title,
            swagger_js_url=f"{ASSETS}/swagger-ui-bundle.js",
            swagger_css_url=f"{ASSETS}/swagger-ui.css",
            swagger_favicon_url=f"{ASSETS}/favicon-32x32.png",
            oauth2_redirect_url=OAUTH2_REDIRECT,
            # no schema validator badge: it would send the schema to an outside service
            swagger_ui_parameters={"validatorUrl": None},
        )

    @app.get(OAUTH2_REDIRECT, include_in_schema=False)
    def api_docs_redirect() -> HTMLResponse:
        return get_swagger_ui_oauth2_redirect_html()
