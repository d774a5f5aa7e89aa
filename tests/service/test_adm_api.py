"""ADM object masters over HTTP: an upload says what the master holds (and never offers a
layout or a scene for it), a broken master is refused naming the file, a render needs no
layout (and refuses one, naming why, before queueing), ``adm_programme`` reaches the
renderer, and ``GET /v1/stems/{id}/objects`` gives each object's path for the page."""

from __future__ import annotations

import numpy as np
import pytest
from stem_factory import FS, files_field, write_stem

from earfold.service.jobs.worker import Worker
from tests.renderer.adm_factory import chna_body, document, write_master
from tests.service.adm_masters import OBJECTS, write_harbour_master

FAST = {"tick_s": 0.05, "poll_s": 0.02, "lease_s": 5.0}


def _upload(client, path, name: str | None = None):
    return client.post("/v1/stems", files=files_field([path], [name] if name else None))


@pytest.fixture
def master(tmp_path):
    return write_harbour_master(tmp_path / "harbour-master.wav")


def test_an_upload_of_a_master_says_what_it_holds(client, master):
    resp = _upload(client, master)
    assert resp.status_code == 201, resp.text
    stem = resp.json()
    adm = stem["adm"]
    assert adm["programme"] == {"id": "APR_1001", "name": "Harbour"}
    assert [p["id"] for p in adm["programmes"]] == ["APR_1001", "APR_1002"]
    assert (adm["objects"], adm["moving_objects"], adm["beds"], adm["hoa_tracks"]) == (2, 1, 6, 0)
    assert adm["bed_labels"] == ["M+030", "M-030", "M+000", "LFE", "M+110", "M-110"]
    assert adm["duration_s"] == 0.5 and adm["tracks"] == 8 and adm["ignored"] == []
    # Its metadata places the tracks: no layout, no scene, no labels are offered.
    assert stem["suggested_layout"] is None and stem["scene_hint"] is None
    assert stem["channel_labels"] is None and stem["channels"] == 8
    assert client.get(f"/v1/stems/{stem['id']}").json()["adm"] == adm
    # the levels of its tracks are measured as any stem's
    levels = client.get(f"/v1/stems/{stem['id']}/levels").json()
    assert len(levels["channels"]) == 8


