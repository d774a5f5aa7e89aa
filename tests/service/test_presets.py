"""``/v1/presets``: create, list, read, replace, delete; validation; owners; the limit."""

from __future__ import annotations

import json

import pytest

from earfold.service import presets as preset_store
from earfold.service.presets import MAX_PRESETS
from tests.service.stem_factory import files_field, write_stem

A = {"Authorization": "Bearer tok-a"}
B = {"Authorization": "Bearer tok-b"}

SETTINGS = {"layout": "5.1", "room": "small", "lfe_gain": 6, "loudness": -16}

# An invented three-speaker desk layout (not a catalogue layout).
LAYOUT = {
    "name": "mixing-desk-trio",
    "speakers": [
        {"label": "L", "azimuth": 30, "elevation": 0},
        {"label": "R", "azimuth": -30, "elevation": 0},
        {"label": "C", "azimuth": 0, "elevation": 0},
    ],
}


def _problem(resp, status: int, *patterns: str) -> dict:
    assert resp.status_code == status, resp.text
    assert resp.headers["content-type"].startswith("application/problem+json")
    for p in patterns:
        assert p in resp.json()["detail"], resp.json()
    return resp.json()


def test_crud_of_a_settings_preset(client):
    made = client.post(
        "/v1/presets", json={"name": "Late-night check", "kind": "settings", "body": SETTINGS}
    )
    assert made.status_code == 201, made.text
    p = made.json()
    assert made.headers["location"] == f"/v1/presets/{p['id']}"
    assert p["name"] == "Late-night check" and p["kind"] == "settings"
    assert p["body"] == {"layout": "5.1", "room": "small", "lfe_gain": 6.0, "loudness": -16.0}
    assert p["created"] == p["updated"] and p["created"].endswith("Z")
    assert client.get(f"/v1/presets/{p['id']}").json() == p
    assert client.get("/v1/presets").json() == [p]

    changed = client.put(
        f"/v1/presets/{p['id']}",
        json={"name": "Late-night check, wider", "kind": "settings", "body": {"room": "large"}},
    )
    assert changed.status_code == 200, changed.text
    c = changed.json()
    assert c["id"] == p["id"] and c["body"] == {"room": "large"}
    assert c["created"] == p["created"] and c["updated"] >= p["updated"]

    assert client.delete(f"/v1/presets/{p['id']}").status_code == 204
    _problem(client.get(f"/v1/presets/{p['id']}"), 404, "no preset")
    _problem(client.delete(f"/v1/presets/{p['id']}"), 404, "no preset")
    assert client.get("/v1/presets").json() == []


def test_a_stored_settings_body_is_a_valid_render_request(client, tmp_path):
    """What a preset stores is accepted as it is by POST /v1/renders (with a stem id)."""
    p = client.post("/v1/presets", json={"name": "n", "kind": "settings", "body": SETTINGS}).json()
    path = write_stem(tmp_path / "pier.wav", 4800, 6)
    stem = client.post("/v1/stems", files=files_field([path])).json()
    r = client.post("/v1/renders", json={"stem_id": stem["id"], **p["body"]})
    assert r.status_code == 202, r.text
    assert r.json()["request"]["room"] == "small"


def test_layout_preset_round_trip_and_use_in_a_render_request(client, tmp_path):
    made = client.post("/v1/presets", json={"name": "trio", "kind": "layout", "body": LAYOUT})
    assert made.status_code == 201, made.text
    assert made.json()["body"] == LAYOUT
    path = write_stem(tmp_path / "trio.wav", 4800, 3)
    stem = client.post("/v1/stems", files=files_field([path])).json()
    r = client.post("/v1/renders", json={"stem_id": stem["id"], "layout": made.json()["body"]})
    assert r.status_code == 202, r.text


@pytest.mark.parametrize(
    ("body", "field", "pattern"),
    [
        ({"lfe_gain": 99}, "body.lfe_gain", "less than or equal"),
        ({"room_mode": "sideways"}, "body.room_mode", "room_mode"),
        ({"loudness": "loud"}, "body.loudness", "loudness"),
        ({"block_size": 3000}, "body.block_size", "power of two"),
        ({"tempo": 120}, "body.tempo", "Extra inputs"),
        ({"stem_id": "a" * 32}, "body.stem_id", "stem_id"),
        (
            {"layout": {"speakers": [{"label": "L", "azimuth": 400, "elevation": 0}]}},
            "body.layout",
            "azimuth",
        ),
    ],
)
def test_a_bad_settings_body_is_422_naming_the_option(client, body, field, pattern):
    problem = _problem(
        client.post("/v1/presets", json={"name": "x", "kind": "settings", "body": body}), 422
    )
    fields = [e["field"] for e in problem["errors"]]
    assert any(f.startswith(field) for f in fields), problem
    assert pattern in problem["detail"], problem
    assert client.get("/v1/presets").json() == []


@pytest.mark.parametrize(
    ("body", "pattern"),
    [
        ({"speakers": []}, "speaker"),
        ({"speakers": [{"label": "L", "azimuth": 30}], "colour": "red"}, "colour"),
        ({"speakers": [{"label": "L", "azimuth": 30}]}, "elevation"),
        (
            {
                "speakers": [
                    {"label": "L", "azimuth": 30, "elevation": 0},
                    {"label": "L", "azimuth": -30, "elevation": 0},
                ]
            },
            "'L'",
        ),
        ({}, "speakers"),
    ],
)
def test_a_bad_layout_object_is_422(client, body, pattern):
    problem = _problem(
        client.post("/v1/presets", json={"name": "x", "kind": "layout", "body": body}),
        422,
        pattern,
    )
    assert problem["errors"][0]["field"] == "body"


