"""ADM object masters on the desk and the report page, in headless Chromium against a real
server: a master's Settings show its summary and programme picker instead of the layout
pickers, draw each object's path on the top view and its height over time, move a marker
along the paths with the time slider, and render with the programme picked and no layout;
the report page lists every object with its path summary. Screenshots go to
test-artifacts/.
"""

from __future__ import annotations

import time

import httpx
import pytest

from tests.browser.desk_helpers import SHOWN_HIDDEN_JS, client, post_render, post_stem, wait_final
from tests.service.adm_masters import OBJECTS, write_harbour_master
from tests.service.stem_factory import FS, write_stem

pytestmark = pytest.mark.browser

RENDER_TIMEOUT_S = 240

#: Options hidden (and not sent) for a master: its metadata places every track.
NOT_FOR_ADM = ("layout", "channel_order", "solo", "fold", "headphone_eq", "rotate")


@pytest.fixture(scope="module")
def stems(live_server, tmp_path_factory) -> dict[str, dict]:
    """A 2 s harbour master (5.1 bed, a gull circling upwards, a bell at rest on the
    right; two programmes) and a plain 5.1 stem."""
    folder = tmp_path_factory.mktemp("desk-adm")
    master = write_harbour_master(folder / "harbour-master.wav", duration_s=2.0)
    plain = write_stem(folder / "ferry-six.wav", FS, 6, seed=4)
    with client(live_server) as http:
        return {"master": post_stem(http, master), "plain": post_stem(http, plain)}


def open_desk(page, server, stem: dict) -> None:
    page.goto(server.url + "/")
    page.wait_for_selector("body[data-ready='1']")
    page.wait_for_selector("#view-settings [data-option='layout'] select")
    page.evaluate("s => window.earfoldDesk.bus.emit('stem-selected', {stem: s})", stem)
    page.wait_for_selector(f"#view-settings .stem-line:has-text('{stem['channels']} ch')")


def field(page, name: str):
    return page.locator(f"#view-settings [data-option='{name}']")


def test_a_master_shows_its_objects_instead_of_layouts(page, live_server, stems, artefacts):
    stem = stems["master"]
    assert stem["adm"]["objects"] == 2 and stem["suggested_layout"] is None
    open_desk(page, live_server, stem)
    adm = field(page, "adm_programme")
    adm.wait_for()
    words = adm.locator("[data-part='adm-summary']").inner_text()
    assert "2 objects (1 moving)" in words and "6 bed loudspeakers" in words
    assert "no layout to choose" in words
    for name in NOT_FOR_ADM:
        assert field(page, name).is_hidden(), name
    assert page.locator("#view-settings [data-group='speakers']").is_hidden()
    assert field(page, "hrtf").is_visible()  # what a master does take stays
    assert field(page, "room").is_visible()
    picker = adm.locator("select[data-part='adm-programme']")
    assert picker.is_visible()
    assert picker.locator("option").evaluate_all("os => os.map(o => o.value)") == [
        "APR_1001",
        "APR_1002",
    ]

    picture = adm.locator("[data-part='adm-picture']")
    picture.wait_for()
    top = picture.locator("[data-view='paths-top']")
    assert top.locator("polyline[data-object]").count() == len(OBJECTS)
    assert picture.locator("[data-view='paths-height'] polyline[data-object]").count() == 2
    assert top.locator("[data-start]").count() == 2 and top.locator("[data-end]").count() == 2
    assert top.locator("[data-bed]").count() == 5  # the 5.1 bed without its LFE
    legend = picture.locator(".path-legend").inner_text()
    assert "Gull · track 7" in legend and "Bell · track 8 · at rest" in legend

    # The time slider moves a marker along each path: at 1 s the gull has reached
    # azimuth 90 (the left), elevation 10 (hand-written blocks: 0.5 s each).
    slider = adm.locator("input[data-part='adm-time']")
    slider.evaluate("s => { s.value = '1000'; s.dispatchEvent(new Event('input')); }")
    assert adm.locator("[data-part='adm-time-text']").inner_text() == "1.00 s"
    gull = top.locator("[data-now='Gull']")
    assert gull.get_attribute("visibility") == "visible"
    cx, cy = float(gull.get_attribute("cx")), float(gull.get_attribute("cy"))
    # top view: centre (110, 110), ear level at radius 46, elevation 10 at 40.9 (draw.js)
    assert cx == pytest.approx(110 - 92 * 80 / 180, abs=0.5) and cy == pytest.approx(110, abs=0.5)
    assert page.evaluate(SHOWN_HIDDEN_JS) == []
    page.screenshot(path=str(artefacts / "desk-adm-1280.png"))

    # The second programme has no bell: one path, and the render asks for it by ID.
    picker.select_option("APR_1002")
    page.wait_for_function(
        """() => document.querySelectorAll(
             "#view-settings [data-view='paths-top'] polyline[data-object]").length === 1"""
    )
    assert "1 object (1 moving)" in adm.locator("[data-part='adm-summary']").inner_text()
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
    assert request["adm_programme"] == "APR_1002" and request["layout"] is None
    assert request["room"] == "none" and request["fold"] == "binaural"
    # the renders panel names it as a master's render, not by a layout
    page.locator(
        "#mount-renders .render-title:has-text('ADM master · programme APR_1002')"
    ).wait_for()

    # A plain stem afterwards: the layouts are back, the master's field is gone.
    page.evaluate("s => window.earfoldDesk.bus.emit('stem-selected', {stem: s})", stems["plain"])
    page.wait_for_selector("#view-settings .stem-line:has-text('6 ch')")
    assert field(page, "adm_programme").is_hidden()
    assert page.locator("#view-settings [data-group='adm']").is_hidden()
    assert field(page, "layout").is_visible() and field(page, "room").is_visible()
    assert page.evaluate(SHOWN_HIDDEN_JS) == []


