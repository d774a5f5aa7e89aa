"""``/v1/hrtf-sets``: SOFA uploads checked in a limited child process."""

from __future__ import annotations

import pytest

from earfold.hrtf_sets import get_shipped
from earfold.service.hrtf_check import HrtfCheckFailed, check_sofa


def _upload(client, name: str, content: bytes):
    return client.post(
        "/v1/hrtf-sets", files=[("file", (name, content, "application/octet-stream"))]
    )


@pytest.mark.shared
def test_every_malformed_sofa_file_gets_4xx_and_the_api_keeps_serving(client, shared_sofa_dir):
    files = sorted((shared_sofa_dir / "malformed").glob("*"))
    assert files, "the malformed corpus is empty"
    for path in files:
        resp = _upload(client, path.name, path.read_bytes())
        assert 400 <= resp.status_code < 500, (path.name, resp.status_code, resp.text)
        assert resp.headers["content-type"].startswith("application/problem+json")
        assert path.name in resp.json()["detail"], resp.json()  # the client's name, not ours
        assert client.get("/v1/health").status_code == 200
    assert [s for s in client.get("/v1/hrtf-sets").json() if s["kind"] == "uploaded"] == []
    assert not any((client.app.state.storage.root / "tmp").iterdir())


def test_a_valid_set_is_stored_listed_and_usable(client, tmp_path):
    sphere = get_shipped("rigid-sphere").path
    resp = _upload(client, "my head.sofa", sphere.read_bytes())
    assert resp.status_code == 201, resp.text
    hset = resp.json()
    assert hset["name"] == "my head.sofa" and hset["measurements"] > 100
    assert hset["samplerate"] == 48000
    listed = [s["id"] for s in client.get("/v1/hrtf-sets").json()]
    assert hset["id"] in listed
    from stem_factory import files_field, write_stem

    stem = client.post("/v1/stems", files=files_field([write_stem(tmp_path / "a.wav", 480, 2)]))
    resp = client.post(
        "/v1/renders", json={"stem_id": stem.json()["id"], "layout": "2.0", "hrtf": hset["id"]}
    )
    assert resp.status_code == 202, resp.text
    assert client.delete(f"/v1/hrtf-sets/{hset['id']}").status_code == 204


def test_the_check_is_bounded_in_time():
    sphere = get_shipped("rigid-sphere").path
    with pytest.raises(HrtfCheckFailed, match="longer than 0.01 s"):
        check_sofa(sphere, "x.sofa", timeout_s=0.01, memory_bytes=2**31)


def test_the_check_is_bounded_in_memory():
    sphere = get_shipped("rigid-sphere").path
    # 64 MB of address space is too little even to load numpy: the child fails, the
    # caller gets a message instead of a crash.
    with pytest.raises(HrtfCheckFailed, match="x.sofa"):
        check_sofa(sphere, "x.sofa", timeout_s=30, memory_bytes=64 * 2**20)
