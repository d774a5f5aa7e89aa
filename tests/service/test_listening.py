"""The listening side of the API: queue position, progress events, listen links, windows.

Event streams never end by themselves (the all-renders one) or end only after a render
finishes, and Starlette's TestClient buffers a whole response before returning it, so
the stream tests talk to a real uvicorn server on a free port, run in a thread.
"""

from __future__ import annotations

import json
import threading
import time
from collections.abc import Iterator

import httpx
import pytest
from stem_factory import FS, files_field, write_stem

FAST = {"tick_s": 0.05, "poll_s": 0.02, "lease_s": 5.0}


def _stem(client, tmp_path, channels=6, frames=FS // 10, name="take.wav") -> dict:
    path = write_stem(tmp_path / name, frames, channels)
    resp = client.post("/v1/stems", files=files_field([path]))
    assert resp.status_code == 201, resp.text
    return resp.json()


def _problem(resp, status: int, pattern: str) -> None:
    assert resp.status_code == status, resp.text
    assert resp.headers["content-type"].startswith("application/problem+json")
    assert pattern in resp.json()["detail"], resp.json()


@pytest.fixture(params=["sqlite", "redis"])
def backend_client(request, make_client):
    if request.param == "redis":
        return make_client(queue_url=request.getfixturevalue("redis_queue_url"))
    return make_client()


def test_queue_position_in_the_render_view(backend_client, tmp_path):
    client = backend_client
    stem = _stem(client, tmp_path)
    body = {"stem_id": stem["id"], "layout": "5.1"}
    first = client.post("/v1/renders", json=body).json()
    second = client.post("/v1/renders", json=body).json()
    assert (first["queue_position"], second["queue_position"]) == (1, 2)
    assert client.get(f"/v1/renders/{second['id']}").json()["queue_position"] == 2
    listed = {r["id"]: r["queue_position"] for r in client.get("/v1/renders").json()}
    assert listed == {first["id"]: 1, second["id"]: 2}
    # The first leaves the line (cancelled): the second is next, the first has no place.
    assert client.delete(f"/v1/renders/{first['id']}").json()["queue_position"] is None
    assert client.get(f"/v1/renders/{second['id']}").json()["queue_position"] == 1


# -- a real server for the streams ------------------------------------------------------


class LiveServer:
    """The app under uvicorn on a free loopback port, in a thread."""

    def __init__(self, app) -> None:
        import socket

        import uvicorn

        self.app = app
        sock = socket.socket()
        sock.bind(("127.0.0.1", 0))
        self.port = sock.getsockname()[1]
        sock.close()
        config = uvicorn.Config(app, host="127.0.0.1", port=self.port, log_level="warning")
        self.server = uvicorn.Server(config)
        self.thread = threading.Thread(target=self.server.run, daemon=True)
        self.thread.start()
        deadline = time.monotonic() + 20
        while not self.server.started:
            assert time.monotonic() < deadline, "the server did not start"
            time.sleep(0.02)
        self.url = f"http://127.0.0.1:{self.port}"

    def stop(self) -> None:
        self.server.should_exit = True
        self.thread.join(timeout=10)


@pytest.fixture
def live(tmp_path):
    from earfold.service.app import create_app
    from earfold.service.settings import ServiceSettings

    made = []

    def make(**overrides):
        settings = ServiceSettings(
            data_dir=tmp_path / "data", **{"min_free_bytes": 0, **FAST, **overrides}
        )
        server = LiveServer(create_app(settings))
        made.append(server)
        return server

    yield make
    for server in made:
        server.stop()
        server.app.state.queue.close()


def _events(lines) -> Iterator[tuple[str, object]]:
    """(event name, parsed data) of each event, and ("comment", text) of each comment, from
    an iterator of text lines (WHATWG HTML, "Server-sent events": fields end at a blank
    line; a line starting with ':' is a comment)."""
    name, data = None, []
    for line in lines:
        if line.startswith(":"):
            yield "comment", line[1:].strip()
        elif line == "":
            if data:
                yield name or "message", json.loads("\n".join(data))
            name, data = None, []
        elif line.startswith("event:"):
            name = line[6:].strip()
        elif line.startswith("data:"):
            data.append(line[5:].strip())


def _worker_thread(app, jobs: int = 1) -> threading.Thread:
    """A worker that takes ``jobs`` jobs, one after the other, then stops."""
    from earfold.service.jobs.worker import Worker

    worker = Worker(app.state.settings, queue=app.state.queue, name="test-worker")

    def run() -> None:
        for _ in range(jobs):
            worker.run(once=True)

    thread = threading.Thread(target=run, daemon=True)
    thread.start()
    return thread


@pytest.mark.parametrize("backend", ["sqlite", "redis"])
def test_render_events_follow_a_render_to_done_then_end(live, tmp_path, request, backend):
    queue = {"queue_url": request.getfixturevalue("redis_queue_url")} if backend == "redis" else {}
    server = live(tokens=("alice-token",), **queue)
    auth = {"Authorization": "Bearer alice-token"}
    with httpx.Client(base_url=server.url, headers=auth, timeout=30) as http:
        # Long enough, with the engine fed 64-frame blocks, to take several of the render
        # process's 0.1 s progress intervals even in a warm process on an idle machine.
        path = write_stem(tmp_path / "long.wav", FS * 90, 2, subtype="PCM_16")
        stem = http.post("/v1/stems", files=files_field([path])).json()
        job = http.post(
            "/v1/renders", json={"stem_id": stem["id"], "layout": "2.0", "block_size": 64}
        ).json()
        seen = []
        with http.stream("GET", f"/v1/renders/{job['id']}/events") as resp:
            assert resp.status_code == 200
            assert resp.headers["content-type"].startswith("text/event-stream")
            thread = None
            deadline = time.monotonic() + 60  # the server sends a comment every 15 s
            for name, view in _events(resp.iter_lines()):
                assert time.monotonic() < deadline, seen
                if name == "comment":
                    continue
                assert name == "render"
                seen.append((view["state"], view["progress"], view["queue_position"]))
                if thread is None:  # the first event came before any work was done
                    assert view == http.get(f"/v1/renders/{job['id']}").json()
                    thread = _worker_thread(server.app)
            # The loop ends because the server ends the stream after the final state.
        thread.join(timeout=30)
    assert seen[0] == ("queued", 0.0, 1), seen
    assert seen[-1] == ("done", 1.0, None), seen
    assert any(state == "running" and 0 < p < 1 for state, p, _ in seen), seen
    progress = [p for _, p, _ in seen]
    assert progress == sorted(progress), progress
    assert len(set(seen)) == len(seen)  # an event per change, never a repeat


def test_all_render_events_show_each_render_and_keep_alive(live, tmp_path, monkeypatch):
    from earfold.service.routes import listening

    monkeypatch.setattr(listening, "KEEP_ALIVE_S", 0.5)
    deadline = time.monotonic() + 60
    server = live()
    with httpx.Client(base_url=server.url, timeout=30) as http:
        path = write_stem(tmp_path / "take.wav", FS // 5, 2)
        stem = http.post("/v1/stems", files=files_field([path])).json()
        body = {"stem_id": stem["id"], "layout": "2.0"}
        before = http.post("/v1/renders", json=body).json()  # in the first snapshot
        views: dict[str, list] = {}
        comments = 0
        with http.stream("GET", "/v1/renders/events") as resp:
            assert resp.status_code == 200
            after = None
            thread = None
            for name, view in _events(resp.iter_lines()):
                assert time.monotonic() < deadline, views
                if name == "comment":
                    comments += 1
                    assert view == "keep-alive"
                    if after is None:  # the stream is quiet: add the second render
                        after = http.post("/v1/renders", json=body).json()
                    continue
                views.setdefault(view["id"], []).append((view["state"], view["queue_position"]))
                if thread is None and after is not None and view["id"] == after["id"]:
                    thread = _worker_thread(server.app, jobs=2)  # both seen queued: go
                done = [i for i, v in views.items() if v[-1][0] == "done"]
                if len(done) == 2:
                    break
        thread.join(timeout=30)
    assert set(views) == {before["id"], after["id"]}
    assert views[before["id"]][0] == ("queued", 1)  # the snapshot, at once
    assert views[after["id"]][0] == ("queued", 2)  # a new render shows up, behind the first
    assert views[before["id"]][-1] == ("done", None) and views[after["id"]][-1] == ("done", None)
    assert comments >= 1


def test_all_render_events_miss_nothing_in_a_burst(live, tmp_path, monkeypatch):
    from earfold.service.routes import listening

    monkeypatch.setattr(listening, "RECENT", 2)  # a burst is larger than the newest read
    monkeypatch.setattr(listening, "KEEP_ALIVE_S", 0.5)  # so the loop below wakes up
    deadline = time.monotonic() + 30
    server = live()
    with httpx.Client(base_url=server.url, timeout=30) as http:
        path = write_stem(tmp_path / "take.wav", FS // 10, 2)
        stem = http.post("/v1/stems", files=files_field([path])).json()
        body = {"stem_id": stem["id"], "layout": "2.0"}
        old = [http.post("/v1/renders", json=body).json()["id"] for _ in range(3)]
        last: dict[str, tuple] = {}
        with http.stream("GET", "/v1/renders/events") as resp:
            new: list[str] = []
            for name, view in _events(resp.iter_lines()):
                assert time.monotonic() < deadline, last
                if name == "comment":
                    continue
                last[view["id"]] = (view["state"], view["queue_position"])
                if len(last) == 3 and not new:  # the snapshot is complete: a burst of 3
                    new = [http.post("/v1/renders", json=body).json()["id"] for _ in range(3)]
                    http.delete(f"/v1/renders/{old[0]}")  # the oldest leaves the line
                expected = {old[0]: ("cancelled", None)}
                expected.update({i: ("queued", n) for n, i in enumerate(old[1:] + new, 1)})
                if last == expected:
                    break  # every render shown, each in its final place


def test_a_client_that_goes_away_ends_its_stream(live, tmp_path):
    from earfold.service.routes import listening

    server = live()
    streams = server.app.state
    with httpx.Client(base_url=server.url, timeout=30) as http:
        path = write_stem(tmp_path / "take.wav", FS // 5, 2)
        stem = http.post("/v1/stems", files=files_field([path])).json()
        job = http.post("/v1/renders", json={"stem_id": stem["id"], "layout": "2.0"}).json()
        for address in ("/v1/renders/events", f"/v1/renders/{job['id']}/events"):
            with http.stream("GET", address) as resp:
                events = _events(resp.iter_lines())  # kept: dropping it closes the response
                next(events)  # the first event: the stream is open
                time.sleep(3 * listening.POLL_S)
                assert streams.event_streams.open == 1, address
            # The client closed its connection: within a few polls the server stops.
            deadline = time.monotonic() + 5
            while streams.event_streams.open:
                assert time.monotonic() < deadline, "the stream outlived its client"
                time.sleep(0.05)
        # and the server still answers at once
        started = time.monotonic()
        assert http.get(f"/v1/renders/{job['id']}").status_code == 200
        assert time.monotonic() - started < 1.0


# -- signed listen links -------------------------------------------------------------------


def _done_render(client, tmp_path, headers=None, frames=FS // 5, fmt="wav", name="take.wav"):
    from earfold.service.jobs.worker import Worker

    path = write_stem(tmp_path / name, frames, 2)
    stem = client.post("/v1/stems", files=files_field([path]), headers=headers).json()
    body = {"stem_id": stem["id"], "layout": "2.0", "format": fmt}
    if fmt == "flac":
        body["subtype"] = "PCM_24"
    job = client.post("/v1/renders", json=body, headers=headers).json()
    Worker(client.app.state.settings, queue=client.app.state.queue, name="w").run(once=True)
    done = client.get(f"/v1/renders/{job['id']}", headers=headers).json()
    assert done["state"] == "done", done
    return done


ALICE = {"Authorization": "Bearer alice-token"}
BOB = {"Authorization": "Bearer bob-token"}


def test_listen_link_opens_the_audio_without_the_header(make_client, tmp_path):
    client = make_client(tokens=("alice-token", "bob-token"), **FAST)
    render = _done_render(client, tmp_path, ALICE)
    before = time.time()
    resp = client.post(f"/v1/renders/{render['id']}/listen", headers=ALICE)
    assert resp.status_code == 200, resp.text
    link = resp.json()
    assert link["url"].startswith(f"/v1/renders/{render['id']}/audio?key=")
    expires = time.mktime(time.strptime(link["expires"], "%Y-%m-%dT%H:%M:%SZ")) - time.timezone
    assert before + 6 * 3600 - 2 <= expires <= time.time() + 6 * 3600 + 1  # valid 6 h

    whole = client.get(render["links"]["audio"], headers=ALICE)
    by_key = client.get(link["url"])  # no Authorization header
    assert by_key.status_code == 200 and by_key.content == whole.content
    # Range requests work through the key as well (the player streams and seeks).
    part = client.get(link["url"], headers={"Range": "bytes=100-199"})
    assert part.status_code == 206 and part.content == whole.content[100:200]
    # The same key follows the render's events (a finished render: one event, then the end).
    events = client.get(f"/v1/renders/{render['id']}/events?key={link['url'].split('=')[1]}")
    assert events.status_code == 200
    assert [v["state"] for _, v in _events(events.text.splitlines())] == ["done"]

    _problem(client.get(render["links"]["audio"]), 401, "API token")  # no key, no header
    # Bob cannot have a link made for Alice's render.
    _problem(client.post(f"/v1/renders/{render['id']}/listen", headers=BOB), 404, render["id"])
    secret = client.app.state.storage.root / "secret"
    assert secret.stat().st_mode & 0o777 == 0o600


def test_listen_link_refused_when_expired_altered_or_for_another_render(make_client, tmp_path):
    from earfold.service.signed_links import LinkSigner

    client = make_client(tokens=("alice-token",), **FAST)
    now = [time.time()]
    client.app.state.signer = LinkSigner(client.app.state.storage.root, clock=lambda: now[0])
    first = _done_render(client, tmp_path, ALICE, name="a.wav")
    second = _done_render(client, tmp_path, ALICE, name="b.wav")
    url = client.post(f"/v1/renders/{first['id']}/listen", headers=ALICE).json()["url"]
    key = url.split("key=")[1]
    expiry, mac = key.split(".")
    assert client.get(url).status_code == 200

    # Another render: the key names the render it was made for.
    _problem(client.get(f"/v1/renders/{second['id']}/audio?key={key}"), 401, "does not open")
    # Altered: one digit of the MAC, or a later expiry with the old MAC.
    flipped = mac[:-1] + ("0" if mac[-1] != "0" else "1")
    _problem(
        client.get(f"/v1/renders/{first['id']}/audio?key={expiry}.{flipped}"), 401, "does not open"
    )
    later = int(expiry) + 3600
    _problem(client.get(f"/v1/renders/{first['id']}/audio?key={later}.{mac}"), 401, "does not open")
    _problem(client.get(f"/v1/renders/{first['id']}/audio?key=garbage"), 401, "malformed")
    # Expired: six hours and a second later.
    now[0] += 6 * 3600 + 1
    _problem(client.get(url), 401, "expired")


def test_listen_link_secret_is_shared_by_apps_of_one_data_dir(make_client, tmp_path):
    one = make_client(**FAST)
    render = _done_render(one, tmp_path)
    url = one.post(f"/v1/renders/{render['id']}/listen").json()["url"]
    other = make_client()  # a second API process on the same data directory
    assert other.get(url).status_code == 200
    _problem(one.post(f"/v1/renders/{'0' * 32}/listen"), 404, "0" * 32)


def test_all_renders_key_opens_each_of_the_owners_renders(make_client, tmp_path):
    client = make_client(tokens=("alice-token", "bob-token"), **FAST)
    render = _done_render(client, tmp_path, ALICE)
    link = client.post("/v1/renders/events/link", headers=ALICE).json()
    assert link["url"].startswith("/v1/renders/events?key=")
    key = link["url"].split("key=")[1]
    assert client.get(f"/v1/renders/{render['id']}/audio?key={key}").status_code == 200
    bobs = client.post("/v1/renders/events/link", headers=BOB).json()["url"].split("key=")[1]
    _problem(client.get(f"/v1/renders/{render['id']}/audio?key={bobs}"), 401, "does not open")


# -- windows -------------------------------------------------------------------------------


@pytest.mark.parametrize("fmt", ["wav", "flac"])
def test_window_equals_the_same_frames_read_with_soundfile(make_client, tmp_path, fmt):
    import io

    import numpy as np
    import soundfile
    from numpy.testing import assert_array_equal

    client = make_client(**FAST)
    render = _done_render(client, tmp_path, frames=FS // 2, fmt=fmt)
    output = client.app.state.storage.path("renders", render["id"]) / f"output.{fmt}"
    whole, rate = soundfile.read(output, dtype="float32", always_2d=True)
    assert rate == FS

    resp = client.get(f"/v1/renders/{render['id']}/window?start=0.1&seconds=0.25")
    assert resp.status_code == 200, resp.text
    assert resp.headers["content-type"] == "audio/wav"
    got, got_rate = soundfile.read(io.BytesIO(resp.content), dtype="float32", always_2d=True)
    assert soundfile.info(io.BytesIO(resp.content)).subtype == "FLOAT"
    assert got_rate == FS and int(resp.headers["x-earfold-frames"]) == len(got) == FS // 4
    assert_array_equal(got, whole[FS // 10 : FS // 10 + FS // 4])  # sample for sample
    assert np.abs(got).max() > 0  # a render of noise, not silence

    # Clipped at the end: from 0.4 s, 1 s asked, 0.1 s there.
    tail = client.get(f"/v1/renders/{render['id']}/window?start=0.4&seconds=1")
    got, _ = soundfile.read(io.BytesIO(tail.content), dtype="float32", always_2d=True)
    assert int(tail.headers["x-earfold-frames"]) == len(got) == len(whole) - int(0.4 * FS)
    assert_array_equal(got, whole[int(0.4 * FS) :])


def test_window_out_of_range_is_422(make_client, tmp_path):
    client = make_client(**FAST)
    render = _done_render(client, tmp_path)  # 0.2 s and the filters' tail
    base = f"/v1/renders/{render['id']}/window"
    _problem(client.get(f"{base}?start=10&seconds=1"), 422, "not before the end")
    assert client.get(f"{base}?start=0&seconds=121").status_code == 422  # at most 120 s
    assert client.get(f"{base}?start=0&seconds=0").status_code == 422
    assert client.get(f"{base}?start=-1&seconds=1").status_code == 422
    _problem(client.get(f"/v1/renders/{'0' * 32}/window?seconds=1"), 404, "0" * 32)


# -- stem levels ---------------------------------------------------------------------------


def test_stem_levels_measured_at_upload_and_for_old_stems_on_request(client, tmp_path):
    import math

    import numpy as np

    from earfold.renderer.io import write_audio

    t = np.arange(FS) / FS
    data = np.stack([0.5 * np.sin(2 * np.pi * 1200 * t), np.zeros_like(t)], axis=1)
    path = tmp_path / "tone.wav"
    write_audio(path, data.astype(np.float32), FS, subtype="FLOAT")
    stem = client.post("/v1/stems", files=files_field([path])).json()
    folder = client.app.state.storage.path("stems", stem["id"])
    assert (folder / "levels.json").is_file()  # measured at upload, beside the stem

    resp = client.get(f"/v1/stems/{stem['id']}/levels")
    assert resp.status_code == 200, resp.text
    levels = resp.json()
    assert (levels["frames"], levels["sample_rate"], levels["points"]) == (FS, FS, 240)
    left, right = levels["channels"]
    assert (left["index"], left["label"], right["label"]) == (0, "L", "R")
    # a sine of amplitude 0.5: peak 20 log10 0.5, RMS 20 log10 (0.5 / sqrt 2) (textbook)
    assert left["peak_dbfs"] == pytest.approx(20 * math.log10(0.5), abs=0.01)
    assert left["rms_dbfs"] == pytest.approx(20 * math.log10(0.5 / math.sqrt(2)), abs=0.01)
    assert left["low_share"] == pytest.approx(0.0, abs=0.001) and len(left["overview"]) == 240
    assert right["peak_dbfs"] is None and right["low_share"] is None  # silent: null

    # A stem stored before levels existed: measured on the first request, then kept.
    (folder / "levels.json").unlink()
    again = client.get(f"/v1/stems/{stem['id']}/levels").json()
    assert again == levels and (folder / "levels.json").is_file()
    _problem(client.get(f"/v1/stems/{'0' * 32}/levels"), 404, "0" * 32)


# -- the report page -----------------------------------------------------------------------


def test_report_page_is_served_when_installed_and_404_otherwise(client, tmp_path, monkeypatch):
    from earfold.service.routes import pages

    monkeypatch.setattr(pages, "STATIC_DIR", tmp_path)
    rid = "ab" * 16
    _problem(client.get(f"/report/{rid}"), 404, "'report.html' is not installed")
    (tmp_path / "report.html").write_text("<!doctype html><title>report</title>")
    resp = client.get(f"/report/{rid}")
    assert resp.status_code == 200 and resp.headers["content-type"].startswith("text/html")
    assert resp.text == "<!doctype html><title>report</title>"
    assert resp.headers["cache-control"] == "no-cache"
    _problem(client.get("/report/not-an-id"), 404, "no render 'not-an-id'")
