"""``/v1/headphone-eq``: band lists and impulse responses uploaded, listed, used by id in
renders (the report names the file), refused when junk, deleted."""

from __future__ import annotations

import json

import numpy as np
import pytest

from earfold.renderer.io import write_audio
from earfold.service.jobs.worker import Worker, child_spec
from tests.service.stem_factory import FS, files_field, write_stem

FAST = {"tick_s": 0.05, "poll_s": 0.02, "lease_s": 5.0}

A = {"Authorization": "Bearer tok-a"}
B = {"Authorization": "Bearer tok-b"}

#: An invented compensation for a pair of closed studio headphones: tame a bass bump and
#: lift the upper mids a little.
BANDS = {
    "name": "closed-back tamer",
    "gain_db": -2.0,
    "bands": [
        {"type": "low_shelf", "frequency": 105.0, "gain_db": -3.5, "q": 0.7},
        {"type": "peaking", "frequency": 3200.0, "gain_db": 2.0, "q": 1.4},
        {"type": "high_shelf", "frequency": 9000.0, "gain_db": 1.5},
    ],
}


def _upload(client, name: str, data: bytes, headers=None):
    return client.post(
        "/v1/headphone-eq",
        files=[("file", (name, data, "application/octet-stream"))],
        headers=headers or {},
    )


def _ir_bytes(tmp_path, rate=44100, channels=2, taps=256, silent=False) -> bytes:
    t = np.arange(taps)
    ir = np.zeros((taps, channels), np.float32)
    if not silent:
        ir[0] = 0.8
        ir[1:] = (0.1 * np.exp(-t[1:] / 20.0) * np.cos(t[1:]))[:, None]
    path = tmp_path / f"ir-{rate}-{channels}-{taps}.wav"
    write_audio(path, ir, rate, subtype="FLOAT")
    return path.read_bytes()


def test_a_band_list_upload_lists_and_summarises(client):
    r = _upload(client, "tamer.json", json.dumps(BANDS).encode())
    assert r.status_code == 201, r.text
    eq = r.json()
    assert r.headers["location"] == f"/v1/headphone-eq/{eq['id']}"
    assert eq["name"] == "tamer.json" and eq["kind"] == "bands"
    s = eq["summary"]
    assert s["bands"] == 3 and s["gain_db"] == -2.0
    assert s["types"] == ["high_shelf", "low_shelf", "peaking"]
    assert (s["frequency_min_hz"], s["frequency_max_hz"]) == (105.0, 9000.0)
    assert client.get("/v1/headphone-eq").json() == [eq]
    assert client.get(f"/v1/headphone-eq/{eq['id']}").json() == eq
    assert "owner" not in eq and "stored" not in eq


def test_an_impulse_response_upload(client, tmp_path):
    r = _upload(client, "cans-ir.wav", _ir_bytes(tmp_path, rate=44100, channels=2, taps=441))
    assert r.status_code == 201, r.text
    eq = r.json()
    assert eq["kind"] == "impulse_response"
    s = eq["summary"]
    assert s["channels"] == 2 and s["samplerate"] == 44100.0
    # 441 taps at 44.1 kHz are 10 ms: about 480 taps at 48 kHz (plus the resampler's lead)
    assert 480 <= s["taps_at_48k"] <= 480 + 64
    mono = _upload(client, "mono.wav", _ir_bytes(tmp_path, rate=48000, channels=1))
    assert mono.status_code == 201 and mono.json()["summary"]["channels"] == 1


@pytest.mark.parametrize(
    ("name", "data", "status", "pattern"),
    [
        ("notes.txt", b"these are not filters", 415, "neither"),
        ("blob.bin", bytes(range(256)) * 4, 415, "neither"),
        ("broken.json", b'{"bands": [', 422, "not valid JSON"),
        ("empty.json", b"[]", 422, "non-empty list of bands"),
        ("weird.json", b'[{"type": "notch", "frequency": 100}]', 422, "unknown type"),
        ("loud.json", b'[{"type": "peaking", "frequency": 100, "gain_db": 40}]', 422, "gain_db"),
        ("high.json", b'[{"type": "peaking", "frequency": 30000}]', 422, "Nyquist"),
        ("fake.wav", b"RIFF\x00\x00\x00\x00WAVEjunk", 422, "fake.wav"),
    ],
)
def test_junk_is_refused_and_nothing_is_kept(client, name, data, status, pattern):
    r = _upload(client, name, data)
    assert r.status_code == status, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    assert pattern in r.json()["detail"], r.json()
    assert client.get("/v1/headphone-eq").json() == []
    storage = client.app.state.storage
    assert list((storage.root / "headphone-eq").iterdir()) == []
    assert list((storage.root / "tmp").iterdir()) == []