def test_a_plain_stem_has_no_adm_summary(client, tmp_path):
    stem = _upload(client, write_stem(tmp_path / "s.wav", FS // 20, 6)).json()
    assert stem["adm"] is None and stem["suggested_layout"] == "5.1"
    resp = client.get(f"/v1/stems/{stem['id']}/objects")
    assert resp.status_code == 422
    assert "not an ADM master" in resp.json()["detail"]
    render = client.post("/v1/renders", json={"stem_id": stem["id"], "adm_programme": "Main"})
    assert render.status_code == 422
    assert render.json()["errors"][0]["field"] == "adm_programme"
    assert "ADM masters only" in render.json()["detail"]


def test_a_master_with_broken_metadata_is_refused_naming_the_file(client, tmp_path):
    broken = write_master(
        tmp_path / "x.wav",
        audio=np.zeros((100, 1), np.float32),
        chna=chna_body([(1, "ATU_00000001", "AT_00031001_01", "AP_00031001")]),
        axml=document("<audioObject audioObjectID='AO_1001'>"),  # never closed
    )
    resp = _upload(client, broken, "pier-final.wav")
    assert resp.status_code == 422, resp.text
    detail = resp.json()["detail"]
    assert "ADM master 'pier-final.wav'" in detail and "not well-formed" in detail
    assert "00.wav" not in detail  # the server's stored name never shows
    assert client.get("/v1/stems").json() == []  # nothing kept, as for other refusals


@pytest.mark.parametrize("room", ["none", "small"])
def test_a_master_renders_without_a_layout_and_reports_its_objects(make_client, master, room):
    client = make_client(**FAST)
    stem = _upload(client, master).json()
    job = client.post(
        "/v1/renders",
        json={
            "stem_id": stem["id"],
            "adm_programme": "Harbour without bell",
            "loudness": "none",
            "room": room,
        },
    )
    assert job.status_code == 202, job.text
    assert job.json()["request"]["layout"] is None
    Worker(client.app.state.settings, queue=client.app.state.queue, name="w").run(once=True)
    done = client.get(f"/v1/renders/{job.json()['id']}").json()
    assert done["state"] == "done", done
    report = client.get(done["links"]["report"]).json()
    adm = report["adm"]
    assert adm["programme"]["id"] == "APR_1002"  # the programme asked for reached the renderer
    assert [o["object"] for o in adm["objects_rendered"]] == ["Gull"]
    gull = adm["objects_rendered"][0]
    assert gull["track"] == OBJECTS["Gull"] and gull["first_direction_deg"] == [0.0, 0.0]
    assert gull["moves_s"] is not None
    assert client.get(done["links"]["audio"]).status_code == 200
    assert "00.wav" not in str(adm)  # no server path in the report
    if room != "none":  # in a room the objects go through the virtual array
        assert report["room"]["synthetic"] and "virtual array" in adm["objects_method"]


@pytest.mark.parametrize(
    ("options", "field", "words"),
    [
        ({"layout": "5.1"}, "layout", "takes no layout; leave 'layout' out"),
        ({"layout": "hoa3"}, "layout", "its metadata (ITU-R BS.2076"),
        ({"fold": "stereo"}, "fold", "not available for ADM masters"),
        ({"solo": "L"}, "solo", "not available for ADM masters"),
        ({"rotate": [30, 0, 0]}, "rotate", "not available for ADM masters"),
        ({"adm_programme": "Night"}, "adm_programme", "APR_1001 ('Harbour')"),
    ],
)
def test_options_an_adm_render_does_not_take_are_refused_before_queueing(
    client, master, options, field, words
):
    stem = _upload(client, master).json()
    resp = client.post("/v1/renders", json={"stem_id": stem["id"], **options})
    assert resp.status_code == 422, resp.text
    assert resp.json()["errors"][0]["field"] == field
    assert words in resp.json()["detail"]
    assert client.get("/v1/renders").json() == []  # nothing was queued


def test_object_paths_for_the_page(client, master):
    stem = _upload(client, master).json()
    resp = client.get(f"/v1/stems/{stem['id']}/objects")
    assert resp.status_code == 200, resp.text
    body = resp.json()
    assert body["points"] == 200 and body["programme"]["id"] == "APR_1001"
    paths = {p["object"]: p for p in body["paths"]}
    assert set(paths) == set(OBJECTS)
    gull, bell = paths["Gull"], paths["Bell"]
    assert gull["track"] == OBJECTS["Gull"] and 2 < len(gull["times_s"]) <= 200
    # hand-written path: the front at the start, rising to 30 degrees at the right (the
    # last block moves over its whole length: one frame before its end it is 0.05 short)
    assert (gull["azimuth_deg"][0], gull["elevation_deg"][0]) == (0.0, 0.0)
    assert gull["azimuth_deg"][-1] == pytest.approx(-90.0, abs=0.1)
    assert gull["elevation_deg"][-1] == pytest.approx(30.0, abs=0.01)
    assert bell["azimuth_deg"] == [-90.0, -90.0] and len(bell["times_s"]) == 2
    beds = {b["label"]: b for b in body["bed_directions"]}
    assert beds["M+110"]["azimuth_deg"] == 110.0 and beds["LFE"]["lfe"]
    again = client.get(f"/v1/stems/{stem['id']}/objects").json()  # kept, same answer
    assert again == body
    folder = client.app.state.storage.path("stems", stem["id"])
    assert [p.name for p in folder.glob("objects*.json")] == ["objects.json"]
    other = client.get(
        f"/v1/stems/{stem['id']}/objects", params={"programme": "APR_1002", "points": 5}
    ).json()
    assert [p["object"] for p in other["paths"]] == ["Gull"]
    assert len(other["paths"][0]["times_s"]) <= 5 and other["objects"] == 1
    missing = client.get(f"/v1/stems/{stem['id']}/objects", params={"programme": "Night"})
    assert missing.status_code == 422
    assert "no audioProgramme 'Night'" in missing.json()["detail"]
    assert "harbour-master.wav" in missing.json()["detail"]
    assert client.get(f"/v1/stems/{stem['id']}/objects?points=1").status_code == 422


def test_a_master_is_compared_blind_free_field_against_a_room(make_client, tmp_path):
    # An excerpt of the master in two renders, level-matched: the comparison renders the
    # excerpt's window with the objects where they are at those times.
    client = make_client(**FAST)
    stem = _upload(client, write_harbour_master(tmp_path / "long.wav", duration_s=2.5)).json()
    body = {
        "stem_id": stem["id"],
        "variants": [{"room": "none"}, {"room": "small", "name": "small room"}],
        "trials": 2,
        "excerpt": {"start": 0.5, "length": 1.5},
    }
    resp = client.post("/v1/comparisons", json=body)
    assert resp.status_code == 202, resp.text
    cid = resp.json()["id"]
    Worker(client.app.state.settings, queue=client.app.state.queue, name="w").run(once=True)
    view = client.get(f"/v1/comparisons/{cid}").json()
    assert view["state"] == "ready", view
    a = client.get(view["trials"][0]["audio"]["A"])
    b = client.get(view["trials"][0]["audio"]["B"])
    assert a.status_code == b.status_code == 200 and a.content != b.content
    client.post(f"/v1/comparisons/{cid}/trials/0/answer", json={"choice": "A"})
    client.post(f"/v1/comparisons/{cid}/finish")
    result = client.get(f"/v1/comparisons/{cid}/results").json()
    for v in result["variants"]:
        assert v["matched_lufs"] == pytest.approx(result["level_lufs"], abs=0.1)
