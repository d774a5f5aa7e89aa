"""The desk's "Blind tests" tab, the blind test page and the report page in headless
Chromium, against a real ``earfold serve``.

One server for the module; two generated 5.1 stems of 2 s: "pier-dawn" rendered three
times (dry, in the "small" room, and dry again with another loudness target, which sounds
the same as the first once the comparison level-matches it), "quarry-echo" once.
Screenshots go to ``test-artifacts/``.
"""

from __future__ import annotations

import json
import re
import time

import httpx
import pytest

from earfold.renderer.io import write_audio
from tests.service.stem_factory import FS, noise

pytestmark = pytest.mark.browser

SECONDS = 2


def _wait_done(http: httpx.Client, render_id: str) -> dict:
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:
        view = http.get(f"/v1/renders/{render_id}").json()
        if view["state"] in ("done", "failed", "cancelled"):
            assert view["state"] == "done", view
            return view
        time.sleep(0.2)
    raise AssertionError(f"render {render_id} did not finish")


@pytest.fixture(scope="module")
def setup(live_server, tmp_path_factory) -> dict:
    folder = tmp_path_factory.mktemp("blind-stems")
    out: dict = {}
    with httpx.Client(base_url=live_server.url, timeout=60) as http:
        for name, seed in (("pier-dawn.wav", 11), ("quarry-echo.wav", 12)):
            path = folder / name
            write_audio(path, noise(FS * SECONDS, 6, seed=seed, level=0.05), FS)
            resp = http.post("/v1/stems", files=[("file", (name, path.read_bytes(), "audio/wav"))])
            assert resp.status_code == 201, resp.text
            out[name] = resp.json()
        pier = out["pier-dawn.wav"]["id"]
        asked = {
            "dry": {"stem_id": pier, "layout": "5.1"},
            "small": {"stem_id": pier, "layout": "5.1", "room": "small"},
            # Only the loudness target differs: not an option that shapes the sound of a
            # comparison variant (the comparison level-matches), so it renders like "dry".
            "dry-louder": {"stem_id": pier, "layout": "5.1", "loudness": -18},
            "quarry": {"stem_id": out["quarry-echo.wav"]["id"], "layout": "5.1"},
        }
        renders = {}
        for key, body in asked.items():
            resp = http.post("/v1/renders", json=body)
            assert resp.status_code == 202, resp.text
            renders[key] = resp.json()["id"]
        for key, rid in renders.items():
            renders[key] = _wait_done(http, rid)
        out["renders"] = renders
        out["options"] = http.get("/v1/options").json()
    return out


def pick_stem(page, stem: dict) -> None:
    """Select `stem` in the desk's stems panel."""
    page.locator(f".stem-row[data-stem='{stem['id']}'] .stem-pick").click()
    page.wait_for_function(
        "id => window.earfoldDesk.state.stem && window.earfoldDesk.state.stem.id === id",
        arg=stem["id"],
    )


def open_blind_tab(page, server, stem: dict) -> None:
    """The desk with `stem` selected and the Blind tests tab open."""
    page.goto(server.url + "/")
    page.wait_for_selector("body[data-ready='1']")
    pick_stem(page, stem)
    page.locator("#tab-blind").click()
    page.wait_for_selector("#view-blind:not([hidden])")


def test_the_form_shows_only_with_two_finished_renders(page, live_server, setup, artefacts):
    open_blind_tab(page, live_server, setup["quarry-echo.wav"])
    note = page.locator("#blind-no-form")
    note.wait_for()
    assert "has 1 finished render" in note.inner_text()
    assert page.locator("#blind-form").count() == 0
    page.screenshot(path=str(artefacts / "blind-no-form.png"))
    pick_stem(page, setup["pier-dawn.wav"])
    page.wait_for_selector("#blind-form")
    # One choice per finished render of this stem, none of the other stem's.
    assert page.locator("#blind-form input[type=checkbox]").count() == 3
    quarry = setup["renders"]["quarry"]["id"]
    assert page.locator(f"#blind-form input[data-render='{quarry}']").count() == 0


