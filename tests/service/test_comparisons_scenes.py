"""Blind comparisons of one Ambisonic scene stem decoded differently: the variants are
worded as scenes, options that resolve alike are refused as identical, and a session
of two decoders builds and plays."""

from __future__ import annotations

import numpy as np
import pytest
from stem_factory import FS, files_field

from earfold.renderer.io import write_audio
from earfold.renderer.scenes import encode
from earfold.service.comparisons.sameness import identical_pair, sound_key
from earfold.service.comparisons.summary import variant_summary
from earfold.service.jobs.worker import Worker

FAST = {"tick_s": 0.05, "poll_s": 0.02, "lease_s": 5.0}


def _scene_stem(client, tmp_path, order=3, seconds=3.0) -> dict:
    """Noise as a plane wave from 60 degrees left on the horizon, AmbiX of ``order``."""
    rng = np.random.default_rng(11)
    s = 0.05 * rng.standard_normal(int(FS * seconds))
    a = np.radians(60.0)
    x = s[:, None] * encode([np.cos(a), np.sin(a), 0.0], order)[None, :]
    path = tmp_path / "field.wav"
    write_audio(path, x.astype(np.float32), FS, subtype="FLOAT")
    resp = client.post("/v1/stems", files=files_field([path]))
    assert resp.status_code == 201, resp.text
    return resp.json()


@pytest.mark.parametrize(
    ("request_", "words"),
    [
        (
            {"layout": "hoa3", "ambisonic_decoder": "magls", "rotate": [30]},
            "order 3 scene, MagLS decoder, rotated 30 deg",
        ),
        (
            {"layout": "foa", "ambisonic_norm": "fuma", "ambisonic_decoder": "virtual"},
            "order 1 scene, FuMa input, virtual-loudspeaker decoder",
        ),
        (
            {"layout": "hoa5", "rotate": "90,10"},
            "order 5 scene, rotated 90, 10, 0 deg (yaw, pitch, roll)",
        ),
    ],
)
def test_a_scene_variant_in_words(request_, words):
    assert variant_summary(request_) == words


def test_scene_options_that_resolve_alike_are_the_same_sound():
    def key(**options):
        base = {"layout": "hoa3", "room": "none", "lfe_cutoff": 120.0, "lfe_gain": 10.0}
        return sound_key({**base, **options}, None, lfe_in_layout=False)

    # left out = the order's default decoder (MagLS from second order) and SN3D
    assert key() == key(ambisonic_decoder="magls", ambisonic_norm="sn3d")
    assert key() != key(ambisonic_decoder="virtual")
    # one rotation however it is written; all zero is none
    assert key(rotate="30") == key(rotate=[30.0, 0.0, 0.0]) == key(rotate=[30])
    assert key(rotate=[0, 0, 0]) == key() == key(rotate="none")
    assert key(rotate=[30]) != key(rotate=[30, 5])
    # first order defaults to the virtual-loudspeaker decoder
    foa = {"layout": "foa", "room": "none"}
    assert sound_key(foa, None, False) == sound_key(
        {**foa, "ambisonic_decoder": "virtual"}, None, False
    )
    assert identical_pair([key(rotate=[15]), key(), key(rotate="15,0,0")]) == (0, 2)


def test_identical_scene_variants_are_refused(client, tmp_path):
    stem = _scene_stem(client, tmp_path, seconds=1.0)
    body = {
        "stem_id": stem["id"],
        "variants": [
            {"layout": "hoa3", "rotate": [0, 0, 0]},
            {"layout": "hoa3", "ambisonic_decoder": "magls"},
        ],
        "trials": 2,
    }
    resp = client.post("/v1/comparisons", json=body)
    assert resp.status_code == 422, resp.text
    assert "would render identically" in resp.json()["detail"]
    body["variants"][1] = {"layout": "hoa3", "rotate": [0], "fold": "stereo"}
    resp = client.post("/v1/comparisons", json=body)
    assert resp.status_code == 422 and "variant 2: fold stereo" in resp.json()["detail"]


def test_two_decoders_of_one_scene_compared_blind(make_client, tmp_path):
    client = make_client(**FAST)
    stem = _scene_stem(client, tmp_path)
    body = {
        "stem_id": stem["id"],
        "variants": [
            {"layout": "hoa3", "ambisonic_decoder": "magls", "name": "least squares"},
            {"layout": "hoa3", "ambisonic_decoder": "virtual", "rotate": "30"},
        ],
        "trials": 2,
        "excerpt": {"start": 0.5, "length": 2.0},
    }
    resp = client.post("/v1/comparisons", json=body)
    assert resp.status_code == 202, resp.text
    cid = resp.json()["id"]
    assert [v["summary"] for v in resp.json()["variants"]] == [
        "order 3 scene, MagLS decoder",
        "order 3 scene, virtual-loudspeaker decoder, rotated 30 deg",
    ]
    Worker(client.app.state.settings, queue=client.app.state.queue, name="w").run(once=True)
    view = client.get(f"/v1/comparisons/{cid}").json()
    assert view["state"] == "ready", view
    # Both variants are level-matched to the session's common loudness.
    a = client.get(view["trials"][0]["audio"]["A"])
    b = client.get(view["trials"][0]["audio"]["B"])
    assert a.status_code == b.status_code == 200 and a.content != b.content
    client.post(f"/v1/comparisons/{cid}/trials/0/answer", json={"choice": "A"})
    client.post(f"/v1/comparisons/{cid}/finish")
    result = client.get(f"/v1/comparisons/{cid}/results").json()
    for v in result["variants"]:
        assert v["matched_lufs"] == pytest.approx(result["level_lufs"], abs=0.1)


def test_two_orders_of_one_scene_compared_blind(make_client, tmp_path):
    # An order-3 master heard at order 3 and at order 2 (its first 9 ACN channels).
    client = make_client(**FAST)
    stem = _scene_stem(client, tmp_path)
    body = {
        "stem_id": stem["id"],
        "variants": [{"layout": "hoa3"}, {"layout": "hoa2"}],
        "trials": 2,
        "excerpt": {"start": 0.5, "length": 2.0},
    }
    resp = client.post("/v1/comparisons", json=body)
    assert resp.status_code == 202, resp.text
    cid = resp.json()["id"]
    summaries = [v["summary"] for v in resp.json()["variants"]]
    assert summaries[0].startswith("order 3 scene") and summaries[1].startswith("order 2 scene")
    Worker(client.app.state.settings, queue=client.app.state.queue, name="w").run(once=True)
    view = client.get(f"/v1/comparisons/{cid}").json()
    assert view["state"] == "ready", view
    a = client.get(view["trials"][0]["audio"]["A"])
    b = client.get(view["trials"][0]["audio"]["B"])
    assert a.status_code == b.status_code == 200 and a.content != b.content
    # a stem of a lower order than asked is refused before anything is queued
    low = {**body, "variants": [{"layout": "hoa3"}, {"layout": "hoa4"}]}
    refused = client.post("/v1/comparisons", json=low)
    assert refused.status_code == 422 and "hoa4" in refused.text
