"""Ambisonic scenes on the desk and the report page, in headless Chromium against a real
server: the layout list offers the scenes as their own group, a 16-channel stem gets the
scene as a one-click hint (never chosen for it), choosing the scene draws its sphere of
directions and shows the scene fields instead of the loudspeaker-only ones, the render
goes out with the scene options, and the report page shows the scene section with the
decoder's directions drawn. Screenshots go to test-artifacts/.
"""

from __future__ import annotations

import time

import httpx
import numpy as np
import pytest

from earfold.renderer.io import write_audio
from earfold.renderer.scenes import encode
from tests.browser.desk_helpers import SHOWN_HIDDEN_JS
from tests.service.stem_factory import FS, write_stem

pytestmark = pytest.mark.browser

RENDER_TIMEOUT_S = 240


@pytest.fixture(scope="module")
def stems(live_server, tmp_path_factory) -> dict[int, dict]:
    """A third-order scene (a plane wave from 60 degrees left, 16 channels) and a 5.1 stem."""
    folder = tmp_path_factory.mktemp("desk-scenes")
    rng = np.random.default_rng(5)
    s = 0.05 * rng.standard_normal(FS)
    a = np.radians(60.0)
    scene = (s[:, None] * encode([np.cos(a), np.sin(a), 0.0], 3)[None, :]).astype(np.float32)
    paths = {16: folder / "courtyard-hoa3.wav", 6: folder / "harbour-six.wav"}
    write_audio(paths[16], scene, FS, subtype="FLOAT")
    write_stem(paths[6], FS, 6, seed=3)
    out = {}
    for channels, path in paths.items():
        with path.open("rb") as f:
            files = {"file": (path.name, f, "audio/wav")}
            answer = httpx.post(f"{live_server.url}/v1/stems", files=files, timeout=60)
        answer.raise_for_status()
        out[channels] = answer.json()
    return out


def open_desk(page, server, stem: dict) -> None:
    page.goto(server.url + "/")
    page.wait_for_selector("body[data-ready='1']")
    page.wait_for_selector("#view-settings [data-option='layout'] select")
    page.evaluate("s => window.earfoldDesk.bus.emit('stem-selected', {stem: s})", stem)
    page.wait_for_selector(f"#view-settings .stem-line:has-text('{stem['channels']} ch')")


def field(page, name: str):
    return page.locator(f"#view-settings [data-option='{name}']")


def layout_value(page) -> str:
    return field(page, "layout").locator("select").input_value()


