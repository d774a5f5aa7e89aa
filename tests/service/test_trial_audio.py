"""Blind by ear only: no two trials' audio is the same byte stream (a hash of the downloads
would otherwise tell the variants apart, and in ABX which of A or B is X), while every
trial file keeps its variant's level, length and header."""

from __future__ import annotations

import hashlib
import io
import secrets

import numpy as np
import pytest
import soundfile

from earfold.renderer.io import write_audio
from earfold.renderer.loudness import LoudnessMeter
from earfold.service.comparisons.trial_audio import TrialAudioError, dithered
from earfold.service.jobs.worker import Worker
from tests.service.stem_factory import FS, files_field, noise

FAST = {"tick_s": 0.05, "poll_s": 0.02, "lease_s": 5.0}

#: The level-matching tolerance of a comparison (LU).
LEVEL_TOLERANCE_LU = 0.01


def _lufs(data: bytes) -> float:
    x, sr = soundfile.read(io.BytesIO(data), dtype="float32", always_2d=True)
    meter = LoudnessMeter(sr, x.shape[1])
    meter.process(x)
    value = meter.result().integrated_lufs
    assert value is not None
    return value


def _data_offset(data: bytes) -> int:
    return data.index(b"data") + 8


def _wav24(tmp_path, x: np.ndarray) -> bytes:
    path = tmp_path / "variant.wav"
    write_audio(path, x, FS, subtype="PCM_24")
    return path.read_bytes()


def test_each_token_gets_its_own_bytes_at_the_same_level_length_and_header(tmp_path):
    x = (noise(FS * 2, 2, seed=3) * 0.3).astype(np.float32)
    x[: FS // 4] = 0.0  # digital silence too (the fades of an excerpt)
    original = _wav24(tmp_path, x)
    tokens = [secrets.token_hex(16) for _ in range(30)]
    outs = [dithered(original, t) for t in tokens]
    hashes = {hashlib.sha256(o).hexdigest() for o in outs} | {hashlib.sha256(original).hexdigest()}
    assert len(hashes) == len(tokens) + 1
    start = _data_offset(original)
    reference = _lufs(original)
    for out in outs:
        assert len(out) == len(original)
        assert out[:start] == original[:start]  # the header, byte for byte
        assert abs(_lufs(out) - reference) <= LEVEL_TOLERANCE_LU
        back, _ = soundfile.read(io.BytesIO(out), dtype="int32")
        orig, _ = soundfile.read(io.BytesIO(original), dtype="int32")
        assert np.max(np.abs((back >> 8) - (orig >> 8))) <= 1  # one 24-bit step at most
    # the same token, the same bytes: a repeated download is no tell either
    assert dithered(original, tokens[0]) == outs[0]


def test_full_scale_samples_stay_in_range(tmp_path):
    x = np.full((4800, 2), 1.0, np.float32)
    x[::2] = -1.0
    out = dithered(_wav24(tmp_path, x), secrets.token_hex(16))
    back, _ = soundfile.read(io.BytesIO(out), dtype="float32")
    assert np.max(np.abs(back)) <= 1.0


def test_a_file_that_is_not_24_bit_pcm_is_refused(tmp_path):
    path = tmp_path / "float.wav"
    write_audio(path, np.zeros((100, 2), np.float32), FS, subtype="FLOAT")
    with pytest.raises(TrialAudioError, match="24-bit"):
        dithered(path.read_bytes(), secrets.token_hex(16))
    with pytest.raises(TrialAudioError, match="not a WAV"):
        dithered(b"OggS" + bytes(40), secrets.token_hex(16))


def test_hashes_of_every_trial_download_differ_and_levels_match(make_client, tmp_path):
    client = make_client(**FAST)
    path = tmp_path / "rehearsal.wav"
    write_audio(path, noise(FS * 4, 6, seed=7), FS)
    stem = client.post("/v1/stems", files=files_field([path])).json()
    body = {
        "stem_id": stem["id"],
        "mode": "abx",
        "trials": 5,
        "variants": [{"layout": "5.1"}, {"layout": "5.1", "room": "small"}],
        "excerpt": {"start": 0.5, "length": 2.0},
    }
    cid = client.post("/v1/comparisons", json=body).json()["id"]
    Worker(client.app.state.settings, queue=client.app.state.queue, name="test-worker").run(
        once=True
    )
    view = client.get(f"/v1/comparisons/{cid}").json()
    assert view["state"] == "ready", view
    urls = [url for trial in view["trials"] for url in trial["audio"].values()]
    assert len(urls) == 15
    bodies = [client.get(url).content for url in urls]
    assert len({hashlib.sha256(b).hexdigest() for b in bodies}) == len(bodies)
    assert len({len(b) for b in bodies}) == 1
    assert len({b[: _data_offset(b)] for b in bodies}) == 1  # one header for all
    levels = [_lufs(b) for b in bodies]
    assert max(levels) - min(levels) <= LEVEL_TOLERANCE_LU, levels
    assert view["level_lufs"] == pytest.approx(np.mean(levels), abs=0.01)
