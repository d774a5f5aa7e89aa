"""Ambisonic scenes over HTTP: ``GET /v1/layouts`` lists them, an upload of (N + 1)^2
channels hints at one, ``POST /v1/renders`` renders one with the scene options and
refuses what does not fit, naming the option."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from stem_factory import FS, files_field, write_stem

from earfold.renderer.io import read_audio, write_audio
from earfold.renderer.render import RenderSettings, render
from earfold.renderer.scenes import encode
from earfold.service.jobs.worker import Worker

FAST = {"tick_s": 0.05, "poll_s": 0.02, "lease_s": 5.0}


def _upload(client, path) -> dict:
    resp = client.post("/v1/stems", files=files_field([path]))
    assert resp.status_code == 201, resp.text
    return resp.json()


def _plane_wave_scene(path, order: int, azimuth_deg: float, seconds: float = 0.25):
    """Noise encoded as a plane wave from ``azimuth_deg`` on the horizon (AmbiX)."""
    rng = np.random.default_rng(7)
    s = 0.05 * rng.standard_normal(int(FS * seconds))
    a = np.radians(azimuth_deg)
    gains = encode([np.cos(a), np.sin(a), 0.0], order)
    write_audio(path, (s[:, None] * gains[None, :]).astype(np.float32), FS, subtype="FLOAT")
    return path


def test_layouts_list_scenes_after_loudspeakers_with_directions(client):
    entries = client.get("/v1/layouts").json()
    kinds = [e["kind"] for e in entries]
    first_scene = kinds.index("scene")
    assert set(kinds[:first_scene]) == {"loudspeakers"} and set(kinds[first_scene:]) == {"scene"}
    scenes = {e["name"]: e for e in entries[first_scene:]}
    assert list(scenes) == ["foa", "hoa2", "hoa3", "hoa4", "hoa5", "hoa6", "hoa7"]
    for n, name in enumerate(scenes, start=1):
        entry = scenes[name]
        assert entry["order"] == n and entry["channels"] == (n + 1) ** 2
        assert entry["speakers"] == [] and entry["labels"][0] == "ACN0"
        dirs = np.radians(np.array(entry["directions"]))
        assert dirs.shape[1] == 2 and len(dirs) >= (n + 1) ** 2
        # A t-design of strength >= 1 averages every polynomial of degree 1 exactly:
        # its unit vectors sum to zero (Delsarte, Goethals and Seidel, Geom. Dedicata 6,
        # 1977, the definition of a spherical t-design); 0.01-degree rounding leaves
        # about 2e-4 per point.
        xyz = np.stack(
            [
                np.cos(dirs[:, 1]) * np.cos(dirs[:, 0]),
                np.cos(dirs[:, 1]) * np.sin(dirs[:, 0]),
                np.sin(dirs[:, 1]),
            ],
            axis=1,
        )
        assert np.abs(xyz.mean(axis=0)).max() < 1e-3, name
    assert len(scenes["foa"]["directions"]) == 10  # the 3-design of renderer.scenes
    assert scenes["foa"]["normalisations"] == ["sn3d", "n3d", "fuma"]
    assert scenes["hoa3"]["normalisations"] == ["sn3d", "n3d"]


@pytest.mark.parametrize(
    ("channels", "suggested", "hint"),
    [(4, "4.0", "foa"), (9, "5.0.4", "hoa2"), (25, None, "hoa4"), (6, "5.1", None)],
)
def test_upload_hints_at_a_scene_but_never_chooses_it(client, tmp_path, channels, suggested, hint):
    stem = _upload(client, write_stem(tmp_path / "s.wav", FS // 20, channels))
    assert stem["suggested_layout"] == suggested
    if hint is None:
        assert stem["scene_hint"] is None
    else:
        order = int(hint[3:]) if hint.startswith("hoa") else 1
        assert stem["scene_hint"] == {"layout": hint, "order": order, "channels": channels}
    assert client.get(f"/v1/stems/{stem['id']}").json()["scene_hint"] == stem["scene_hint"]


def test_no_layout_for_25_channels_names_the_scene_it_may_be(client, tmp_path):
    stem = _upload(client, write_stem(tmp_path / "s.wav", FS // 20, 25))
    resp = client.post("/v1/renders", json={"stem_id": stem["id"]})
    assert resp.status_code == 422
    assert "it may be Ambisonic scene hoa4" in resp.json()["detail"]


@pytest.mark.parametrize(
    ("channels", "body", "field", "pattern"),
    [
        (6, {"layout": "5.1", "rotate": [30]}, "rotate", "rotate applies to Ambisonic scenes"),
        (6, {"layout": "5.1", "ambisonic_decoder": "magls"}, "ambisonic_decoder", "scenes only"),
        (6, {"layout": "5.1", "ambisonic_norm": "n3d"}, "ambisonic_norm", "scenes only"),
        (9, {"layout": "hoa3"}, "layout", "channel(s) but layout 'hoa3' is an order-3"),
        (9, {"layout": "hoa3"}, "layout", "choose layout hoa2"),
        (10, {"layout": "hoa3"}, "layout", "4, 9, 16, 25, 36, 49 or 64"),
        (16, {"layout": "hoa3", "rotate": "left"}, "rotate", "yaw[,pitch[,roll]]"),
        (16, {"layout": "hoa3", "ambisonic_norm": "fuma"}, "ambisonic_norm", "FuMa is read"),
        (16, {"layout": "hoa3", "channel_order": "wav"}, "channel_order", "ACN order"),
        (16, {"layout": "hoa3", "fold": "stereo"}, "fold", "BS.775"),
        (16, {"layout": "hoa3", "solo": "ACN16"}, None, "ACN16"),
        (16, {"layout": "hoa9"}, None, "hoa7"),
    ],
)
def test_scene_refusals_are_422_naming_the_option(client, tmp_path, channels, body, field, pattern):
    stem = _upload(client, write_stem(tmp_path / "s.wav", FS // 20, channels))
    resp = client.post("/v1/renders", json={"stem_id": stem["id"], **body})
    assert resp.status_code == 422, resp.text
    problem = resp.json()
    assert resp.headers["content-type"].startswith("application/problem+json")
    assert pattern in problem["detail"], problem
    if field is not None:
        assert problem["errors"][0]["field"] == field
        assert field in problem["detail"] or field == "layout"
    assert client.app.state.queue.counts()["queued"] == 0


def test_hoa3_stem_renders_over_http_with_rotation_and_decoder(make_client, tmp_path):
    """A third-order plane wave rendered by the worker with ``rotate`` and
    ``ambisonic_decoder``: the report's scene section says what was asked, and the audio
    equals a direct render with the same settings (oracle: the renderer's render)."""
    client = make_client(**FAST)
    path = _plane_wave_scene(tmp_path / "scene.wav", 3, 0.0)
    stem = _upload(client, path)
    assert stem["scene_hint"]["layout"] == "hoa3"
    body = {
        "stem_id": stem["id"],
        "layout": "hoa3",
        "rotate": "30,0,0",
        "ambisonic_decoder": "virtual",
        "ambisonic_norm": "sn3d",
    }
    job = client.post("/v1/renders", json=body)
    assert job.status_code == 202, job.text
    Worker(client.app.state.settings, queue=client.app.state.queue, name="w").run(once=True)
    done = client.get(f"/v1/renders/{job.json()['id']}").json()
    assert done["state"] == "done", done
    report = client.get(done["links"]["report"]).json()
    scene = report["scene"]
    assert scene["order"] == 3 and scene["channels"] == 16
    assert scene["normalisation"] == "sn3d" and scene["channel_order"] == "ACN"
    assert scene["decoder"]["method"] == "virtual"
    assert len(scene["decoder"]["directions"]) == 32  # the 7-design's virtual loudspeakers
    assert scene["rotation"] == {"yaw_deg": 30.0, "pitch_deg": 0.0, "roll_deg": 0.0}
    assert report["layout"]["kind"] == "scene" and report["layout"]["order"] == 3
    out = tmp_path / "got.wav"
    out.write_bytes(client.get(done["links"]["audio"]).content)
    ref = tmp_path / "ref.wav"
    render(
        [path],
        ref,
        RenderSettings(layout="hoa3", rotate=(30.0, 0.0, 0.0), ambisonic_decoder="virtual"),
    )
    assert_array_equal(read_audio(out)[0], read_audio(ref)[0])
    # Turned 30 degrees to the left, the front source is louder at the left ear.
    y = read_audio(out)[0]
    left, right = (float(np.sum(y[:, e].astype(float) ** 2)) for e in (0, 1))
    assert left > right
    assert_allclose(scene["rotation"]["yaw_deg"], 30.0)
