"""A room object as the ``room`` option over HTTP: checked by the renderer's room schema,
rendered as a ``--room FILE.json`` would be."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from earfold.service.jobs.worker import Worker, child_spec
from tests.service.stem_factory import FS, files_field, write_stem

FAST = {"tick_s": 0.05, "poll_s": 0.02, "lease_s": 5.0}

#: An invented small room: a converted garden shed used as a listening booth.
SHED = {
    "name": "garden-shed-booth",
    "dimensions": [3.4, 2.6, 2.3],
    "listener": {"to_front_wall": 1.5, "to_left_wall": 1.3, "ear_height": 1.1},
    "speaker_radius": 1.0,
    "rt60": 0.25,
    "order": 2,
    "seed": 3,
}

EXAMPLES = Path(__file__).resolve().parents[2] / "examples" / "rooms"


def _stem(client, tmp_path, channels=2, seconds=0.5) -> dict:
    path = write_stem(tmp_path / "shed-take.wav", int(FS * seconds), channels, seed=4)
    resp = client.post("/v1/stems", files=files_field([path]))
    assert resp.status_code == 201, resp.text
    return resp.json()


def _run(client) -> None:
    Worker(client.app.state.settings, queue=client.app.state.queue, name="t").run(once=True)


def test_a_room_object_renders_and_the_report_shows_its_dimensions(make_client, tmp_path):
    client = make_client(**FAST)
    stem = _stem(client, tmp_path)
    resp = client.post("/v1/renders", json={"stem_id": stem["id"], "layout": "2.0", "room": SHED})
    assert resp.status_code == 202, resp.text
    rid = resp.json()["id"]
    assert resp.json()["request"]["room"] == SHED
    _run(client)
    view = client.get(f"/v1/renders/{rid}").json()
    assert view["state"] == "done", view
    report = client.get(f"/v1/renders/{rid}/report").json()
    room = report["room"]
    assert room["synthetic"] is True
    text = json.dumps(room)
    assert "garden-shed-booth" in text
    dims = _find(room, "dimensions_m")
    assert dims == {"length": 3.4, "width": 2.6, "height": 2.3}
    # no server path in the report
    assert str(client.app.state.storage.root) not in json.dumps(report)


def _find(tree, key):
    if isinstance(tree, dict):
        if key in tree:
            return tree[key]
        for v in tree.values():
            found = _find(v, key)
            if found is not None:
                return found
    if isinstance(tree, list):
        for v in tree:
            found = _find(v, key)
            if found is not None:
                return found
    return None


def test_the_shipped_example_room_file_is_accepted_as_an_object(client, tmp_path):
    stem = _stem(client, tmp_path)
    for path in sorted(EXAMPLES.glob("*.json")):
        body = {"stem_id": stem["id"], "layout": "2.0", "room": json.loads(path.read_text())}
        resp = client.post("/v1/renders", json=body)
        assert resp.status_code == 202, (path.name, resp.text)


@pytest.mark.parametrize(
    ("change", "pattern"),
    [
        ({"dimensions": [140.0, 2.6, 2.3]}, "room length 140.0 m is out of range; give 1 to 100 m"),
        ({"dimensions": [3.4, 2.6]}, "'dimensions' must be [length, width, height]"),
        ({"absorption": {"front": 0.3}}, "give either 'absorption'"),
        ({"rt60": "long"}, "rt60"),
        ({"windows": 2}, "unknown key(s) 'windows'"),
        ({"listener": {"to_front_wall": 1.5}}, "the listener is missing"),
    ],
)
def test_a_bad_room_object_is_422_naming_the_field(client, tmp_path, change, pattern):
    stem = _stem(client, tmp_path)
    resp = client.post(
        "/v1/renders", json={"stem_id": stem["id"], "layout": "2.0", "room": {**SHED, **change}}
    )
    assert resp.status_code == 422, resp.text
    problem = resp.json()
    assert problem["detail"].startswith("room: ")
    assert pattern in problem["detail"], problem
    assert problem["errors"] == [{"field": "room", "message": problem["detail"][6:]}]
    assert client.get("/v1/renders").json() == []


def test_a_room_name_still_works_and_an_unknown_one_is_refused(client, tmp_path):
    stem = _stem(client, tmp_path)
    ok = client.post("/v1/renders", json={"stem_id": stem["id"], "layout": "2.0", "room": "small"})
    assert ok.status_code == 202
    bad = client.post("/v1/renders", json={"stem_id": stem["id"], "layout": "2.0", "room": "attic"})
    assert bad.status_code == 422 and "unknown room 'attic'" in bad.json()["detail"]


def test_the_child_gets_the_room_object_as_a_file_in_the_render_folder(client, tmp_path):
    stem = _stem(client, tmp_path)
    rid = client.post(
        "/v1/renders",
        json={"stem_id": stem["id"], "layout": "2.0", "room": {**SHED, "name": ""}},
    ).json()["id"]
    storage = client.app.state.storage
    spec = child_spec(storage, client.app.state.queue.get(rid))
    path = Path(spec["options"]["room"])
    assert path.parent == storage.path("renders", rid)
    written = json.loads(path.read_text())
    assert written["name"] == "custom" and written["dimensions"] == SHED["dimensions"]
    assert spec["names"][str(path)] == "room object 'custom'"


def test_a_comparison_variant_takes_a_room_object(client, tmp_path):
    from earfold.service.comparisons.build_child import child_spec as build_spec

    stem = _stem(client, tmp_path, seconds=2.0)
    body = {
        "stem_id": stem["id"],
        "variants": [{"layout": "2.0"}, {"layout": "2.0", "room": SHED}],
        "excerpt": {"start": 0.0, "length": 1.0},
    }
    resp = client.post("/v1/comparisons", json=body)
    assert resp.status_code == 202, resp.text
    job = client.app.state.queue.get(resp.json()["id"])
    spec = build_spec(client.app.state.storage, dict(job.payload), job.id)
    assert spec["variants"][0]["room"] == "none"
    assert spec["variants"][1]["room"].endswith("room-1.json")
    bad = {**body, "variants": [{"layout": "2.0"}, {"layout": "2.0", "room": {"rt60": 1}}]}
    resp = client.post("/v1/comparisons", json=bad)
    assert resp.status_code == 422 and resp.json()["detail"].startswith("variant 2: room: ")


def test_a_settings_preset_with_a_bad_room_object_is_422(client):
    body = {"room": {**SHED, "dimensions": [0.1, 2.6, 2.3]}}
    resp = client.post("/v1/presets", json={"name": "shed", "kind": "settings", "body": body})
    assert resp.status_code == 422, resp.text
    assert resp.json()["errors"][0]["field"] == "body.room"
    ok = client.post(
        "/v1/presets", json={"name": "shed", "kind": "settings", "body": {"room": SHED}}
    )
    assert ok.status_code == 201 and ok.json()["body"]["room"] == SHED