def test_the_form_reads_its_limits_from_the_options(page, live_server, setup):
    limits = setup["options"]["comparison"]
    open_blind_tab(page, live_server, setup["pier-dawn.wav"])
    page.wait_for_selector("#blind-form")
    trials = page.locator("#blind-trials")
    assert trials.get_attribute("max") == str(limits["trials_max"])
    assert trials.get_attribute("min") == str(limits["trials_min"])
    assert trials.input_value() == str(limits["trials_default"])
    # The excerpt can be no longer than the API allows, nor than the stem (2 s here).
    length = page.locator("#blind-length")
    assert float(length.get_attribute("max")) == min(limits["excerpt_max_seconds"], SECONDS)
    designs = page.locator("#blind-form input[name=design]")
    assert [designs.nth(i).get_attribute("value") for i in range(designs.count())] == limits[
        "designs"
    ]


def test_identical_variants_are_refused_with_the_apis_message(page, live_server, setup, artefacts):
    r = setup["renders"]
    open_blind_tab(page, live_server, setup["pier-dawn.wav"])
    page.wait_for_selector("#blind-form")
    # The form already marks the two renders whose sound-shaping settings are alike.
    assert page.locator("#blind-form .same-sound").count() == 2
    page.locator(f"#blind-form input[type=checkbox][data-render='{r['dry']['id']}']").check()
    page.locator(f"#blind-form input[type=checkbox][data-render='{r['dry-louder']['id']}']").check()
    page.fill(f"input.variant-name[data-render='{r['dry']['id']}']", "plain")
    page.fill(f"input.variant-name[data-render='{r['dry-louder']['id']}']", "plain, louder")
    page.locator("#blind-start-button").click()
    message = page.locator("#blind-form-message")
    message.wait_for(state="visible")
    text = message.inner_text()
    assert "would render identically" in text
    assert "'plain'" in text and "'plain, louder'" in text
    # The API's sentence, not pydantic's raw validation text.
    assert "Input should" not in text and "value_error" not in text
    page.screenshot(path=str(artefacts / "blind-identical-refused.png"))
    with httpx.Client(base_url=live_server.url) as http:
        assert http.get("/v1/comparisons").json() == []