@pytest.mark.parametrize(
    ("name", "status"), [("", 422), ("   ", 422), ("a" * 81, 422), ("a" * 80, 201), ("é" * 5, 201)]
)
def test_names_are_1_to_80_visible_characters(client, name, status):
    r = client.post("/v1/presets", json={"name": name, "kind": "settings", "body": {}})
    assert r.status_code == status, r.text
    if status == 422:
        assert "name" in r.json()["detail"]


def test_a_bad_kind_or_put_body_is_refused_and_nothing_changes(client):
    _problem(
        client.post("/v1/presets", json={"name": "x", "kind": "macro", "body": {}}), 422, "kind"
    )
    p = client.post(
        "/v1/presets", json={"name": "keep", "kind": "settings", "body": {"room": "small"}}
    ).json()
    _problem(
        client.put(
            f"/v1/presets/{p['id']}",
            json={"name": "keep", "kind": "layout", "body": {"speakers": "many"}},
        ),
        422,
    )
    assert client.get(f"/v1/presets/{p['id']}").json() == p


def test_another_owners_preset_is_404(make_client):
    client = make_client(tokens=("tok-a", "tok-b"))
    p = client.post(
        "/v1/presets", json={"name": "mine", "kind": "settings", "body": {}}, headers=A
    ).json()
    for method in ("get", "delete"):
        _problem(getattr(client, method)(f"/v1/presets/{p['id']}", headers=B), 404, "no preset")
    _problem(
        client.put(
            f"/v1/presets/{p['id']}",
            json={"name": "theirs", "kind": "settings", "body": {}},
            headers=B,
        ),
        404,
    )
    assert client.get("/v1/presets", headers=B).json() == []
    assert client.get(f"/v1/presets/{p['id']}", headers=A).json()["name"] == "mine"
    assert client.get("/v1/presets").status_code == 401
    _problem(client.get("/v1/presets/not-an-id", headers=A), 404)


def test_the_limit_per_owner(make_client, monkeypatch):
    client = make_client(tokens=("tok-a", "tok-b"))
    monkeypatch.setattr(preset_store, "MAX_PRESETS", 3)
    for i in range(3):
        assert (
            client.post(
                "/v1/presets", json={"name": f"p{i}", "kind": "settings", "body": {}}, headers=A
            ).status_code
            == 201
        )
    _problem(
        client.post("/v1/presets", json={"name": "p3", "kind": "settings", "body": {}}, headers=A),
        409,
        "3 presets",
    )
    # per owner: another token still has room
    assert (
        client.post(
            "/v1/presets", json={"name": "q", "kind": "settings", "body": {}}, headers=B
        ).status_code
        == 201
    )
    # deleting one makes room again
    first = client.get("/v1/presets", headers=A).json()[0]
    assert client.delete(f"/v1/presets/{first['id']}", headers=A).status_code == 204
    assert (
        client.post(
            "/v1/presets", json={"name": "p3", "kind": "settings", "body": {}}, headers=A
        ).status_code
        == 201
    )


def test_the_201st_preset_is_refused(client):
    assert MAX_PRESETS == 200
    for i in range(MAX_PRESETS):
        r = client.post("/v1/presets", json={"name": f"p{i}", "kind": "settings", "body": {}})
        assert r.status_code == 201, (i, r.text)
    _problem(
        client.post("/v1/presets", json={"name": "one more", "kind": "settings", "body": {}}),
        409,
        "200 presets",
    )
    assert len(client.get("/v1/presets").json()) == MAX_PRESETS


def test_files_are_written_whole_and_leave_nothing_behind(client, monkeypatch):
    p = client.post("/v1/presets", json={"name": "a", "kind": "settings", "body": {}}).json()
    folder = client.app.state.storage.path("presets", p["id"])
    assert [f.name for f in folder.iterdir()] == ["meta.json"]
    assert json.loads((folder / "meta.json").read_text())["owner"] == ""

    # A write that fails half-way (disk full) leaves the old record and no new preset.
    def failing(path, data, **kw):
        (path.parent / f".{path.name}.deadbeef.part").write_text("{")
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(preset_store, "write_json_atomic", failing)
    r = client.put(f"/v1/presets/{p['id']}", json={"name": "b", "kind": "settings", "body": {}})
    assert r.status_code == 507, r.text
    assert json.loads((folder / "meta.json").read_text())["name"] == "a"
    r = client.post("/v1/presets", json={"name": "c", "kind": "settings", "body": {}})
    assert r.status_code == 507
    assert [m["name"] for m in client.get("/v1/presets").json()] == ["a"]
    tmp = client.app.state.storage.root / "tmp"
    assert list(tmp.iterdir()) == []


def test_the_list_filters_by_kind(client):
    client.post("/v1/presets", json={"name": "s", "kind": "settings", "body": {}})
    client.post("/v1/presets", json={"name": "l", "kind": "layout", "body": LAYOUT})
    assert [p["name"] for p in client.get("/v1/presets").json()] == ["l", "s"]
    assert [p["name"] for p in client.get("/v1/presets?kind=layout").json()] == ["l"]
    assert [p["name"] for p in client.get("/v1/presets?kind=settings").json()] == ["s"]
    assert client.get("/v1/presets?kind=macro").status_code == 422
