"""The render page at ``/``, driven in headless Chromium against a real ``earfold serve``.

Each test saves a screenshot in ``test-artifacts/`` (the ``artefacts`` fixture).
"""

from __future__ import annotations

import base64
import json
import re
import secrets
from pathlib import Path

import httpx
import numpy as np
import pytest
import soundfile as sf

from earfold.service.tools.local_server import LocalServer
from tests.service.stem_factory import FS, write_mono_set, write_stem

pytestmark = pytest.mark.browser

SECONDS = 3


@pytest.fixture(scope="module")
def stems(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("web-stems")
    write_stem(folder / "harbour-night.wav", SECONDS * FS, 6, seed=4)
    write_mono_set(folder, "5.1", FS, seed=5, prefix="quay")
    return folder


def open_page(page, server) -> None:
    page.goto(server.url + "/")
    page.wait_for_selector("#server-status:has-text('connected')")


def upload_stem(page, path: Path) -> None:
    page.set_input_files("#stem-files", str(path))
    page.wait_for_selector("#stem-facts:not([hidden])")


def row_of_newest(page):
    return page.locator("#renders tbody tr").first


def test_upload_render_follow_download_and_read_report(
    page, live_server, stems, artefacts, tmp_path
):
    open_page(page, live_server)
    upload_stem(page, stems / "harbour-night.wav")
    facts = page.locator("#stem-facts").inner_text()
    assert "harbour-night.wav" in facts
    assert "48000 Hz" in facts and "3.00 s" in facts
    assert re.search(r"suggested layout\s+5\.1", facts)
    assert page.locator("#upload-progress").evaluate("e => e.value") == 1
    # The picture is drawn from the layout's angles: five directional loudspeakers (L at
    # +30 degrees azimuth is up and to the left of the listener), LFE in its box.
    page.select_option("#layout", "5.1")
    marks = page.locator("#layout-picture g.speaker")
    assert marks.count() == 5
    left = page.locator("#layout-picture g[data-label='L'] circle").bounding_box()
    right = page.locator("#layout-picture g[data-label='R'] circle").bounding_box()
    centre = page.locator("#layout-picture g[data-label='C'] circle").bounding_box()
    assert left["x"] < centre["x"] < right["x"]
    assert left["y"] > centre["y"]  # C is straight ahead, L and R 30 degrees off
    # Layouts that do not fit six channels cannot be chosen.
    assert page.locator("#layout option[value='7.1.4']").is_disabled()

    page.select_option("#room", "small")
    assert "4.6 × 3.9 × 2.9 m" in page.locator("#room-figures").inner_text()
    assert page.locator("#room-picture svg").count() == 1
    page.screenshot(path=str(artefacts / "web-ui-settings.png"), full_page=True)

    seen: list[str] = []
    page.on("response", lambda r: seen.append(r.url) if "/v1/renders" in r.url else None)
    page.click("#render-button")
    row = row_of_newest(page)
    row.locator(".state-text").wait_for()
    row.locator(".state-text", has_text="done").wait_for(timeout=120_000)
    assert row.get_attribute("data-state") == "done"
    assert any(u.endswith("/v1/renders?limit=100") for u in seen)  # it was followed
    assert "room small" in row.locator(".settings").inner_text()

    with page.expect_download() as info:
        row.locator(".act-download").click()
    saved = tmp_path / info.value.suggested_filename
    info.value.save_as(saved)
    assert info.value.suggested_filename == "harbour-night.binaural.wav"
    render_id = row.get_attribute("data-id")
    report = httpx.get(f"{live_server.url}/v1/renders/{render_id}/report").json()
    with sf.SoundFile(saved) as f:
        assert f.channels == 2
        assert f.samplerate == FS
        # Input frames plus the response's length minus one (full convolution).
        assert f.frames == SECONDS * FS + report["output"]["filter_length"] - 1
        assert f.frames == report["output"]["frames"]
    assert report["room"]["room"]["name"] == "small"

    row.locator(".act-report").click()
    page.wait_for_selector("#report-panel .charts svg")
    charts = page.locator("#report-panel .charts svg.chart")
    assert charts.count() == 3  # loudness, ear spectra, room decay
    loud = charts.nth(0)
    assert loud.locator("polyline[data-name='short-term']").count() == 1
    assert loud.locator("line.hline").count() == 1  # the -23 LUFS target line
    assert page.locator("#report-panel").inner_text().count("LUFS") >= 2
    assert page.locator("#report-panel .caution").count() == 1
    assert "T20 (s)" in page.locator("#report-panel").inner_text()  # the room's figures
    page.screenshot(path=str(artefacts / "web-ui-report.png"), full_page=True)

    # The report view has its own address: a reload (or a bookmark) opens it again.
    assert page.url.endswith(f"/#report={render_id}")
    page.reload()
    page.wait_for_selector("#report-panel .charts svg.chart")
    # The preview starts at a reduced level (hearing safety).
    page.click("#preview-button")
    audio = page.locator("#report-panel audio")
    audio.wait_for()
    assert audio.evaluate("a => a.volume") == pytest.approx(0.25)


def test_several_mono_files_dropped_get_labels_from_their_names(
    page, live_server, stems, artefacts
):
    open_page(page, live_server)
    files = sorted(stems.glob("quay.*.wav"))
    payload = [{"name": p.name, "data": base64.b64encode(p.read_bytes()).decode()} for p in files]
    # A real drop event on the drop zone, with the files in its DataTransfer.
    page.evaluate(
        """(files) => {
        const dt = new DataTransfer();
        for (const f of files) {
            const bytes = Uint8Array.from(atob(f.data), c => c.charCodeAt(0));
            dt.items.add(new File([bytes], f.name, {type: 'audio/wav'}));
        }
        const zone = document.querySelector('#dropzone');
        const init = {dataTransfer: dt, bubbles: true, cancelable: true};
        zone.dispatchEvent(new DragEvent('dragover', init));
        zone.dispatchEvent(new DragEvent('drop', init));
    }""",
        payload,
    )
    page.wait_for_selector("#stem-facts:not([hidden])")
    facts = page.locator("#stem-facts").inner_text()
    assert "from the file names" in facts
    assert page.locator("#layout").input_value() == "5.1"
    mapping = [page.locator(f"#map-{i}").input_value() for i in range(6)]
    assert sorted(mapping) == sorted(["L", "R", "C", "LFE", "Ls", "Rs"])
    assert "detected from the file names" in page.locator("#mapping-source").inner_text()
    # Editing the mapping into a duplicate is caught before anything is sent.
    page.locator("#mapping-box summary").click()
    page.select_option("#map-0", mapping[1])
    assert "more than once" in page.locator("#mapping-message").inner_text()
    page.screenshot(path=str(artefacts / "web-ui-mono-files.png"), full_page=True)
    requests: list[str] = []
    page.on("request", lambda r: requests.append(r.url) if r.method == "POST" else None)
    page.click("#render-button")
    assert not any(u.endswith("/v1/renders") for u in requests)
    # A real correction (swap the first two channels) is sent as the channel order.
    page.select_option("#map-1", mapping[0])
    assert page.locator("#mapping-message").inner_text() == ""
    with page.expect_request(lambda r: r.url.endswith("/v1/renders") and r.method == "POST") as req:
        page.click("#render-button")
    sent = json.loads(req.value.post_data)
    assert sent["channel_order"] == [mapping[1], mapping[0], *mapping[2:]]
    assert sent["layout"] == "5.1" and sent["loudness"] == -23 and sent["true_peak"] == -1
    page.locator("#render-message", has_text="queued").wait_for()


def test_refused_render_request_shows_the_servers_reason(page, live_server, stems):
    open_page(page, live_server)
    upload_stem(page, stems / "harbour-night.wav")
    # Out of range is caught by the form itself (the API's range: above -70 LUFS) ...
    posts: list[str] = []
    page.on("request", lambda r: posts.append(r.url) if r.method == "POST" else None)
    page.fill("#loudness", "-80")
    page.click("#render-button")
    assert page.locator("#loudness").evaluate("e => e.validity.rangeUnderflow")
    assert not any(u.endswith("/v1/renders") for u in posts)
    page.fill("#loudness", "-23")
    # ... and what only the server knows comes back in its words: the stem was deleted.
    stem_id = page.evaluate("document.querySelector('#stem-facts').dataset.stemId")
    assert httpx.delete(f"{live_server.url}/v1/stems/{stem_id}").status_code == 204
    detail = httpx.post(
        f"{live_server.url}/v1/renders", json={"stem_id": stem_id, "layout": "5.1"}
    ).json()["detail"]
    page.click("#render-button")
    message = page.locator("#render-message")
    message.filter(has_text="not queued").wait_for()
    assert detail in message.inner_text()


@pytest.mark.shared
def test_malformed_sofa_upload_is_refused_with_its_message(
    page, live_server, stems, shared_sofa_dir, artefacts
):
    bad = shared_sofa_dir / "malformed" / "random-bytes.sofa"
    # What the API says about this file, asked directly.
    answer = httpx.post(
        f"{live_server.url}/v1/hrtf-sets",
        timeout=60,
        files={"file": (bad.name, bad.read_bytes(), "application/octet-stream")},
    )
    assert answer.status_code == 422
    detail = answer.json()["detail"]
    open_page(page, live_server)
    upload_stem(page, stems / "harbour-night.wav")
    before = page.locator("#hrtf option").count()
    page.set_input_files("#sofa-file", str(bad))
    message = page.locator("#sofa-message")
    message.filter(has_text="refused").wait_for(timeout=60_000)
    assert detail in message.inner_text()
    assert message.get_attribute("role") == "alert"
    assert page.locator("#hrtf option").count() == before  # nothing was added
    page.screenshot(path=str(artefacts / "web-ui-sofa-refused.png"), full_page=True)


@pytest.mark.shared
def test_valid_sofa_upload_becomes_selectable(page, live_server, stems, shared_sofa_dir):
    good = shared_sofa_dir / "measured" / "Pulse.sofa"
    open_page(page, live_server)
    upload_stem(page, stems / "harbour-night.wav")
    page.set_input_files("#sofa-file", str(good))
    page.locator("#sofa-message", has_text="accepted").wait_for(timeout=60_000)
    chosen = page.locator("#hrtf").input_value()
    assert len(chosen) == 32  # the uploaded set's id is now selected
    assert "uploaded: Pulse.sofa" in page.locator("#hrtf option:checked").inner_text()


def test_token_server_asks_for_a_token_and_keeps_it_in_the_session(
    page, tmp_path, stems, artefacts
):
    token = secrets.token_urlsafe(24)
    tokens = tmp_path / "tokens.txt"
    tokens.write_text(token + "\n")
    with LocalServer(workers=1, extra_args=["--tokens-file", str(tokens)]) as server:
        sent: list[str | None] = []
        page.on(
            "request",
            lambda r: (
                sent.append(r.headers.get("authorization")) if "/v1/layouts" in r.url else None
            ),
        )
        open_page(page, server)
        panel = page.locator("#token-panel")
        panel.wait_for()
        assert page.evaluate("document.activeElement.id") == "token-input"
        page.fill("#token-input", "not-the-right-token-at-all")
        page.keyboard.press("Enter")
        page.locator("#token-message", has_text="not valid").wait_for()
        page.screenshot(path=str(artefacts / "web-ui-token.png"), full_page=True)
        page.fill("#token-input", token)
        page.keyboard.press("Enter")
        panel.wait_for(state="hidden")
        assert page.locator("#room option").count() >= 2  # the catalogue loaded
        assert sent[-1] == f"Bearer {token}"
        assert page.evaluate("sessionStorage.getItem('earfold.token')") == token
        assert page.evaluate("localStorage.length") == 0
        assert token not in page.evaluate("document.cookie")
        # A reload in the same tab keeps the token; the page does not ask again.
        page.reload()
        page.wait_for_selector("#server-status:has-text('tokens on')")
        page.locator("#room option").nth(1).wait_for(state="attached")
        assert page.locator("#token-panel").is_hidden()
        # Upload (XMLHttpRequest), render and download (fetch + blob) all carry the token.
        upload_stem(page, stems / "harbour-night.wav")
        page.click("#render-button")
        row = row_of_newest(page)
        row.locator(".state-text", has_text="done").wait_for(timeout=120_000)
        with page.expect_download() as info:
            row.locator(".act-download").click()
        with sf.SoundFile(info.value.path()) as f:
            assert f.channels == 2
        # Without the token the same render is refused: the page really sent it.
        plain = httpx.get(f"{server.url}/v1/renders/{row.get_attribute('data-id')}")
        assert plain.status_code == 401


def _two_renders(server: LocalServer, stem_path: Path) -> tuple[str, list[str]]:
    with httpx.Client(base_url=server.url, timeout=60) as http:
        stem = http.post(
            "/v1/stems", files={"file": (stem_path.name, stem_path.read_bytes(), "audio/wav")}
        ).json()
        ids = []
        for room in ("none", "medium"):
            r = http.post(
                "/v1/renders",
                json={"stem_id": stem["id"], "layout": "5.1", "room": room, "seed": 3},
            )
            assert r.status_code == 202, r.text
            ids.append(r.json()["id"])
    return stem["id"], ids


def test_blind_comparison_posts_the_selected_renders_settings(page, live_server, stems, artefacts):
    stem_id, ids = _two_renders(live_server, stems / "harbour-night.wav")
    posted: list[dict] = []
    fake_id = "c" * 32

    def answer(route):
        posted.append(json.loads(route.request.post_data))
        route.fulfill(
            status=202,
            content_type="application/json",
            headers={"Location": f"/v1/comparisons/{fake_id}"},
            body=json.dumps(
                {
                    "id": fake_id,
                    "state": "preparing",
                    "progress": 0,
                    "message": None,
                    "links": {"page": f"/compare/{fake_id}"},
                }
            ),
        )

    page.route("**/v1/comparisons", answer)
    open_page(page, live_server)
    for render_id in ids:
        page.locator(f"#sel-{render_id}").check()
    button = page.locator("#compare-button")
    assert button.is_enabled()
    page.fill("#compare-trials", "12")
    page.fill("#compare-length", "8")
    with page.context.expect_page():
        button.click()
    link = page.locator("#compare-link")
    link.wait_for()
    assert link.get_attribute("href") == f"/compare/{fake_id}"
    body = posted[0]
    assert body["stem_id"] == stem_id
    assert body["mode"] == "ab" and body["trials"] == 12
    assert body["excerpt"] == {"length": 8}
    assert [v["room"] for v in body["variants"]] == ["none", "medium"]  # oldest first
    for v in body["variants"]:
        # Only the options that shape the sound (the comparison contract's variant
        # fields), and a name for the reveal.
        assert set(v) <= {"name", "layout", "channel_order", "hrtf", "room", "seed", "block_size"}
        assert v["layout"] == "5.1" and v["seed"] == 3
        assert None not in v.values()
        assert 0 < len(v["name"]) <= 64
    assert "room medium" in body["variants"][1]["name"]
    page.screenshot(path=str(artefacts / "web-ui-comparison.png"), full_page=True)

    # ABX takes exactly two renders: two are selected, so it may start.
    page.select_option("#compare-mode", "abx")
    assert button.is_enabled()


def test_blind_comparison_with_the_real_comparison_api(page, live_server, stems):
    paths = httpx.get(f"{live_server.url}/openapi.json").json()["paths"]
    if "/v1/comparisons" not in paths:
        pytest.skip("this build has no comparison API (POST /v1/comparisons) yet")
    _, ids = _two_renders(live_server, stems / "harbour-night.wav")
    open_page(page, live_server)
    for render_id in ids:
        page.locator(f"#sel-{render_id}").check()
    with page.expect_response(lambda r: r.url.endswith("/v1/comparisons")) as answer:
        with page.context.expect_page() as opened:
            page.click("#compare-button")
    assert answer.value.status == 202, answer.value.text()
    made = answer.value.json()
    assert page.locator("#compare-link").get_attribute("href") == made["links"]["page"]
    opened.value.wait_for_load_state()
    assert opened.value.url.endswith(made["links"]["page"])


def test_comparison_unavailable_says_so(page, live_server, stems):
    _, ids = _two_renders(live_server, stems / "harbour-night.wav")
    page.route(
        "**/v1/comparisons",
        lambda route: route.fulfill(
            status=404,
            content_type="application/problem+json",
            body=json.dumps(
                {
                    "type": "about:blank",
                    "title": "Not Found",
                    "status": 404,
                    "detail": "no such resource",
                }
            ),
        ),
    )
    open_page(page, live_server)
    for render_id in ids:
        page.locator(f"#sel-{render_id}").check()
    page.click("#compare-button")
    page.locator("#compare-message", has_text="not available on this server yet").wait_for()


def test_selection_across_stems_disables_the_comparison(page, live_server, stems):
    _, first = _two_renders(live_server, stems / "harbour-night.wav")
    _, second = _two_renders(live_server, stems / "harbour-night.wav")
    open_page(page, live_server)
    page.locator(f"#sel-{first[0]}").check()
    page.locator(f"#sel-{second[0]}").check()
    assert page.locator("#compare-button").is_disabled()
    assert "same stem" in page.locator("#compare-message").inner_text()


def _contrast(fg: list[float], bg: list[float]) -> float:
    """WCAG 2.1 contrast ratio of two sRGB colours (relative luminance, section 1.4.3)."""

    def lum(rgb: list[float]) -> float:
        c = np.array(rgb[:3]) / 255.0
        c = np.where(c <= 0.03928, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
        return float(0.2126 * c[0] + 0.7152 * c[1] + 0.0722 * c[2])

    hi, lo = sorted((lum(fg), lum(bg)), reverse=True)
    return (hi + 0.05) / (lo + 0.05)


def test_keyboard_labels_and_contrast(page, live_server, stems, artefacts):
    # A listener from the start turns playwright's file-chooser interception on before
    # the key is pressed (turned on by the first expect_file_chooser, it can come late).
    page.on("filechooser", lambda chooser: None)
    open_page(page, live_server)
    # The drop zone is reached by keyboard and opens the file chooser on Enter.
    page.focus("#dropzone")
    with page.expect_file_chooser() as chooser:
        page.keyboard.press("Enter")
    chooser.value.set_files(str(stems / "harbour-night.wav"))
    page.wait_for_selector("#stem-facts:not([hidden])")
    # Every form control has a label (or an aria-label), every button a name.
    unlabeled = page.evaluate("""() => [...document.querySelectorAll('input, select')]
        .filter(e => !(e.labels && e.labels.length) && !e.getAttribute('aria-label'))
        .map(e => e.id || e.outerHTML)""")
    assert unlabeled == []
    nameless = page.evaluate("""() => [...document.querySelectorAll('button')]
        .filter(b => !b.textContent.trim() && !b.getAttribute('aria-label')).length""")
    assert nameless == 0
    # Controls found by their accessible names (the accessibility tree's view).
    assert page.get_by_label("Layout the stem was mixed for").input_value() == "5.1"
    room = page.get_by_label("Synthetic room")
    room.focus()
    page.keyboard.press("ArrowDown")  # keyboard changes the room and redraws it
    assert room.input_value() != "none"
    assert page.locator("#room-picture svg").count() == 1
    limiter = page.get_by_label("True-peak limiter on")
    limiter.focus()
    page.keyboard.press("Space")
    assert not limiter.is_checked()
    assert page.locator("#limiter-warning").is_visible()
    assert page.get_by_label("Ceiling (dBTP)").is_disabled()
    page.keyboard.press("Space")
    # Tab moves on from the limiter to its ceiling, in document order.
    page.keyboard.press("Tab")
    assert page.evaluate("document.activeElement.id") == "true-peak"
    # The pictures are images with a text alternative.
    label = page.locator("#layout-picture svg").get_attribute("aria-label")
    assert "5 loudspeakers" in label and "1 LFE" in label
    # Text contrast at least 4.5:1 (WCAG 2.1 AA) for body text, notes, errors, buttons.
    pairs = page.evaluate("""() => {
        const rgb = s => s.match(/\\d+(\\.\\d+)?/g).slice(0, 3).map(Number);
        const bgOf = e => { for (; e; e = e.parentElement) {
            const c = getComputedStyle(e).backgroundColor;
            if (c && !c.endsWith(', 0)') && c !== 'transparent') return rgb(c); }
            return [255, 255, 255]; };
        return ['#stem-title', '.note', '#render-button', '.caution', '#layout', 'th']
            .map(s => document.querySelector(s))
            .filter(Boolean)
            .map(e => [rgb(getComputedStyle(e).color), bgOf(e)]);
    }""")
    assert len(pairs) == 6
    for fg, bg in pairs:
        assert _contrast(fg, bg) >= 4.5, (fg, bg)
    page.screenshot(path=str(artefacts / "web-ui-keyboard.png"), full_page=True)


def test_cancel_and_delete_from_the_list(page, stems, artefacts):
    # No workers: a render stays queued until it is cancelled.
    with LocalServer(workers=0) as server:
        _, ids = _two_renders(server, stems / "harbour-night.wav")
        open_page(page, server)
        row = page.locator(f"#renders tr[data-id='{ids[0]}']")
        assert row.get_attribute("data-state") == "queued"
        assert row.locator(".act-download").is_hidden()
        row.locator(".act-cancel").click()
        row.locator(".state-text", has_text="cancelled").wait_for()
        assert httpx.get(f"{server.url}/v1/renders/{ids[0]}").json()["state"] == "cancelled"
        assert row.locator(".act-cancel").is_hidden()
        page.screenshot(path=str(artefacts / "web-ui-cancelled.png"), full_page=True)
        page.once("dialog", lambda dialog: dialog.accept())
        row.locator(".act-delete").click()
        row.wait_for(state="detached")
        assert httpx.get(f"{server.url}/v1/renders/{ids[0]}").status_code == 404
        # The other render is untouched and still followed.
        assert (
            page.locator(f"#renders tr[data-id='{ids[1]}']").get_attribute("data-state") == "queued"
        )