def test_ab_test_listed_opened_without_x_and_no_preference_counted(
    page, live_server, setup, artefacts
):
    r = setup["renders"]
    open_blind_tab(page, live_server, setup["pier-dawn.wav"])
    page.wait_for_selector("#blind-form")
    page.locator(f"#blind-form input[type=checkbox][data-render='{r['dry']['id']}']").check()
    page.locator(f"#blind-form input[type=checkbox][data-render='{r['small']['id']}']").check()
    page.fill(f"input.variant-name[data-render='{r['dry']['id']}']", "no room")
    page.fill(f"input.variant-name[data-render='{r['small']['id']}']", "small room")
    page.locator("#blind-design-ab").check()
    page.fill("#blind-trials", "2")
    page.fill("#blind-length", "1.5")
    page.locator("#blind-start-button").click()
    row = page.locator("#blind-table tbody tr").first
    row.wait_for()
    assert "no room vs small room" in row.inner_text()
    assert "A/B preference" in row.inner_text()
    page.wait_for_function(
        "() => /ready to listen/.test(document.querySelector('#blind-table tbody tr').innerText)",
        timeout=90_000,
    )
    assert "0 / 2" in row.inner_text()
    page.screenshot(path=str(artefacts / "blind-list.png"))
    comparison_id = row.get_attribute("data-id")
    link = row.locator("a.open-test")
    assert link.get_attribute("href") == f"/compare/{comparison_id}"
    link.click()

    page.wait_for_url(f"**/compare/{comparison_id}")
    page.wait_for_selector("body[data-state=listening]")
    assert page.locator("header.chrome").is_visible()  # the desk's header
    assert page.locator("#caution").is_visible()
    assert page.locator("#volume").input_value() == "-20"
    # A/B: only A and B to listen to, no X anywhere among the controls or the keys.
    assert page.locator("#sources button").all_inner_texts() == ["A", "B"]
    assert page.locator("#sources button[data-label=X]").count() == 0
    assert "X" not in page.locator("#keys kbd").all_inner_texts()
    page.keyboard.press("x")  # no X: the key does nothing
    assert page.evaluate("window.earfoldListening.active()") == "A"
    answers = page.locator("#answers button")
    assert [answers.nth(i).get_attribute("data-choice") for i in range(3)] == ["A", "B", "none"]
    page.screenshot(path=str(artefacts / "compare-ab-listening.png"))

    page.keyboard.press("n")  # no preference by key
    page.wait_for_selector("body[data-trial='1'][data-state=listening]")
    page.locator("#answers button[data-choice=A]").click()
    page.wait_for_selector("body[data-state=results]")
    summary = page.locator("#summary").inner_text()
    assert "2 of 2 trials answered, 1 of them with no preference" in summary
    rule = page.locator("#none-rule")
    assert rule.is_visible()
    assert "left out" in rule.inner_text() and "sign test" in rule.inner_text()
    assert "no preference" in page.locator("#trial-table").inner_text()
    assert not page.locator("#trial-table th.col-x").is_visible()
    page.screenshot(path=str(artefacts / "compare-ab-results.png"), full_page=True)
    with httpx.Client(base_url=live_server.url) as http:
        result = http.get(f"/v1/comparisons/{comparison_id}/results").json()
    assert [t["answer"] for t in result["trials"]] == ["none", "A"]
    assert result["no_preference"] == 1
    # The variant the second answer chose was preferred once; the tie counts for neither.
    chosen = result["trials"][1]["variants"]["A"]
    assert [v["preferred"] for v in result["variants"]] == [
        1 if i == chosen else 0 for i in range(2)
    ]

    back = page.locator("#back")
    assert back.get_attribute("href") == f"/#stem={setup['pier-dawn.wav']['id']}&tab=blind"
    back.click()
    page.wait_for_selector("body[data-ready='1']")
    page.wait_for_selector("#view-blind:not([hidden])")
    done = page.locator(f"#blind-table tr[data-id='{comparison_id}']")
    done.wait_for()
    assert "finished" in done.inner_text() and "2 / 2" in done.inner_text()

    # Delete from the list.
    page.once("dialog", lambda d: d.accept())
    done.locator("button.delete-test").click()
    page.wait_for_selector(f"#blind-table tr[data-id='{comparison_id}']", state="detached")
    with httpx.Client(base_url=live_server.url) as http:
        assert http.get(f"/v1/comparisons/{comparison_id}").status_code == 404


def test_compare_renders_event_preselects_the_renders(page, live_server, setup):
    r = setup["renders"]
    open_blind_tab(page, live_server, setup["pier-dawn.wav"])
    page.locator("#tab-settings").click()
    page.evaluate(
        "ids => window.earfoldDesk.bus.emit('compare-renders', { renderIds: ids })",
        [r["dry"]["id"], r["small"]["id"]],
    )
    page.wait_for_selector("#view-blind:not([hidden])")
    page.wait_for_selector(f"#blind-form input[data-render='{r['dry']['id']}']:checked")
    assert page.locator("#blind-form input[type=checkbox]:checked").count() == 2


# ----------------------------------------------------------------------- the report page


def _open_report(page, server, render_id: str, theme: str = "light") -> None:
    page.add_init_script(f"localStorage.setItem('earfold.theme', '{theme}')")
    page.goto(f"{server.url}/report/{render_id}")
    page.wait_for_selector("body[data-state=ready]")


