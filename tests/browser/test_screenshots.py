"""Screenshots of every view of the desk (stems with settings, speakers, blind tests), a
report page and a comparison page, at 1,280 x 800 and 1,920 x 1,080, in the light and the
dim theme, into ``test-artifacts/``. On every page no element marked hidden is displayed;
at 1,280 x 800 the desk itself does not scroll (its panels scroll inside). The report and
comparison pages also pass the WCAG AA text contrast check in both themes.
"""

from __future__ import annotations

import time
from pathlib import Path

import pytest

from tests.browser.desk_helpers import (
    SHOWN_HIDDEN_JS,
    client,
    low_contrast,
    open_desk,
    post_render,
    post_stem,
    wait_final,
)
from tests.service.stem_factory import FS, write_stem

pytestmark = pytest.mark.browser

SIZES = [(1280, 800), (1920, 1080)]
THEMES = ["light", "dim"]
TABS = {"settings": "#tab-settings", "speakers": "#tab-speakers", "blind": "#tab-blind"}
SCROLL_SLACK = 4  # px


@pytest.fixture(scope="module")
def scene(live_server, tmp_path_factory) -> dict:
    folder = tmp_path_factory.mktemp("shots")
    path = folder / "rooftop-rain.wav"
    write_stem(path, 3 * FS, 6, seed=11)
    with client(live_server) as http:
        stem = post_stem(http, path)
        renders = [
            post_render(http, stem["id"], layout="5.1", room=room, seed=4)["id"]
            for room in ("none", "small")
        ]
        assert all(wait_final(http, r)["state"] == "done" for r in renders)
        resp = http.post(
            "/v1/comparisons",
            json={
                "stem_id": stem["id"],
                "mode": "ab",
                "trials": 2,
                "excerpt": {"start": 0.5, "length": 2.0},
                "variants": [
                    {"layout": "5.1", "name": "dry"},
                    {"layout": "5.1", "room": "small", "name": "small room"},
                ],
            },
        )
        assert resp.status_code == 202, resp.text
        view = resp.json()
        deadline = time.monotonic() + 90
        while view["state"] == "preparing" and time.monotonic() < deadline:
            time.sleep(0.3)
            view = http.get(f"/v1/comparisons/{view['id']}").json()
        assert view["state"] == "ready", view
    return {"stem": stem, "renders": renders, "comparison": view["id"]}


def shoot(page, artefacts: Path, name: str) -> None:
    assert page.evaluate(SHOWN_HIDDEN_JS) == [], name
    page.screenshot(path=str(artefacts / f"{name}.png"))


@pytest.mark.parametrize("theme", THEMES)
@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_every_view(browser, live_server, scene, artefacts, size, theme):
    width, height = size
    context = browser.new_context(viewport={"width": width, "height": height})
    context.add_init_script(f"localStorage.setItem('earfold.theme', '{theme}')")
    page = context.new_page()
    page.set_default_timeout(30_000)
    tag = f"{width}x{height}-{theme}"
    try:
        open_desk(page, live_server, f"#stem={scene['stem']['id']}")
        assert page.evaluate("document.documentElement.dataset.theme") == theme
        page.locator(
            f".render-row[data-render='{scene['renders'][0]}'] .render-figures", has_text="LUFS"
        ).wait_for()
        page.locator(f".render-row[data-render='{scene['renders'][0]}'] .act-ab").click()
        page.locator(f".render-row[data-render='{scene['renders'][1]}'] .act-ab").click()
        page.wait_for_selector("#ab-switcher .ab-source:not([disabled]) >> nth=1")
        for view, tab in TABS.items():
            page.click(tab)
            page.wait_for_timeout(400)
            if size == (1280, 800):
                scroll, inner = page.evaluate(
                    "[document.documentElement.scrollHeight, innerHeight]"
                )
                assert scroll <= inner + SCROLL_SLACK, (view, scroll, inner)
            shoot(page, artefacts, f"desk-{view}-{tag}")
        resp = page.goto(f"{live_server.url}/report/{scene['renders'][1]}")
        assert resp is not None and resp.status == 200
        page.wait_for_load_state("networkidle")
        shoot(page, artefacts, f"report-{tag}")
        resp = page.goto(f"{live_server.url}/compare/{scene['comparison']}")
        assert resp is not None and resp.status == 200
        page.wait_for_load_state("networkidle")
        shoot(page, artefacts, f"compare-{tag}")
    finally:
        context.close()


@pytest.mark.parametrize("theme", THEMES)
def test_report_and_compare_pages_text_contrast(browser, live_server, scene, theme):
    context = browser.new_context(viewport={"width": 1280, "height": 800})
    context.add_init_script(f"localStorage.setItem('earfold.theme', '{theme}')")
    page = context.new_page()
    try:
        for path in (f"/report/{scene['renders'][1]}", f"/compare/{scene['comparison']}"):
            page.goto(live_server.url + path)
            page.wait_for_load_state("networkidle")
            assert page.evaluate("document.documentElement.dataset.theme") == theme
            assert low_contrast(page) == [], path
    finally:
        context.close()