def test_a_scene_is_picked_drawn_rendered_and_reported(page, live_server, stems, artefacts):
    stem = stems[16]
    assert stem["scene_hint"]["layout"] == "hoa3" and stem["suggested_layout"] == "9.1.6"
    open_desk(page, live_server, stem)
    select = field(page, "layout").locator("select")
    group = select.locator("optgroup[label='Ambisonic scenes'] option")
    assert group.count() == 7
    enabled = group.evaluate_all("os => os.filter(o => !o.disabled).map(o => o.value)")
    # the scene of the stem's channel count, and the lower orders it can be decoded at
    assert enabled == ["b:foa", "b:hoa2", "b:hoa3"]
    # Offered, never chosen: the stem's suggested loudspeaker layout stays selected.
    assert layout_value(page) == "b:9.1.6"
    assert page.locator("[data-part='scene-picture']").count() == 0
    for name in ("ambisonic_norm", "ambisonic_decoder", "rotate"):
        assert field(page, name).is_hidden(), name
    assert field(page, "channel_order").is_visible() and field(page, "fold").is_visible()

    hint = page.locator("#view-settings [data-action='use-scene-hint']")
    assert "hoa3" in hint.inner_text()
    hint.click()
    assert layout_value(page) == "b:hoa3"
    assert page.locator("#view-settings [data-part='scene-hint']").is_hidden()
    picture = page.locator("#view-settings [data-part='scene-picture']")
    picture.wait_for()
    words = picture.locator("figcaption").inner_text()
    assert "order 3" in words and "16 channels" in words
    listed = next(
        e
        for e in httpx.get(f"{live_server.url}/v1/layouts", timeout=30).json()
        if e["name"] == "hoa3"
    )
    n = len(listed["directions"])
    assert picture.locator("[data-view='scene-top'] [data-direction]").count() == n
    assert picture.locator("[data-view='scene-side'] [data-direction]").count() == n
    for name in ("ambisonic_norm", "ambisonic_decoder", "rotate"):
        assert field(page, name).is_visible(), name
    for name in ("channel_order", "fold"):
        assert field(page, name).is_hidden(), name
    assert page.evaluate(SHOWN_HIDDEN_JS) == []
    # The batch offers the scenes that fit (this order and the lower ones), no higher one.
    page.locator("#view-settings details[data-part='batch'] > summary").click()
    batch = page.locator("#view-settings [data-batch='layout'] input").evaluate_all(
        "is => is.map(i => i.value)"
    )
    assert {"b:foa", "b:hoa2", "b:hoa3"} <= set(batch) and "b:hoa4" not in batch
    page.locator("#view-settings details[data-part='batch'] > summary").click()

    field(page, "ambisonic_decoder").locator("select").select_option("virtual")
    field(page, "rotate").locator("[data-angle='yaw']").fill("30")
    page.screenshot(path=str(artefacts / "desk-scene-1280.png"))
    before = {r["id"] for r in httpx.get(f"{live_server.url}/v1/renders", timeout=30).json()}
    page.locator("#view-settings [data-action='render']").click()
    page.wait_for_selector("#view-settings [data-part='render-status']:has-text('queued')")
    deadline = time.monotonic() + RENDER_TIMEOUT_S
    while True:
        mine = [
            r
            for r in httpx.get(f"{live_server.url}/v1/renders", timeout=30).json()
            if r["id"] not in before
        ]
        if mine and mine[0]["state"] in ("done", "failed", "cancelled"):
            break
        assert time.monotonic() < deadline, mine
        time.sleep(0.5)
    view = mine[0]
    assert view["state"] == "done", view
    request = view["request"]
    assert request["layout"] == "hoa3" and request["ambisonic_decoder"] == "virtual"
    assert request["rotate"] == [30, 0, 0]
    assert request["channel_order"] is None and request["fold"] == "binaural"

    report = httpx.get(f"{live_server.url}/v1/renders/{view['id']}/report", timeout=30).json()
    page.goto(f"{live_server.url}/report/{view['id']}")
    page.wait_for_selector("body[data-state='ready']")
    section = page.locator("#sec-scene")
    assert section.is_visible()
    words = section.locator("[data-part='scene-words']").inner_text()
    assert "order-3 Ambisonic scene of 16 channels" in words
    assert "virtual-loudspeaker decoder" in words and "30° yaw" in words
    dots = len(report["scene"]["decoder"]["directions"])
    assert dots == 32  # the order-3 virtual loudspeakers: a 7-design
    drawn = section.locator("[data-view='scene-top'] [data-direction]").count()
    assert drawn == dots
    assert section.locator("[data-view='scene-side'] [data-direction]").count() == dots
    assert page.locator("#h-speakers").inner_text() == "Channels"
    assert "spherical harmonic" in page.locator("#speaker-table").inner_text()
    assert page.evaluate(SHOWN_HIDDEN_JS) == []
    page.screenshot(path=str(artefacts / "report-scene-1280.png"), full_page=True)


def test_loudspeaker_stems_see_no_scene_fields(page, live_server, stems):
    open_desk(page, live_server, stems[6])
    assert layout_value(page) == "b:5.1"
    for name in ("ambisonic_norm", "ambisonic_decoder", "rotate"):
        assert field(page, name).is_hidden(), name
    assert page.locator("#view-settings [data-group='scene']").is_hidden()
    assert field(page, "channel_order").is_visible() and field(page, "fold").is_visible()
    assert page.locator("#view-settings [data-part='scene-hint']").is_hidden()
    scenes = field(page, "layout").locator("optgroup[label='Ambisonic scenes'] option")
    assert scenes.evaluate_all("os => os.every(o => o.disabled)")
    page.locator("#view-settings details[data-part='batch'] > summary").click()
    batch = page.locator("#view-settings [data-batch='layout'] input").evaluate_all(
        "is => is.map(i => i.value)"
    )
    assert "b:5.1" in batch and not [v for v in batch if v.startswith(("b:foa", "b:hoa"))]
    assert page.evaluate(SHOWN_HIDDEN_JS) == []


def test_blind_tab_words_scene_renders(page, live_server, stems):
    """The Blind tests tab tells scene renders apart by decoder and rotation, in words."""
    open_desk(page, live_server, stems[16])
    words = page.evaluate(
        """async () => (await import('/static/blind.js')).describeRenders([
             {request: {layout: 'hoa3', ambisonic_decoder: 'magls', rotate: null}},
             {request: {layout: 'hoa3', ambisonic_decoder: 'virtual', rotate: [30, 0, 0]}},
           ], ['layout', 'ambisonic_decoder', 'rotate'])"""
    )
    assert words == [
        "order 3 scene · MagLS decoder",
        "order 3 scene · virtual-loudspeaker decoder · rotated 30°",
    ]