def test_report_names_the_render_and_lists_every_loudspeaker(page, live_server, setup, artefacts):
    view = setup["renders"]["small"]
    _open_report(page, live_server, view["id"])
    with httpx.Client(base_url=live_server.url) as http:
        report = http.get(f"/v1/renders/{view['id']}/report").json()
    title = page.title()
    heading = page.locator("#report-title").inner_text()
    date = report["created"][:10]
    for part in ("pier-dawn.wav", "5.1", "room small", f"HRTF {report['hrtf']['name']}", date):
        assert part in title, (part, title)
        assert part in heading, (part, heading)
    rows = page.locator("#speaker-table tbody tr")
    assert rows.count() == len(report["speakers"]) == 6
    for i, spk in enumerate(report["speakers"]):
        row = rows.nth(i)
        assert row.get_attribute("data-label") == spk["label"]
        text = row.inner_text()
        if spk.get("lfe"):
            assert "LFE" in text
            continue
        # Direction asked and every direction used, with its weight (renderer convention:
        # azimuth counter-clockwise from the front, degrees).
        asked = f"{spk['azimuth']:.1f}° az, {spk['elevation']:.1f}° el".replace("-", "−")
        assert asked in text
        for m in spk["measured"]:
            used = f"{m['azimuth']:.1f}° az, {m['elevation']:.1f}° el × {m['weight']:.3f}"
            assert used.replace("-", "−") in text
    assert page.locator("#back").get_attribute("href") == f"/#stem={setup['pier-dawn.wav']['id']}"
    # Warnings are warnings; notes (if the server gives any) are neutral.
    assert page.locator("#warnings li.warn").count() == len(report.get("warnings", []))
    assert page.locator("#notes li.note").count() == len(report.get("notes", []))
    assert "small" in page.locator("#room-body").inner_text()
    page.screenshot(path=str(artefacts / "report-light.png"), full_page=True)


def test_report_json_download(page, live_server, setup, tmp_path):
    view = setup["renders"]["dry"]
    _open_report(page, live_server, view["id"])
    with page.expect_download() as info:
        page.locator("#download-json").click()
    download = info.value
    assert re.fullmatch(r"pier-dawn-[0-9a-f]{8}\.report\.json", download.suggested_filename)
    path = tmp_path / "report.json"
    download.save_as(path)
    saved = json.loads(path.read_text())
    with httpx.Client(base_url=live_server.url) as http:
        assert saved == http.get(f"/v1/renders/{view['id']}/report").json()


def _series_styles(page, chart: str) -> list[tuple[str, str]]:
    return page.eval_on_selector_all(
        f"#{chart} g.series polyline",
        "ls => ls.map(l => [getComputedStyle(l).stroke, getComputedStyle(l).strokeDasharray])",
    )


