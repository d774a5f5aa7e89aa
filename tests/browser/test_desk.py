"""The listening desk at ``/`` in headless Chromium against a real ``earfold serve``.

Covers: reload keeps the stem list, the selection and the renders (with stem names);
progress pushed by the server's event stream reaches 1.0; the A/B player keeps its sources
sample-aligned across switches; the reference fold-down is level-matched to the binaural
render (within 0.5 LU, read from the two reports: our BS.1770 meter); an upload cancelled
half-way leaves no stem; solo of one loudspeaker; no element marked hidden is displayed;
WCAG AA text contrast in both themes; the token prompt; cancel and delete of a queued
render.
"""

from __future__ import annotations

import base64
import secrets
import time
from pathlib import Path

import pytest

from earfold.service.tools.local_server import LocalServer
from tests.browser.desk_helpers import (
    SHOWN_HIDDEN_JS,
    client,
    low_contrast,
    open_desk,
    post_render,
    post_stem,
    wait_final,
)
from tests.service.stem_factory import FS, write_mono_set, write_stem

pytestmark = pytest.mark.browser

SECONDS = 3
RENDER_QUANTUM = 128  # frames: the Web Audio API's render quantum


@pytest.fixture(scope="module")
def stems(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("desk-stems")
    write_stem(folder / "harbour-night.wav", SECONDS * FS, 6, seed=4)
    write_stem(folder / "long-take.wav", 40 * FS, 6, seed=9)
    write_mono_set(folder, "5.1", FS, seed=5, prefix="quay")
    return folder


@pytest.fixture(scope="module")
def two_renders(live_server, stems) -> dict:
    """A stem with two finished 5.1 renders (dry and in a small room)."""
    with client(live_server) as http:
        stem = post_stem(http, stems / "harbour-night.wav")
        ids = [
            post_render(http, stem["id"], layout="5.1", room=room, seed=3)["id"]
            for room in ("none", "small")
        ]
        views = [wait_final(http, i) for i in ids]
    assert [v["state"] for v in views] == ["done", "done"], views
    return {"stem": stem, "renders": ids}


def row(page, render_id: str):
    return page.locator(f".render-row[data-render='{render_id}']")


def test_reload_keeps_the_stems_the_selection_and_the_renders(page, live_server, stems):
    open_desk(page, live_server)
    page.set_input_files("#stem-files", str(stems / "harbour-night.wav"))
    page.wait_for_selector(".stem-row.selected")
    stem_id = page.get_attribute(".stem-row.selected", "data-stem")
    assert page.locator(".stem-row.selected .stem-name").inner_text() == "harbour-night.wav"
    assert "5.1" in page.locator(".stem-row.selected .stem-facts").inner_text()
    assert page.locator("#upload-row").is_hidden()
    with client(live_server) as http:
        render = post_render(http, stem_id, layout="5.1", seed=1)
    page.evaluate("earfoldDesk.bus.emit('renders-changed', {})")
    row(page, render["id"]).wait_for()
    row(page, render["id"]).locator(".render-state[data-state=done]").wait_for(timeout=120_000)

    page.reload()
    page.wait_for_selector("body[data-ready]")
    assert f"stem={stem_id}" in page.evaluate("location.hash")
    selected = page.locator(".stem-row.selected")
    assert selected.get_attribute("data-stem") == stem_id
    assert selected.locator(".stem-pick").get_attribute("aria-pressed") == "true"
    # The renders of the selected stem are back, under the stem's name (never its id).
    done = row(page, render["id"])
    done.wait_for()
    assert done.get_attribute("data-state") == "done"
    heading = page.locator("#renders-heading").inner_text()
    assert "harbour-night.wav" in heading and stem_id not in heading
    assert stem_id not in page.locator("#render-list").inner_text()
    # Output loudness and true peak from the report: -23 LUFS is the default target.
    figures = done.locator(".render-figures")
    figures.filter(has_text="LUFS").wait_for()
    assert "−23.0 LUFS" in figures.inner_text() and "dBTP" in figures.inner_text()
    # The stem was never sent again.
    assert (
        page.evaluate(
            "performance.getEntriesByType('resource').filter(e => e.name.endsWith('/v1/stems')"
            " && e.initiatorType === 'xmlhttprequest').length"
        )
        == 0
    )


def test_mono_files_become_one_stem_named_after_their_common_part(page, live_server, stems):
    open_desk(page, live_server)
    files = sorted(str(p) for p in stems.glob("quay*.wav"))
    assert len(files) == 6
    page.set_input_files("#stem-files", files)
    page.wait_for_selector(".stem-row.selected")
    selected = page.locator(".stem-row.selected")
    assert selected.locator(".stem-name").inner_text() == "quay (6 files)"
    labels = selected.locator(".stem-labels").inner_text().split()
    assert sorted(labels) == sorted(["L", "R", "C", "LFE", "Ls", "Rs"])


def test_channel_levels_of_the_selected_stem(page, live_server, stems, tmp_path):
    # A 5.1 stem (file order L R C LFE Ls Rs, the WAV order) with a 50 Hz tone alone in L,
    # broadband noise in the LFE channel and a silent Rs: each strip shows its marker.
    import numpy as np

    from earfold.renderer.io import write_audio

    t = np.arange(2 * FS) / FS
    rng = np.random.default_rng(2)
    data = 0.05 * rng.standard_normal((2 * FS, 6))
    data[:, 0] = 0.3 * np.sin(2 * np.pi * 50 * t)  # L: bass only
    data[:, 5] = 0.0  # Rs silent
    path = tmp_path / "night-market.wav"
    write_audio(path, data, FS)
    with client(live_server) as http:
        stem = post_stem(http, path)
    open_desk(page, live_server, f"#stem={stem['id']}")
    page.wait_for_selector(".level-row")
    assert page.locator(".level-row").count() == 6
    assert page.locator(".level-overview").count() == 6

    def marks(channel: int) -> list[str]:
        found = page.locator(f".level-row[data-channel='{channel}'] .level-mark")
        return [found.nth(i).get_attribute("data-mark") for i in range(found.count())]

    assert marks(0) == ["LFE-like"]
    assert marks(3) == ["full range"]
    assert marks(5) == ["silent"]
    assert marks(1) == marks(2) == marks(4) == []
    # Peak of the L tone: 0.3 = -10.46 dBFS (20 log10 0.3).
    assert "−10.5" in page.locator(".level-row[data-channel='0'] .level-figures").inner_text()
    assert page.locator(".level-row[data-channel='3'] .level-label").inner_text() == "LFE"


def test_progress_arrives_by_the_event_stream_and_reaches_one(page, live_server, stems):
    with client(live_server) as http:
        stem = post_stem(http, stems / "long-take.wav")
        open_desk(page, live_server, f"#stem={stem['id']}")
        page.wait_for_function("earfoldDesk.renders && earfoldDesk.renders.source() !== 'none'")
        assert page.evaluate("earfoldDesk.renders.source()") == "stream"
        render = post_render(http, stem["id"], layout="5.1", room="small", seed=2)
        row(page, render["id"]).locator(".render-state[data-state=done]").wait_for(timeout=180_000)
    seen = page.evaluate(f"earfoldDesk.renders.progressSeen('{render['id']}')")
    assert seen[-1] == 1.0, seen
    assert seen == sorted(seen), seen  # progress never goes back
    assert page.evaluate("earfoldDesk.renders.source()") == "stream"  # never fell back


def test_ab_switch_keeps_the_sources_sample_aligned(page, live_server, two_renders):
    stem, (a, b) = two_renders["stem"], two_renders["renders"]
    windows: list[str] = []
    page.on("request", lambda r: windows.append(r.url) if "/window?" in r.url else None)
    open_desk(page, live_server, f"#stem={stem['id']}")
    row(page, a).locator(".act-ab").click()
    row(page, b).locator(".act-ab").click()
    page.wait_for_selector("#ab-switcher .ab-source:not([disabled]) >> nth=1")
    assert page.evaluate("earfoldDesk.player.state().masterDb") == -20  # starts quiet
    assert page.locator(".player-caution").is_visible()
    page.keyboard.press("Space")
    page.wait_for_function("earfoldDesk.player.state().playing")
    started = [s["startTime"] for s in page.evaluate("earfoldDesk.player.sources()")]
    assert len(set(started)) == 1  # one AudioContext time for every source
    for key in ["2", "1", "s", "s", "2", "1", "s"]:
        page.keyboard.press(key)
        page.wait_for_timeout(120)
        positions = page.evaluate("earfoldDesk.player.positions()")
        assert set(positions) == {a, b}
        values = list(positions.values())
        assert max(values) - min(values) <= RENDER_QUANTUM, positions
        assert max(values) > 0
        # Only the picked source is heard (the 5 ms ramp is over after 120 ms).
        state = page.evaluate("earfoldDesk.player.state()")
        gains = [s["gain"] for s in page.evaluate("earfoldDesk.player.sources()")]
        assert [g > 0 for g in gains] == [i == state["active"] for i in range(2)], gains
    assert page.evaluate("earfoldDesk.player.state().active") == 1  # 1 -> s = second source
    # A switch moves gains only: no source was started again.
    assert [s["startTime"] for s in page.evaluate("earfoldDesk.player.sources()")] == started
    assert windows, "the player fetched no window"
    pressed = page.locator("#ab-switcher .ab-source[aria-pressed=true]")
    assert pressed.count() == 1 and pressed.get_attribute("data-key") == b


def test_reference_fold_down_is_level_matched(page, live_server, two_renders):
    stem, (a, _) = two_renders["stem"], two_renders["renders"]
    open_desk(page, live_server, f"#stem={stem['id']}")
    row(page, a).locator(".act-ab").click()
    page.wait_for_selector("#ab-switcher .ab-source:not([disabled])")
    page.click("#ab-reference")
    page.wait_for_selector(
        "#ab-switcher .ab-source[data-key=reference]:not([disabled])", timeout=120_000
    )
    ref_id = page.evaluate("earfoldDesk.player.state().referenceId")
    with client(live_server) as http:
        ref = http.get(f"/v1/renders/{ref_id}").json()
        binaural = http.get(f"/v1/renders/{a}").json()
        assert ref["request"]["fold"] == "stereo"
        for key in ("layout", "channel_order", "loudness"):
            assert ref["request"][key] == binaural["request"][key]
        loud = [
            http.get(f"/v1/renders/{i}/report").json()["delivery"]["output"]["integrated_lufs"]
            for i in (a, ref_id)
        ]
    assert abs(loud[0] - loud[1]) <= 0.5, loud
    # A second press reuses the fold-down instead of rendering it again.
    page.click("#ab-reference")
    assert page.evaluate("earfoldDesk.player.state().referenceId") == ref_id
    sources = page.evaluate("earfoldDesk.player.sources()")
    assert [s["label"] for s in sources] == ["A", "reference"]


def test_solo_renders_one_loudspeaker_and_plays_it(page, live_server, two_renders):
    stem, (a, _) = two_renders["stem"], two_renders["renders"]
    open_desk(page, live_server, f"#stem={stem['id']}")
    parent = row(page, a)
    parent.locator(".solo-label").select_option("C")
    parent.locator(".act-solo").click()
    page.wait_for_function("earfoldDesk.player.state().mode === 'stream'", timeout=120_000)
    solo = page.locator(".render-row", has_text="solo C")
    solo.wait_for()
    assert solo.get_attribute("data-state") == "done"
    solo_id = solo.get_attribute("data-render")
    with client(live_server) as http:
        view = http.get(f"/v1/renders/{solo_id}").json()
    assert view["request"]["solo"] == "C"
    assert view["request"]["room"] == "none" and view["request"]["layout"] == "5.1"


def test_upload_cancel_leaves_no_stem(page, live_server, stems):
    with client(live_server) as http:
        before = {s["id"] for s in http.get("/v1/stems").json()}
    open_desk(page, live_server)
    cdp = page.context.new_cdp_session(page)
    cdp.send("Network.enable")
    cdp.send(
        "Network.emulateNetworkConditions",
        {"offline": False, "latency": 20, "downloadThroughput": -1, "uploadThroughput": 400_000},
    )
    page.set_input_files("#stem-files", str(stems / "long-take.wav"))  # 40 s, about 17 MB
    page.wait_for_selector("#upload-row:not([hidden])")
    page.wait_for_function("document.querySelector('#upload-progress').value > 0.02")
    page.click("#upload-cancel")
    page.wait_for_selector("#upload-message:has-text('cancelled')")
    assert page.locator("#upload-row").is_hidden()
    cdp.send(
        "Network.emulateNetworkConditions",
        {"offline": False, "latency": 0, "downloadThroughput": -1, "uploadThroughput": -1},
    )
    time.sleep(1.0)
    with client(live_server) as http:
        after = {s["id"] for s in http.get("/v1/stems").json()}
    assert after == before


def test_cancel_and_delete_a_queued_render(page, stems):
    # No workers: a render stays queued until it is cancelled.
    with LocalServer(workers=0) as server:
        with client(server) as http:
            stem = post_stem(http, stems / "harbour-night.wav")
            ids = [post_render(http, stem["id"], layout="5.1", seed=s)["id"] for s in (1, 2)]
        open_desk(page, server, f"#stem={stem['id']}")
        first = row(page, ids[0])
        assert first.get_attribute("data-state") == "queued"
        assert first.locator(".render-queue").is_visible()
        # Queue positions from the render view: 1 = next to start, 2 = one job ahead.
        assert first.locator(".render-queue").inner_text() == "queued: next to start"
        assert row(page, ids[1]).locator(".render-queue").inner_text() == "queued: 1 ahead"
        assert first.locator(".render-progress").is_hidden()
        assert first.locator(".act-download").count() == 0
        first.locator(".act-cancel").click()
        page.wait_for_selector(f".render-row[data-render='{ids[0]}'][data-state=cancelled]")
        with client(server) as http:
            assert http.get(f"/v1/renders/{ids[0]}").json()["state"] == "cancelled"
        # The other render moves up, told by the server's event stream.
        row(page, ids[1]).locator(".render-queue", has_text="next to start").wait_for()
        row(page, ids[0]).locator(".act-delete").click()
        row(page, ids[0]).locator(".act-delete-yes").click()
        row(page, ids[0]).wait_for(state="detached")
        with client(server) as http:
            assert http.get(f"/v1/renders/{ids[0]}").status_code == 404
        assert row(page, ids[1]).get_attribute("data-state") == "queued"


def test_delete_a_stem_after_confirming(page, live_server, stems):
    with client(live_server) as http:
        stem = post_stem(http, stems / "harbour-night.wav")
    open_desk(page, live_server, f"#stem={stem['id']}")
    item = page.locator(f".stem-row[data-stem='{stem['id']}']")
    item.locator(".stem-delete").click()
    item.locator(".stem-delete-yes").click()
    item.wait_for(state="detached")
    with client(live_server) as http:
        assert http.get(f"/v1/stems/{stem['id']}").status_code == 404
    assert f"stem={stem['id']}" not in page.evaluate("location.hash")


def test_token_prompt_keeps_the_token_in_the_tab(page, tmp_path, stems):
    token = secrets.token_urlsafe(24)
    tokens = tmp_path / "tokens.txt"
    tokens.write_text(token + "\n")
    with LocalServer(workers=1, extra_args=["--tokens-file", str(tokens)]) as server:
        sent: list[str | None] = []
        page.on(
            "request",
            lambda r: sent.append(r.headers.get("authorization")) if "/v1/stems" in r.url else None,
        )
        page.goto(server.url + "/")
        page.wait_for_selector("dialog.token-dialog[open]")
        page.fill("#token-input", "not-the-right-token-at-all")
        page.keyboard.press("Enter")
        page.locator("#token-message", has_text="did not accept").wait_for()
        page.fill("#token-input", token)
        page.keyboard.press("Enter")
        page.wait_for_selector("dialog.token-dialog", state="hidden")
        assert page.evaluate("sessionStorage.getItem('earfold.token')") == token
        # The desk loads again what the server refused before the token: the stems list,
        # the renders (live) and the catalogue.
        page.wait_for_selector("#renders-live:has-text('live')")
        page.wait_for_function("earfoldDesk.state.catalog.layouts !== null")
        assert page.locator("#stems-empty").is_visible()
        page.reload()
        page.wait_for_selector("body[data-ready]")
        assert page.locator("dialog.token-dialog[open]").count() == 0
        page.set_input_files("#stem-files", str(stems / "harbour-night.wav"))
        page.wait_for_selector(".stem-row.selected")
        assert sent and sent[-1] == f"Bearer {token}"


def test_labels_names_and_no_shown_hidden_element(page, live_server, two_renders):
    open_desk(page, live_server, f"#stem={two_renders['stem']['id']}")
    row(page, two_renders["renders"][0]).wait_for()
    assert page.evaluate(SHOWN_HIDDEN_JS) == []
    unlabeled = page.evaluate("""() => [...document.querySelectorAll('input:not([hidden]), select')]
        .filter(e => !(e.labels && e.labels.length) && !e.getAttribute('aria-label'))
        .map(e => e.id || e.outerHTML)""")
    assert unlabeled == []
    nameless = page.evaluate("""() => [...document.querySelectorAll('button')]
        .filter(b => !b.textContent.trim() && !b.getAttribute('aria-label')).length""")
    assert nameless == 0
    # The native file input never shows: the styled button opens it.
    assert page.locator("#stem-files").is_hidden()
    with page.expect_file_chooser():
        page.click("#stem-add")
    # The centre tabs by keyboard: ] moves on, [ back; the hash keeps the tab.
    page.locator("body").click(position={"x": 5, "y": 790})
    page.keyboard.press("]")
    assert page.get_attribute("#tab-speakers", "aria-selected") == "true"
    assert "tab=speakers" in page.evaluate("location.hash")
    page.reload()
    page.wait_for_selector("body[data-ready]")
    assert page.get_attribute("#tab-speakers", "aria-selected") == "true"
    assert page.locator("#view-settings").is_hidden()


@pytest.mark.parametrize("theme", ["light", "dim"])
def test_text_contrast_in_both_themes(page, live_server, two_renders, theme):
    page.add_init_script(f"localStorage.setItem('earfold.theme', '{theme}')")
    open_desk(page, live_server, f"#stem={two_renders['stem']['id']}")
    row(page, two_renders["renders"][0]).locator(".render-figures", has_text="LUFS").wait_for()
    page.wait_for_timeout(300)
    assert page.evaluate("document.documentElement.dataset.theme") == theme
    assert low_contrast(page) == []
    page.click("#player-keys")
    assert low_contrast(page) == []


def test_loop_region_keeps_every_source_inside_it_and_aligned(page, live_server, two_renders):
    stem, (a, b) = two_renders["stem"], two_renders["renders"]
    open_desk(page, live_server, f"#stem={stem['id']}")
    row(page, a).locator(".act-ab").click()
    row(page, b).locator(".act-ab").click()
    page.wait_for_selector("#ab-switcher .ab-source:not([disabled]) >> nth=1")
    page.keyboard.press("Space")
    page.wait_for_function("earfoldDesk.player.state().position > 0.3")
    page.keyboard.press("i")
    page.wait_for_function("(s => s.position > s.loop.in + 0.5)(earfoldDesk.player.state())")
    page.keyboard.press("o")
    page.keyboard.press("l")
    loop = page.evaluate("earfoldDesk.player.state().loop")
    assert loop["on"] and loop["out"] - loop["in"] >= 0.5
    rate = 48_000
    for _ in range(8):  # about 1.6 s: the 0.5 s loop wraps at least twice
        page.wait_for_timeout(200)
        positions = list(page.evaluate("earfoldDesk.player.positions()").values())
        assert max(positions) - min(positions) <= RENDER_QUANTUM, (
            positions,
            page.evaluate("earfoldDesk.player.sources()"),
        )
        low, high = loop["in"] * rate - RENDER_QUANTUM, loop["out"] * rate + RENDER_QUANTUM
        for frames in positions:
            assert low <= frames <= high, (positions, loop)
    assert page.locator("#loop-toggle").get_attribute("aria-pressed") == "true"


def test_play_from_the_row_streams_a_signed_link(page, live_server, two_renders):
    stem, (a, _) = two_renders["stem"], two_renders["renders"]
    audio_requests: list[dict] = []
    page.on(
        "request",
        lambda r: audio_requests.append(r.headers) if f"/v1/renders/{a}/audio" in r.url else None,
    )
    open_desk(page, live_server, f"#stem={stem['id']}")
    row(page, a).locator(".act-play").click()
    page.wait_for_function("document.querySelector('#stream-audio').currentTime > 0.2")
    src = page.get_attribute("#stream-audio", "src")
    assert src.startswith(f"/v1/renders/{a}/audio?key="), src
    assert page.evaluate("document.querySelector('#stream-audio').volume") == pytest.approx(0.1)
    assert audio_requests  # the element fetched it itself (Range requests), not a blob
    page.keyboard.press("Space")
    page.wait_for_function("document.querySelector('#stream-audio').paused")


def test_seek_outside_the_window_loads_a_new_one_and_gains_match_loudness(
    page, live_server, tmp_path
):
    # A 70 s stereo stem rendered at two loudness targets: the switcher's gains bring the
    # louder one down to the quieter (from the reports' integrated loudness), and a seek
    # past the first 45 s window fetches the window around the new place.
    path = tmp_path / "ferry-crossing.wav"
    write_stem(path, 70 * FS, 2, seed=21)
    with client(live_server) as http:
        stem = post_stem(http, path)
        ids = [
            post_render(http, stem["id"], layout="2.0", loudness=target)["id"]
            for target in (-23, -20)
        ]
        assert all(wait_final(http, i)["state"] == "done" for i in ids)
        lufs = [
            http.get(f"/v1/renders/{i}/report").json()["delivery"]["output"]["integrated_lufs"]
            for i in ids
        ]
    windows: list[str] = []
    page.on("request", lambda r: windows.append(r.url) if "/window?" in r.url else None)
    open_desk(page, live_server, f"#stem={stem['id']}")
    for render_id in ids:
        row(page, render_id).locator(".act-ab").click()
    page.wait_for_selector("#ab-switcher .ab-source:not([disabled]) >> nth=1")
    sources = {s["key"]: s for s in page.evaluate("earfoldDesk.player.sources()")}
    quiet = min(lufs)
    for render_id, level in zip(ids, lufs, strict=True):
        assert sources[render_id]["match"] == pytest.approx(10 ** ((quiet - level) / 20), rel=1e-6)
    assert sources[ids[1]]["match"] == pytest.approx(10 ** (-3 / 20), rel=0.02)  # 3 dB louder
    page.keyboard.press("Space")
    page.wait_for_function("earfoldDesk.player.state().playing")
    page.evaluate(
        "(() => { const s = document.querySelector('#player-seek');"
        " s.value = '60'; s.dispatchEvent(new Event('change')); })()"
    )
    page.wait_for_function(
        "(s => s.windowStart > 45 && s.playing)(earfoldDesk.player.state())", timeout=60_000
    )
    page.wait_for_timeout(300)
    positions = list(page.evaluate("earfoldDesk.player.positions()").values())
    assert max(positions) - min(positions) <= RENDER_QUANTUM, positions
    assert 60 * FS <= min(positions) <= 62 * FS, positions
    assert any("start=50.000" in url for url in windows), windows


def test_a_file_dropped_on_the_stems_panel_becomes_a_stem(page, live_server, tmp_path):
    path = tmp_path / "tram-stop.wav"
    write_stem(path, FS // 2, 2, seed=8)
    payload = base64.b64encode(path.read_bytes()).decode()
    open_desk(page, live_server)
    page.evaluate(
        """(data) => {
            const bytes = Uint8Array.from(atob(data), c => c.charCodeAt(0));
            const transfer = new DataTransfer();
            transfer.items.add(new File([bytes], 'tram-stop.wav', { type: 'audio/wav' }));
            const panel = document.querySelector('#stems-panel');
            const init = { dataTransfer: transfer, bubbles: true, cancelable: true };
            panel.dispatchEvent(new DragEvent('dragover', init));
            panel.dispatchEvent(new DragEvent('drop', init));
        }""",
        payload,
    )
    selected = page.locator(".stem-row.selected")
    selected.wait_for()
    assert selected.locator(".stem-name").inner_text() == "tram-stop.wav"
    assert "2 ch" in selected.locator(".stem-facts").inner_text()


def test_the_switchers_renders_start_a_blind_test(page, live_server, two_renders):
    stem, (a, b) = two_renders["stem"], two_renders["renders"]
    open_desk(page, live_server, f"#stem={stem['id']}")
    assert page.locator("#ab-blind").is_disabled()
    row(page, a).locator(".act-ab").click()
    row(page, b).locator(".act-ab").click()
    page.wait_for_selector("#ab-blind:not([disabled])")
    page.click("#ab-blind")
    page.wait_for_selector("#tab-blind[aria-selected=true]")
    assert page.locator("#view-blind").is_visible()
    assert "tab=blind" in page.evaluate("location.hash")


def test_theme_follows_the_system_until_one_is_chosen(browser, live_server):
    context = browser.new_context(viewport={"width": 1280, "height": 800}, color_scheme="dark")
    page = context.new_page()
    try:
        open_desk(page, live_server)
        assert page.evaluate("document.documentElement.dataset.theme") == "dim"
        assert page.input_value("#theme-choice") == "system"
        page.emulate_media(color_scheme="light")
        page.wait_for_function("document.documentElement.dataset.theme === 'light'")
        page.select_option("#theme-choice", "dim")
        assert page.evaluate("document.documentElement.dataset.theme") == "dim"
        page.emulate_media(color_scheme="light")
        page.reload()
        page.wait_for_selector("body[data-ready]")
        assert page.evaluate("document.documentElement.dataset.theme") == "dim"
        assert page.evaluate("localStorage.getItem('earfold.theme')") == "dim"
        page.select_option("#theme-choice", "system")
        assert page.evaluate("document.documentElement.dataset.theme") == "light"
        assert page.evaluate("localStorage.getItem('earfold.theme')") is None
    finally:
        context.close()
