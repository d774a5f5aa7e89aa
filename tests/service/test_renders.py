"""``/v1/renders``: validation before queueing, the worker, cancel, Range download, report."""

from __future__ import annotations

import sys
import threading
import time

import numpy as np
import pytest
from numpy.testing import assert_array_equal
from stem_factory import FS, files_field, write_mono_set, write_stem

from earfold.renderer.io import read_audio
from earfold.renderer.render import RenderSettings, render
from earfold.service.jobs.worker import Worker

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


def _worker(client) -> Worker:
    return Worker(client.app.state.settings, queue=client.app.state.queue, name="test-worker")


@pytest.mark.parametrize(
    ("body", "pattern"),
    [
        ({"layout": "7.1.4"}, "the stem has 6 channel(s) but layout '7.1.4' has 12"),
        ({"layout": "5.1", "channel_order": ["L", "R", "C", "LFE", "Ls", "Ls"]}, "repeated"),
        ({"layout": "../../etc/passwd.json"}, "unknown layout"),
        ({"layout": "5.1", "hrtf": "no-such-set"}, "unknown HRTF set 'no-such-set'"),
        ({"layout": "5.1", "room": "cathedral"}, "unknown room 'cathedral'"),
        ({"layout": "5.1", "loudness": -80}, "loudness"),
        ({"layout": "5.1", "loudness": 3}, "loudness"),
        ({"layout": "5.1", "true_peak": -31}, "true_peak"),
        ({"layout": "5.1", "format": "mp3"}, "format"),
        ({"layout": "5.1", "format": "flac", "subtype": "FLOAT"}, "FLAC holds integer"),
        ({"layout": "5.1", "block_size": 1000}, "power of two"),
        ({"layout": "5.1", "colour": "red"}, "colour"),
        ({"layout": "5.1", "eq": "flat"}, "eq"),
        ({"layout": "5.1", "headphone_eq": [{"type": "notch", "frequency": 100}]}, "type"),
        (
            {"layout": "5.1", "headphone_eq": [{"type": "peaking", "frequency": 30000}]},
            "not below the stem's Nyquist frequency",
        ),
    ],
)
def test_bad_requests_are_422_before_queueing(client, tmp_path, body, pattern):
    stem = _stem(client, tmp_path)
    _problem(client.post("/v1/renders", json={"stem_id": stem["id"], **body}), 422, pattern)
    assert client.app.state.queue.counts()["queued"] == 0


def test_validation_errors_are_problem_details(client):
    resp = client.post(
        "/v1/renders", content=b"{not json", headers={"content-type": "application/json"}
    )
    assert resp.status_code == 422
    body = resp.json()
    assert body["type"] == "about:blank" and body["errors"]  # RFC 9457 plus an extension
    _problem(
        client.post("/v1/renders", json={"stem_id": "0" * 32, "layout": "5.1"}), 404, "no stem"
    )