@pytest.mark.parametrize("theme", ["light", "dim"])
def test_charts_differ_in_colour_and_dash_and_read_out_on_hover(
    page, live_server, setup, artefacts, theme
):
    view = setup["renders"]["small"]
    _open_report(page, live_server, view["id"], theme)
    assert page.evaluate("document.documentElement.dataset.theme") == theme
    # The two ears: different colour AND different dash pattern.
    (c1, d1), (c2, d2) = _series_styles(page, "chart-spectra")
    assert c1 != c2 and d1 != d2
    # The room decay: seven octave bands, no two alike in (colour, dash); the -60 dB line
    # in a colour no band has.
    decay = page.eval_on_selector_all(
        "#chart-decay g.series",
        "gs => gs.map(g => { const l = g.querySelector('polyline'); const s = getComputedStyle(l);"
        " return [g.dataset.name, s.stroke, s.strokeDasharray]; })",
    )
    assert len(decay) == 7
    assert len({(c, d) for _, c, d in decay}) == 7
    floor = page.eval_on_selector("#chart-decay line.hline", "l => getComputedStyle(l).stroke")
    assert floor not in {c for _, c, _ in decay}
    band_4k = next(c for name, c, _ in decay if name == "4k Hz")
    target = page.eval_on_selector("#chart-loudness line.hline", "l => getComputedStyle(l).stroke")
    loud = [c for c, _ in _series_styles(page, "chart-loudness")]
    # The loudness target, the -60 dB line and the 4 kHz band: three colours.
    assert len({target, floor, band_4k}) == 3
    assert target not in loud
    # Legends: one entry per series and reference line, drawn with the same dash.
    legend = page.eval_on_selector_all(
        "#chart-decay .chart-legend line", "ls => ls.map(l => getComputedStyle(l).strokeDasharray)"
    )
    assert legend[:7] == [d for _, _, d in decay]

    # Hover: a crosshair and the value of every series at that time.
    chart = page.locator("#chart-decay")
    chart.locator(".hit").hover(position={"x": 120, "y": 60})
    readout = chart.locator("g.readout")
    page.wait_for_function("document.querySelector('#chart-decay').dataset.readout")
    assert readout.get_attribute("visibility") == "visible"
    data = json.loads(chart.get_attribute("data-readout"))
    assert len(data["values"]) == 7
    texts = chart.locator("text.readout-text").all_text_contents()
    assert texts[0].startswith("time: ") and texts[0].endswith(" s")
    assert all(re.search(r"Hz: −?\d+\.\d dB$", t) for t in texts[1:])
    # The values shown are the plotted data at the nearest time.
    with httpx.Client(base_url=live_server.url) as http:
        decay_data = http.get(f"/v1/renders/{view['id']}/report").json()["plots"]["room_decay"]
    times = decay_data["time_s"]
    k = min(range(len(times)), key=lambda i: abs(times[i] - data["x"]))
    assert data["values"] == [band[k] for band in decay_data["levels_db"]]
    page.screenshot(path=str(artefacts / f"report-chart-readout-{theme}.png"), full_page=True)
    page.mouse.move(0, 0)
    assert readout.get_attribute("visibility") == "hidden"
    # The keyboard reads out too: focus the chart, step along with the arrow keys.
    spectra = page.locator("#chart-spectra")
    spectra.focus()
    page.keyboard.press("Home")
    page.keyboard.press("ArrowRight")
    first = json.loads(spectra.get_attribute("data-readout"))
    page.keyboard.press("ArrowRight")
    second = json.loads(spectra.get_attribute("data-readout"))
    with httpx.Client(base_url=live_server.url) as http:
        centres = http.get(f"/v1/renders/{view['id']}/report").json()["plots"]["spectra"]
    assert first["x"] == centres["centres_hz"][1] and second["x"] == centres["centres_hz"][2]
    assert second["values"] == [ear[2] for ear in centres["levels_db"]]
    page.keyboard.press("Escape")
    assert spectra.locator("g.readout").get_attribute("visibility") == "hidden"


def test_screenshots_of_the_blind_test_and_report_pages(browser, live_server, setup, artefacts):
    """Each page at 1,280 x 800 and 1,920 x 1,080 in both themes, with the header and the
    hearing caution in view (the page's own palette tokens resolve in either theme)."""
    r = setup["renders"]
    with httpx.Client(base_url=live_server.url, timeout=30) as http:
        resp = http.post(
            "/v1/comparisons",
            json={
                "stem_id": setup["pier-dawn.wav"]["id"],
                "mode": "abx",
                "trials": 1,
                "excerpt": {"length": 1.0},
                "variants": [
                    {"layout": "5.1", "name": "no room"},
                    {"layout": "5.1", "room": "small", "name": "small room"},
                ],
            },
        )
        assert resp.status_code == 202, resp.text
        comparison = resp.json()
    pages = {
        "compare": (f"/compare/{comparison['id']}", "body[data-state=listening]"),
        "report": (f"/report/{r['small']['id']}", "body[data-state=ready]"),
    }
    backgrounds = {}
    for theme in ("light", "dim"):
        for width, height in ((1280, 800), (1920, 1080)):
            context = browser.new_context(viewport={"width": width, "height": height})
            context.add_init_script(f"localStorage.setItem('earfold.theme', '{theme}')")
            pg = context.new_page()
            try:
                for name, (path, ready) in pages.items():
                    pg.goto(live_server.url + path)
                    pg.wait_for_selector(ready, timeout=90_000)
                    assert pg.locator("header.chrome").is_visible()
                    assert pg.locator("#hearing-caution").is_visible()
                    backgrounds[(name, theme)] = pg.evaluate(
                        "getComputedStyle(document.body).backgroundColor"
                    )
                    pg.screenshot(path=str(artefacts / f"{name}-{theme}-{width}x{height}.png"))
            finally:
                context.close()
    # The dim theme is not the light one.
    for name in pages:
        assert backgrounds[(name, "light")] != backgrounds[(name, "dim")]