def test_the_report_lists_every_object_with_its_path(page, live_server, stems, artefacts):
    with client(live_server) as http:
        render = post_render(http, stems["master"]["id"])
        view = wait_final(http, render["id"], RENDER_TIMEOUT_S)
        assert view["state"] == "done", view
        report = http.get(f"/v1/renders/{render['id']}/report").json()
    page.goto(f"{live_server.url}/report/{render['id']}")
    page.wait_for_selector("body[data-state='ready']")
    section = page.locator("#sec-adm")
    assert section.is_visible()
    words = section.locator("[data-part='adm-words']").inner_text()
    assert "programme “Harbour” (APR_1001)" in words
    assert "2 objects, 6 bed loudspeakers" in words
    rows = section.locator("#adm-objects tbody tr")
    assert rows.count() == len(report["adm"]["objects_rendered"]) == 2
    gull = section.locator("#adm-objects tr[data-object='Gull']")
    bell = section.locator("#adm-objects tr[data-object='Bell']")
    cells = gull.locator("td").all_inner_texts()
    # track, plays, first direction, last direction, moves, breakpoints, rendered as,
    # not rendered
    assert cells[0] == "7" and cells[1] == "0.00 s to the end"
    assert cells[2] == "0.0° az, 0.0° el"
    entry = next(o for o in report["adm"]["objects_rendered"] if o["object"] == "Gull")
    assert cells[4] == f"{entry['moves_s'][0]:.2f} s to {entry['moves_s'][1]:.2f} s"
    assert cells[5] == str(entry["breakpoints"]) and cells[7] == "–"
    assert cells[6] == entry["rendered"] == "own HRIR pairs along its path"
    method = section.locator("[data-part='adm-method']").inner_text()
    assert method.startswith("How objects are rendered: followed along their paths")
    bell_cells = bell.locator("td").all_inner_texts()
    assert bell_cells[2] == bell_cells[3] == "−90.0° az, 0.0° el"
    assert bell_cells[4] == "at rest"
    assert page.locator("#h-speakers").inner_text() == "Tracks"
    assert page.evaluate(SHOWN_HIDDEN_JS) == []
    page.screenshot(path=str(artefacts / "report-adm-1280.png"), full_page=True)