def test_room_and_delivery_options_reach_the_renderer(make_client, tmp_path):
    """Room, loudness and true-peak fields of POST /v1/renders end up in the render: the
    report names the room and the delivery target, and the audio equals a direct render
    with the same settings (oracle: earfold.renderer.render._render.render)."""
    client = make_client(**FAST)
    paths = write_mono_set(tmp_path, "5.1", FS // 5)
    stem = client.post("/v1/stems", files=files_field(paths)).json()
    body = {"stem_id": stem["id"], "room": "small", "loudness": -20, "true_peak": -2, "seed": 3}
    job = client.post("/v1/renders", json=body).json()
    _worker(client).run(once=True)
    done = client.get(f"/v1/renders/{job['id']}").json()
    assert done["state"] == "done", done
    report = client.get(done["links"]["report"]).json()
    assert report["room"]["synthetic"] and report["room"]["room"]["name"] == "small"
    assert report["delivery"]["target_lufs"] == -20 and report["delivery"]["ceiling_dbtp"] == -2
    out = tmp_path / "got.wav"
    out.write_bytes(client.get(done["links"]["audio"]).content)
    ref = tmp_path / "ref.wav"
    render(
        paths,
        ref,
        RenderSettings(layout="5.1", room="small", loudness=-20.0, true_peak=-2.0, seed=3),
    )
    assert_array_equal(read_audio(out)[0], read_audio(ref)[0])

    # The words: no gain and no limiter.
    job = client.post(
        "/v1/renders", json={"stem_id": stem["id"], "loudness": "none", "true_peak": "off"}
    ).json()
    _worker(client).run(once=True)
    done = client.get(f"/v1/renders/{job['id']}").json()
    assert done["state"] == "done", done
    assert client.get(done["links"]["report"]).json()["delivery"] is None


def test_queue_full_is_429(make_client, tmp_path):
    client = make_client(max_queued=1)
    stem = _stem(client, tmp_path)
    body = {"stem_id": stem["id"], "layout": "5.1"}
    assert client.post("/v1/renders", json=body).status_code == 202
    resp = client.post("/v1/renders", json=body)
    _problem(resp, 429, "queue is full")
    assert resp.headers["retry-after"]


def test_render_download_with_range_and_report(make_client, tmp_path):
    client = make_client(**FAST)
    paths = write_mono_set(tmp_path, "5.1", FS // 5)
    stem = client.post("/v1/stems", files=files_field(paths)).json()
    resp = client.post("/v1/renders", json={"stem_id": stem["id"], "seed": 7})
    assert resp.status_code == 202, resp.text
    job = resp.json()
    assert job["state"] == "queued" and resp.headers["location"] == f"/v1/renders/{job['id']}"
    _problem(client.get(f"/v1/renders/{job['id']}/audio"), 409, "queued")

    _worker(client).run(once=True)
    done = client.get(f"/v1/renders/{job['id']}").json()
    assert done["state"] == "done", done
    assert done["progress"] == 1.0 and done["finished"] and done["links"]["audio"]

    audio = client.get(done["links"]["audio"])
    assert audio.status_code == 200
    assert audio.headers["content-type"] == "audio/wav"
    assert 'filename="mix.binaural.wav"' in audio.headers["content-disposition"]
    out = tmp_path / "got.wav"
    out.write_bytes(audio.content)
    # Oracle: the renderer run directly on the same files with the same settings.
    ref = tmp_path / "ref.wav"
    render(paths, ref, RenderSettings(layout="5.1", seed=7))
    assert_array_equal(read_audio(out)[0], read_audio(ref)[0])

    # HTTP Range (RFC 9110, section 14): bytes 100-199 of the file, answered 206.
    part = client.get(done["links"]["audio"], headers={"Range": "bytes=100-199"})
    assert part.status_code == 206
    assert part.content == audio.content[100:200]
    assert part.headers["content-range"] == f"bytes 100-199/{len(audio.content)}"

    report = client.get(done["links"]["report"]).json()
    assert report["input"]["files"] == [p.name for p in paths]
    assert report["channel_order"]["source"] == "file names"

    assert client.delete(f"/v1/renders/{job['id']}").status_code == 204
    _problem(client.get(f"/v1/renders/{job['id']}"), 404, job["id"])


def test_cancel_a_queued_render(client, tmp_path):
    stem = _stem(client, tmp_path)
    job = client.post("/v1/renders", json={"stem_id": stem["id"], "layout": "5.1"}).json()
    resp = client.delete(f"/v1/renders/{job['id']}")
    assert resp.status_code == 200 and resp.json()["state"] == "cancelled"
    _problem(client.get(f"/v1/renders/{job['id']}/report"), 409, "cancelled")
    assert client.delete(f"/v1/renders/{job['id']}").status_code == 204


def test_cancel_a_running_render_stops_it_within_two_seconds(make_client, tmp_path):
    client = make_client(**FAST)
    # A long stem in small blocks, so the render is still running when cancelled.
    stem = _stem(client, tmp_path, channels=2, frames=FS * 60)
    job = client.post(
        "/v1/renders", json={"stem_id": stem["id"], "layout": "2.0", "block_size": 64}
    ).json()
    worker = _worker(client)
    thread = threading.Thread(target=worker.run, kwargs={"once": True})
    thread.start()
    deadline = time.monotonic() + 30
    while client.get(f"/v1/renders/{job['id']}").json()["progress"] <= 0:
        assert time.monotonic() < deadline, "the render never started"
        time.sleep(0.02)
    t0 = time.monotonic()
    assert client.delete(f"/v1/renders/{job['id']}").json()["state"] == "cancelled"
    thread.join(timeout=10)
    stopped = time.monotonic() - t0
    assert not thread.is_alive() and stopped < 2.0, stopped
    folder = client.app.state.storage.root / "renders" / job["id"]
    assert not any(folder.glob("*.wav")) and not any(folder.glob(".*.part"))


def test_a_render_that_keeps_crashing_fails_after_max_attempts(make_client, tmp_path):
    client = make_client(**FAST, max_attempts=2)
    stem = _stem(client, tmp_path)
    job = client.post("/v1/renders", json={"stem_id": stem["id"], "layout": "5.1"}).json()
    worker = _worker(client)
    # Stand-in for a poison input: a child that dies by SIGKILL, as under the OOM killer.
    worker.child_command = [
        sys.executable,
        "-c",
        "import os, signal; os.kill(os.getpid(), signal.SIGKILL)",
    ]
    worker.run(once=True)
    assert client.get(f"/v1/renders/{job['id']}").json()["state"] == "queued"
    worker.run(once=True)
    failed = client.get(f"/v1/renders/{job['id']}").json()
    assert failed["state"] == "failed" and failed["attempts"] == 2
    assert "died 2 times" in failed["message"]


def test_bad_input_found_by_the_renderer_fails_the_job_with_its_message(make_client, tmp_path):
    client = make_client(**FAST)
    stem = _stem(client, tmp_path, channels=2)
    job = client.post("/v1/renders", json={"stem_id": stem["id"], "layout": "2.0"}).json()
    # The stem disappears between queueing and rendering (expired, deleted by hand).
    storage = client.app.state.storage
    for f in (storage.root / "stems" / stem["id"]).glob("00*"):
        f.unlink()
    _worker(client).run(once=True)
    failed = client.get(f"/v1/renders/{job['id']}").json()
    assert failed["state"] == "failed" and "take.wav" in failed["message"], failed
    assert str(storage.root) not in failed["message"]


def test_isolation_between_tokens(make_client, tmp_path):
    a, b = "a" * 20, "b" * 20
    client = make_client(tokens=(a, b))
    ha, hb = {"Authorization": f"Bearer {a}"}, {"Authorization": f"Bearer {b}"}
    _problem(client.get("/v1/stems"), 401, "API token")
    _problem(
        client.get("/v1/stems", headers={"Authorization": "Bearer " + "c" * 20}), 401, "not valid"
    )
    path = write_stem(tmp_path / "x.wav", 480, 6)
    stem = client.post("/v1/stems", files=files_field([path]), headers=ha).json()
    job = client.post("/v1/renders", json={"stem_id": stem["id"]}, headers=ha).json()
    assert client.get(f"/v1/renders/{job['id']}", headers=ha).status_code == 200
    assert client.get("/v1/stems", headers=hb).json() == []
    assert client.get("/v1/renders", headers=hb).json() == []
    for method, url in [
        ("GET", f"/v1/stems/{stem['id']}"),
        ("DELETE", f"/v1/stems/{stem['id']}"),
        ("GET", f"/v1/renders/{job['id']}"),
        ("GET", f"/v1/renders/{job['id']}/audio"),
        ("GET", f"/v1/renders/{job['id']}/report"),
        ("DELETE", f"/v1/renders/{job['id']}"),
    ]:
        assert client.request(method, url, headers=hb).status_code == 404, (method, url)
    # b cannot render a's stem either.
    _problem(client.post("/v1/renders", json={"stem_id": stem["id"]}, headers=hb), 404, "no stem")
    assert client.get(f"/v1/stems/{stem['id']}", headers=ha).status_code == 200


def test_catalog_endpoints(client):
    assert client.get("/v1/health").json()["status"] == "ok"
    names = [layout["name"] for layout in client.get("/v1/layouts").json()]
    assert "7.1.4" in names and "5.1" in names
    assert {"name": "none"} in [{"name": r["name"]} for r in client.get("/v1/rooms").json()]
    sets = client.get("/v1/hrtf-sets").json()
    assert sets[0]["kind"] == "shipped" and sets[0]["default"]


def test_retention_sweep_removes_old_items(make_client, tmp_path):
    from earfold.service.retention import sweep

    client = make_client()
    stem = _stem(client, tmp_path)
    job = client.post("/v1/renders", json={"stem_id": stem["id"], "layout": "5.1"}).json()
    storage, queue = client.app.state.storage, client.app.state.queue
    assert sweep(storage, queue, max_age_s=-1)["stems"] == 0  # in use by a queued render
    queue.cancel(job["id"])
    removed = sweep(storage, queue, max_age_s=-1)
    assert removed["stems"] == 1 and removed["renders"] == 1
    assert client.get(f"/v1/stems/{stem['id']}").status_code == 404
    assert np.isfinite(removed["tmp"])


def test_progress_rises_while_rendering_then_reads_done(make_client, tmp_path):
    from earfold.service.routes.models import RenderView

    client = make_client(**FAST)
    # 40 s of stereo in 64-frame blocks: a couple of seconds of rendering, long enough
    # for several progress reports (the child reports every 0.1 s, the worker every tick).
    stem = _stem(client, tmp_path, channels=2, frames=FS * 40)
    job = client.post(
        "/v1/renders", json={"stem_id": stem["id"], "layout": "2.0", "block_size": 64}
    ).json()
    thread = threading.Thread(target=_worker(client).run, kwargs={"once": True})
    thread.start()
    seen: list[tuple[str, float]] = []
    deadline = time.monotonic() + 60
    while True:
        resp = client.get(f"/v1/renders/{job['id']}")
        assert resp.status_code == 200, resp.text
        view = RenderView.model_validate(resp.json())  # the documented shape, every poll
        seen.append((view.state, view.progress))
        if view.state not in ("queued", "running"):
            break
        assert time.monotonic() < deadline, seen[-5:]
        time.sleep(0.02)
    thread.join(timeout=10)
    progress = [p for _, p in seen]
    during = sorted({p for state, p in seen if state == "running" and 0.0 < p < 1.0})
    assert len(during) >= 2, seen  # reported while rendering, not only at the end
    assert all(b >= a for a, b in zip(progress, progress[1:])), progress  # never goes back
    assert seen[-1] == ("done", 1.0), seen[-1]


def test_eq_and_inline_headphone_eq_reach_the_renderer(make_client, tmp_path):
    """``eq`` and an inline ``headphone_eq`` band list of POST /v1/renders: the report names
    them and the audio equals a direct render with the same settings (oracle:
    earfold.renderer.render._render.render)."""
    client = make_client(**FAST)
    paths = write_mono_set(tmp_path, "5.1", FS // 5)
    stem = client.post("/v1/stems", files=files_field(paths)).json()
    bands = [{"type": "high_shelf", "frequency": 8000, "gain_db": 3.0, "q": 0.7071}]
    body = {"stem_id": stem["id"], "eq": "none", "headphone_eq": bands, "seed": 2}
    job = client.post("/v1/renders", json=body).json()
    _worker(client).run(once=True)
    done = client.get(f"/v1/renders/{job['id']}").json()
    assert done["state"] == "done", done
    report = client.get(done["links"]["report"]).json()
    assert report["eq"]["type"] == "none" and report["eq"]["headphone"]["kind"] == "bands"
    assert report["eq"]["headphone"]["bands"][0]["type"] == "high_shelf"
    assert "gain_db" in report["calibration"]
    out = tmp_path / "got.wav"
    out.write_bytes(client.get(done["links"]["audio"]).content)
    ref = tmp_path / "ref.wav"
    render(
        paths,
        ref,
        RenderSettings(layout="5.1", eq="none", seed=2, headphone_eq=[dict(b) for b in bands]),
    )
    assert_array_equal(read_audio(out)[0], read_audio(ref)[0])


def test_every_sound_option_of_the_cli_reaches_the_renderer_over_http(client, tmp_path):
    """HTTP takes the declaration's options the command line has (room mode, LFE, EQ):
    the queued job's options, checked by the worker's build_settings, give exactly the
    RenderSettings of the same values."""
    from earfold.renderer.engine import LfeOptions
    from earfold.service.jobs.render_child import build_settings

    stem = _stem(client, tmp_path)
    bands = [{"type": "peaking", "frequency": 1000.0, "gain_db": -3.0, "q": 1.0}]
    body = {
        "stem_id": stem["id"],
        "layout": "5.1",
        "room": "small",
        "room_mode": "exact",
        "lfe_cutoff": 80,
        "lfe_gain": 6,
        "eq": "none",
        "headphone_eq": bands,
        "seed": 7,
    }
    job = client.post("/v1/renders", json=body)
    assert job.status_code == 202, job.text
    options = client.app.state.queue.get(job.json()["id"]).payload["options"]
    settings = build_settings(options)
    assert settings.room_mode == "exact" and settings.room == "small"
    assert settings.lfe == LfeOptions(cutoff_hz=80.0, gain_db=6.0)
    assert settings.eq == "none" and settings.seed == 7
    assert settings.headphone_eq == bands
    assert settings.loudness == -23.0 and settings.true_peak == -1.0


@pytest.mark.parametrize(
    ("body", "pattern"),
    [
        ({"lfe_gain": 41}, "lfe_gain"),
        ({"lfe_cutoff": -1}, "lfe_cutoff"),
        ({"room_mode": "mirror"}, "room_mode"),
        ({"block_size": 2**21}, "block_size"),
        ({"excerpt": [0, 1]}, "excerpt"),
    ],
)
def test_new_options_are_checked_by_the_declaration(client, tmp_path, body, pattern):
    stem = _stem(client, tmp_path)
    resp = client.post("/v1/renders", json={"stem_id": stem["id"], "layout": "5.1", **body})
    assert resp.status_code == 422 and pattern in resp.text, resp.text
