"""``/docs`` works offline: the page names no outside address, its assets answer here."""

from __future__ import annotations

import os
import re
import shutil

import pytest


def _asset_urls(html: str) -> list[str]:
    return re.findall(r"""(?:src|href)\s*=\s*["']([^"']+)["']""", html)


def test_docs_page_loads_nothing_from_outside(client):
    page = client.get("/docs")
    assert page.status_code == 200 and page.headers["content-type"].startswith("text/html")
    html = page.text
    assert not re.search(r"https?://", html), "the docs page names an outside address"
    urls = _asset_urls(html)
    assert any(u.endswith(".js") for u in urls) and any(u.endswith(".css") for u in urls)
    for url in urls:
        assert url.startswith("/"), url
        answer = client.get(url)
        assert answer.status_code == 200, url
        assert answer.content, url
    # the schema the page reads answers here too
    assert client.get("/openapi.json").json()["paths"]


def test_docs_assets_are_the_real_script_and_style(client):
    urls = _asset_urls(client.get("/docs").text)
    script = next(u for u in urls if u.endswith(".js"))
    style = next(u for u in urls if u.endswith(".css"))
    assert "javascript" in client.get(script).headers["content-type"]
    assert "SwaggerUIBundle" in client.get(script).text
    assert client.get(style).headers["content-type"].startswith("text/css")


def test_docs_oauth2_redirect_and_no_redoc(client):
    redirect = client.get("/docs/oauth2-redirect")
    assert redirect.status_code == 200 and not re.search(r"https?://", redirect.text)
    # the second documentation page needs assets no package ships: turned off
    assert client.get("/redoc").status_code == 404


@pytest.mark.browser
def test_docs_page_renders_the_operations_in_a_browser_without_internet():
    """Headless Chromium (Debian's) opens /docs of a real server; any request to an address
    that is not the server is refused and recorded; the page must still list the API."""
    chromium = os.environ.get("EARFOLD_CHROMIUM") or shutil.which("chromium")
    if not chromium:
        reason = "Chromium is not installed (Debian: apt-get install chromium)"
        if os.environ.get("CI") == "true":
            pytest.fail(f"CI=true but {reason}")
        pytest.skip(reason)
    sync_api = pytest.importorskip("playwright.sync_api")
    from earfold.service.tools.local_server import LocalServer

    outside: list[str] = []
    with LocalServer(workers=0) as server, sync_api.sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=chromium, headless=True, args=["--no-sandbox"])
        try:
            page = browser.new_page()

            def guard(route):
                if route.request.url.startswith(server.url + "/"):
                    route.continue_()
                else:
                    outside.append(route.request.url)
                    route.abort()

            page.route("**/*", guard)
            page.goto(f"{server.url}/docs")
            page.wait_for_selector(".opblock", timeout=30_000)
            assert page.locator(".opblock").count() >= 5
            assert "/v1/renders" in page.content()
        finally:
            browser.close()
    assert outside == []