def test_unusable_impulse_responses_are_422(client, tmp_path):
    six = _upload(client, "six.wav", _ir_bytes(tmp_path, channels=6))
    assert six.status_code == 422 and "6 channels" in six.json()["detail"]
    silent = _upload(client, "quiet.wav", _ir_bytes(tmp_path, silent=True))
    assert silent.status_code == 422 and "silent" in silent.json()["detail"]
    long = _upload(client, "long.wav", _ir_bytes(tmp_path, rate=8000, taps=12000, channels=1))
    assert long.status_code == 422 and "at most 1 s" in long.json()["detail"]


def test_delete_and_other_owners(make_client):
    client = make_client(tokens=("tok-a", "tok-b"))
    eq = _upload(client, "tamer.json", json.dumps(BANDS).encode(), A).json()
    assert client.get(f"/v1/headphone-eq/{eq['id']}", headers=B).status_code == 404
    assert client.delete(f"/v1/headphone-eq/{eq['id']}", headers=B).status_code == 404
    assert client.get("/v1/headphone-eq", headers=B).json() == []
    assert client.delete(f"/v1/headphone-eq/{eq['id']}", headers=A).status_code == 204
    assert client.get(f"/v1/headphone-eq/{eq['id']}", headers=A).status_code == 404
    assert client.get("/v1/headphone-eq", headers=A).json() == []
    assert client.get("/v1/headphone-eq").status_code == 401