def test_report_of_a_stereo_fold_down_shows_its_coefficients(page, live_server, setup):
    """The reference render (fold "stereo"): named as a fold-down, no HRTF, the gains of
    each loudspeaker to the left and right outputs (ITU-R BS.775 2/0 fold-down: C and the
    surrounds at 0.7071, LFE left out) in the table."""
    with httpx.Client(base_url=live_server.url, timeout=30) as http:
        resp = http.post(
            "/v1/renders",
            json={"stem_id": setup["quarry-echo.wav"]["id"], "layout": "5.1", "fold": "stereo"},
        )
        assert resp.status_code == 202, resp.text
        view = _wait_done(http, resp.json()["id"])
        report = http.get(f"/v1/renders/{view['id']}/report").json()
    _open_report(page, live_server, view["id"])
    assert "stereo fold-down" in page.title()
    assert "HRTF" not in page.title()
    assert page.locator("#h-hrtf").inner_text() == "Stereo fold-down (no HRTF)"
    rows = page.locator("#fold-table tbody tr")
    assert rows.count() == len(report["fold"]["coefficients"]) == 6
    labels = page.locator("#fold-table tbody th").all_inner_texts()
    assert labels == [c["label"] for c in report["fold"]["coefficients"]]
    centre = rows.nth(labels.index("C")).inner_text()
    assert "0.7071" in centre and "−3.01" in centre
    lfe = page.locator("#speaker-table tbody tr[data-label=LFE]").inner_text()
    assert "left out" in lfe


def test_blind_tests_listed_once_a_token_is_given(page, tmp_path):
    """With tokens on, the tab lists the caller's tests after the token prompt (no reload)."""
    from earfold.service.tools.local_server import LocalServer

    token = "quiet-room-token-4821"
    tokens = tmp_path / "tokens.txt"
    tokens.write_text(token + "\n")
    path = tmp_path / "lantern.wav"
    write_audio(path, noise(FS * SECONDS, 6, seed=21, level=0.05), FS)
    auth = {"Authorization": f"Bearer {token}"}
    with (
        LocalServer(workers=1, extra_args=["--tokens-file", str(tokens)]) as server,
        httpx.Client(base_url=server.url, timeout=30, headers=auth) as http,
    ):
        stem = http.post(
            "/v1/stems", files=[("file", (path.name, path.read_bytes(), "audio/wav"))]
        ).json()
        made = http.post(
            "/v1/comparisons",
            json={
                "stem_id": stem["id"],
                "mode": "abx",
                "trials": 1,
                "excerpt": {"length": 1.0},
                "variants": [{"layout": "5.1"}, {"layout": "5.1", "room": "small"}],
            },
        )
        assert made.status_code == 202, made.text
        page.goto(f"{server.url}/#tab=blind")
        page.wait_for_selector("dialog.token-dialog[open]")
        page.fill("#token-input", token)
        page.click("dialog.token-dialog button[type=submit]")
        row = page.locator(f"#blind-table tr[data-id='{made.json()['id']}']")
        row.wait_for()
        assert "lantern.wav" in row.inner_text() and "ABX" in row.inner_text()
