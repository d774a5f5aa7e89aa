"""``/v1/stems``: streamed uploads, probing, limits with the right status, no leftovers."""

from __future__ import annotations

import hashlib

import pytest
from stem_factory import FS, files_field, write_mono_set, write_stem

from earfold.renderer.io import probe_stem


def _tmp_is_empty(client) -> bool:
    return not any((client.app.state.storage.root / "tmp").iterdir())


def _problem(resp, status: int, pattern: str) -> dict:
    assert resp.status_code == status, resp.text
    # RFC 9457: problem details have their own media type and these members.
    assert resp.headers["content-type"].startswith("application/problem+json")
    body = resp.json()
    assert body["status"] == status and body["title"] and pattern in body["detail"], body
    return body


def test_upload_one_multichannel_file(client, tmp_path):
    path = write_stem(tmp_path / "scene.wav", FS // 10, 12)
    resp = client.post("/v1/stems", files=files_field([path]))
    assert resp.status_code == 201, resp.text
    stem = resp.json()
    assert resp.headers["location"] == f"/v1/stems/{stem['id']}"
    # Reference: hashlib over the bytes sent; probe_stem on the original file.
    assert stem["files"][0]["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
    info = probe_stem(path)
    assert (stem["channels"], stem["frames"], stem["samplerate"]) == (12, info.frames, FS)
    assert stem["format"] == info.format and stem["subtype"] == "PCM_24"
    assert stem["suggested_layout"] == "7.1.4"  # 12 channels most often mean 7.1.4
    assert client.get(f"/v1/stems/{stem['id']}").json()["id"] == stem["id"]
    assert [s["id"] for s in client.get("/v1/stems").json()] == [stem["id"]]
    assert client.delete(f"/v1/stems/{stem['id']}").status_code == 204
    _problem(client.get(f"/v1/stems/{stem['id']}"), 404, stem["id"])


def test_upload_twelve_mono_files_reads_labels_from_names(client, tmp_path):
    paths = write_mono_set(tmp_path, "7.1.4", FS // 20)
    resp = client.post("/v1/stems", files=files_field(paths))
    assert resp.status_code == 201, resp.text
    stem = resp.json()
    assert stem["channels"] == 12 and len(stem["files"]) == 12
    assert stem["labels_source"] == "file names"
    assert stem["suggested_layout"] == "7.1.4"
    assert [f["name"] for f in stem["files"]] == [p.name for p in paths]


def test_file_names_are_metadata_only(client, tmp_path):
    path = write_stem(tmp_path / "a.wav", 480, 2)
    evil = "../../../../outside.wav"
    resp = client.post("/v1/stems", files=files_field([path], [evil]))
    assert resp.status_code == 201, resp.text
    stem = resp.json()
    assert stem["files"][0]["name"] == "outside.wav"
    root = client.app.state.storage.root
    stored = list((root / "stems" / stem["id"]).iterdir())
    assert sorted(p.name for p in stored) == ["00.wav", "levels.json", "meta.json"]
    assert not (root.parent / "outside.wav").exists()


def test_413_from_content_length_before_reading(make_client, tmp_path):
    client = make_client(max_upload_bytes=10_000)
    path = write_stem(tmp_path / "big.wav", 10_000, 2)
    _problem(client.post("/v1/stems", files=files_field([path])), 413, "at most 10000")
    assert _tmp_is_empty(client)


def test_413_while_streaming_without_content_length(make_client, tmp_path):
    client = make_client(max_upload_bytes=10_000)
    path = write_stem(tmp_path / "big.wav", 10_000, 2)
    body = (
        b'--xyz\r\nContent-Disposition: form-data; name="file"; filename="big.wav"\r\n'
        b"Content-Type: audio/wav\r\n\r\n" + path.read_bytes() + b"\r\n--xyz--\r\n"
    )

    def chunks():  # a generator body is sent chunked, with no Content-Length
        for i in range(0, len(body), 4096):
            yield body[i : i + 4096]

    resp = client.post(
        "/v1/stems", content=chunks(), headers={"content-type": "multipart/form-data; boundary=xyz"}
    )
    _problem(resp, 413, "exceeded 10000 bytes")
    assert _tmp_is_empty(client)


@pytest.mark.parametrize(
    ("name", "content", "pattern"),
    [
        ("empty.wav", b"", "empty.wav"),
        ("notes.wav", b"these are not audio samples " * 40, "not a readable audio file"),
        ("cut.wav", b"RIFF\x24\x00\x00\x00WAVEfmt ", "cut.wav"),
    ],
)
def test_undecodable_audio_is_415_with_the_reason(client, name, content, pattern):
    resp = client.post("/v1/stems", files=[("file", (name, content, "audio/wav"))])
    body = _problem(resp, 415, pattern)
    assert "/tmp" not in body["detail"] and "part-" not in body["detail"]  # client names only
    assert _tmp_is_empty(client)


def test_mismatched_mono_files_are_422(client, tmp_path):
    a = write_stem(tmp_path / "mix.L.wav", 480, 1)
    b = write_stem(tmp_path / "mix.R.wav", 480, 1, samplerate=44100)
    _problem(client.post("/v1/stems", files=files_field([a, b])), 422, "differ in sample rate")
    stereo = write_stem(tmp_path / "mix.C.wav", 480, 2)
    _problem(client.post("/v1/stems", files=files_field([a, stereo])), 422, "must be mono")
    assert _tmp_is_empty(client)


def test_nan_in_a_float_upload_is_refused_naming_file_channel_and_frame(client, tmp_path):
    # A NaN used to be found only when a render met it, in the scratch render, and the
    # message named the server's scratch file.
    import numpy as np
    import soundfile  # our own writer refuses NaN, so the test writes the file directly

    data = np.zeros((4800, 6), dtype=np.float32)
    data[2400, 4] = np.nan
    path = tmp_path / "take 3.wav"
    soundfile.write(path, data, FS, subtype="FLOAT")
    body = _problem(client.post("/v1/stems", files=files_field([path])), 422, "take 3.wav")
    assert "channel 5" in body["detail"] and "frame 2400" in body["detail"]
    assert "NaN" in body["detail"]
    assert str(client.app.state.storage.root) not in body["detail"]
    assert client.get("/v1/stems").json() == []
    assert _tmp_is_empty(client)


def test_channel_and_duration_limits_are_422(make_client, tmp_path):
    client = make_client(max_channels=8, max_duration_s=0.5)
    wide = write_stem(tmp_path / "wide.wav", 480, 12)
    _problem(client.post("/v1/stems", files=files_field([wide])), 422, "at most 8")
    long = write_stem(tmp_path / "long.wav", FS, 2)
    _problem(client.post("/v1/stems", files=files_field([long])), 422, "lasts 1.0 s")


def test_no_disk_space_is_507(make_client, tmp_path):
    client = make_client(min_free_bytes=10**18)
    path = write_stem(tmp_path / "a.wav", 480, 2)
    _problem(client.post("/v1/stems", files=files_field([path])), 507, "not enough disk space")


def test_body_that_is_not_multipart(client):
    _problem(
        client.post("/v1/stems", content=b"RIFF", headers={"content-type": "audio/wav"}),
        415,
        "multipart/form-data",
    )
    _problem(
        client.post(
            "/v1/stems", data={"other": "x"}, files=[("notfile", ("a.wav", b"x", "audio/wav"))]
        ),
        400,
        "no file",
    )
    resp = client.post(
        "/v1/stems",
        content=b"--b\r\ngarbage",
        headers={"content-type": "multipart/form-data; boundary=b"},
    )
    assert resp.status_code == 400, resp.text
    assert _tmp_is_empty(client)


def test_ids_are_checked_before_touching_a_path(client):
    for bad in ("..", "x" * 32, "0" * 31, "../../etc"):
        resp = client.get(f"/v1/stems/{bad}")
        assert resp.status_code == 404, (bad, resp.text)


def test_file_without_a_file_name_is_taken_not_called_a_too_long_field(client, tmp_path):
    """A client leaves out ``filename`` when the name is empty; the part is still the
    file (it used to be refused as "form field 'file' is too long")."""
    path = write_stem(tmp_path / "a.wav", FS, 2)
    resp = client.post("/v1/stems", files=[("file", ("", path.read_bytes(), "audio/wav"))])
    assert resp.status_code == 201, resp.text
    assert resp.json()["files"][0]["name"] == "upload"
    # filename="" said explicitly: the same
    body = (
        b'--b\r\nContent-Disposition: form-data; name="file"; filename=""\r\n\r\n'
        + path.read_bytes()
        + b"\r\n--b--\r\n"
    )
    resp = client.post(
        "/v1/stems", content=body, headers={"content-type": "multipart/form-data; boundary=b"}
    )
    assert resp.status_code == 201, resp.text


def test_file_in_the_wrong_form_field_says_which_field_to_use(client, tmp_path):
    path = write_stem(tmp_path / "a.wav", FS, 2)
    problem = _problem(
        client.post("/v1/stems", files=[("audio", ("a.wav", path.read_bytes(), "audio/wav"))]),
        400,
        "form field 'audio'",
    )
    assert "send it as field 'file'" in problem["detail"]
    assert "too long" not in problem["detail"]
    assert _tmp_is_empty(client)


def test_long_text_field_says_files_go_in_field_file(client):
    problem = _problem(
        client.post(
            "/v1/stems",
            data={"notes": "x" * 100_000},
            files=[("file", ("a.wav", b"RIFF", "audio/wav"))],
        ),
        400,
        "form field 'notes' is longer than 65536 bytes",
    )
    assert "only field 'file' may carry files" in problem["detail"]