def _stem(client, tmp_path, rate=FS) -> dict:
    path = write_stem(tmp_path / "ferry-deck.wav", rate // 2, 2, seed=9, samplerate=rate)
    r = client.post("/v1/stems", files=files_field([path]))
    assert r.status_code == 201, r.text
    return r.json()


def _render(client, body) -> dict:
    r = client.post("/v1/renders", json=body)
    assert r.status_code == 202, r.text
    Worker(client.app.state.settings, queue=client.app.state.queue, name="t").run(once=True)
    rid = r.json()["id"]
    view = client.get(f"/v1/renders/{rid}").json()
    assert view["state"] == "done", view
    return client.get(f"/v1/renders/{rid}/report").json()


def test_a_render_with_an_uploaded_band_list_applies_it(make_client, tmp_path):
    client = make_client(**FAST)
    eq = _upload(client, "tamer.json", json.dumps(BANDS).encode()).json()
    stem = _stem(client, tmp_path)
    report = _render(client, {"stem_id": stem["id"], "layout": "2.0", "headphone_eq": eq["id"]})
    hp = report["eq"]["headphone"]
    assert hp["file"] == "tamer.json"  # the user's name, not the stored one
    assert hp["kind"] == "bands" and len(hp["bands"]) == 3 and hp["gain_db"] == -2.0
    storage_root = str(client.app.state.storage.root)
    assert storage_root not in json.dumps(report) and eq["id"] not in json.dumps(report)


def test_a_render_with_an_uploaded_impulse_response_applies_it(make_client, tmp_path):
    client = make_client(**FAST)
    eq = _upload(client, "cans-ir.wav", _ir_bytes(tmp_path)).json()
    stem = _stem(client, tmp_path)
    report = _render(client, {"stem_id": stem["id"], "layout": "2.0", "headphone_eq": eq["id"]})
    hp = report["eq"]["headphone"]
    assert hp["file"] == "cans-ir.wav" and hp["kind"] == "impulse response"
    assert hp["source_samplerate"] == 44100 and hp["channels"] == 2


def test_the_id_is_checked_before_queueing(make_client, tmp_path):
    client = make_client(tokens=("tok-a", "tok-b"))
    eq = _upload(client, "tamer.json", json.dumps(BANDS).encode(), A).json()
    path = write_stem(tmp_path / "deck.wav", FS // 4, 2)
    stem = client.post("/v1/stems", files=files_field([path]), headers=B).json()
    body = {"stem_id": stem["id"], "layout": "2.0", "headphone_eq": eq["id"]}
    r = client.post("/v1/renders", json=body, headers=B)  # someone else's upload
    assert r.status_code == 422 and "no uploaded headphone EQ" in r.json()["detail"]
    bad = client.post("/v1/renders", json={**body, "headphone_eq": "not-an-id"}, headers=B)
    assert bad.status_code == 422 and "headphone_eq" in bad.json()["detail"]
    preset = {"name": "p", "kind": "settings", "body": {"headphone_eq": eq["id"]}}
    assert client.post("/v1/presets", json=preset, headers=B).status_code == 422
    assert client.post("/v1/presets", json=preset, headers=A).status_code == 201


def test_a_band_above_a_low_rate_stems_nyquist_is_refused(client, tmp_path):
    eq = _upload(client, "tamer.json", json.dumps(BANDS).encode()).json()
    stem = _stem(client, tmp_path, rate=16000)  # Nyquist 8 kHz, under the 9 kHz shelf
    body = {"stem_id": stem["id"], "layout": "2.0", "headphone_eq": eq["id"]}
    r = client.post("/v1/renders", json=body)
    assert r.status_code == 422 and "band 3" in r.json()["detail"], r.text


def test_the_worker_gets_the_stored_file_and_the_users_name(client, tmp_path):
    eq = _upload(client, "tamer.json", json.dumps(BANDS).encode()).json()
    stem = _stem(client, tmp_path)
    rid = client.post(
        "/v1/renders", json={"stem_id": stem["id"], "layout": "2.0", "headphone_eq": eq["id"]}
    ).json()["id"]
    storage = client.app.state.storage
    spec = child_spec(storage, client.app.state.queue.get(rid))
    path = spec["options"]["headphone_eq"]
    assert path.startswith(str(storage.path("headphone-eq", eq["id"])))
    assert spec["names"][path] == "tamer.json"
    # deleted meanwhile: the job cannot start, and says why
    client.delete(f"/v1/headphone-eq/{eq['id']}")
    with pytest.raises(Exception, match="headphone EQ"):
        child_spec(storage, client.app.state.queue.get(rid))


def test_a_comparison_variant_takes_an_uploaded_id(client, tmp_path):
    from earfold.service.comparisons.build_child import child_spec as build_spec

    eq = _upload(client, "tamer.json", json.dumps(BANDS).encode()).json()
    path = write_stem(tmp_path / "quay.wav", 2 * FS, 2, seed=2)
    stem = client.post("/v1/stems", files=files_field([path])).json()
    body = {
        "stem_id": stem["id"],
        "variants": [{"layout": "2.0"}, {"layout": "2.0", "headphone_eq": eq["id"]}],
        "excerpt": {"start": 0.0, "length": 1.0},
    }
    r = client.post("/v1/comparisons", json=body)
    assert r.status_code == 202, r.text
    job = client.app.state.queue.get(r.json()["id"])
    spec = build_spec(client.app.state.storage, dict(job.payload), job.id)
    assert spec["variants"][0]["headphone_eq"] is None
    assert spec["names"][spec["variants"][1]["headphone_eq"]] == "tamer.json"


def test_a_comparison_of_a_room_object_and_an_uploaded_eq_builds(make_client, tmp_path):
    """End to end through the build child: both inputs reach the variant renders."""
    from tests.service.test_room_object import SHED

    client = make_client(**FAST)
    eq = _upload(client, "cans-ir.wav", _ir_bytes(tmp_path)).json()
    path = write_stem(tmp_path / "quay.wav", 2 * FS, 2, seed=2)
    stem = client.post("/v1/stems", files=files_field([path])).json()
    body = {
        "stem_id": stem["id"],
        "variants": [
            {"layout": "2.0", "room": SHED, "name": "shed"},
            {"layout": "2.0", "headphone_eq": eq["id"], "name": "cans"},
        ],
        "trials": 2,
        "excerpt": {"start": 0.0, "length": 1.0},
    }
    r = client.post("/v1/comparisons", json=body)
    assert r.status_code == 202, r.text
    cid = r.json()["id"]
    Worker(client.app.state.settings, queue=client.app.state.queue, name="t").run(once=True)
    view = client.get(f"/v1/comparisons/{cid}").json()
    assert view["state"] == "ready", view
    assert [v["summary"] for v in view["variants"]] == [
        "2.0, room 'garden-shed-booth' 3.4 x 2.6 x 2.3 m",
        "2.0, headphone EQ cans-ir.wav",
    ]


def test_an_owner_keeps_at_most_max_files(client, monkeypatch):
    from earfold.service.routes import headphone_eq

    monkeypatch.setattr(headphone_eq, "MAX_FILES", 2)
    data = json.dumps(BANDS).encode()
    assert _upload(client, "a.json", data).status_code == 201
    assert _upload(client, "b.json", data).status_code == 201
    r = _upload(client, "c.json", data)
    assert r.status_code == 409 and "2 headphone EQ files" in r.json()["detail"]
    assert len(client.get("/v1/headphone-eq").json()) == 2
    assert list((client.app.state.storage.root / "tmp").iterdir()) == []
