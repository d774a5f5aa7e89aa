"""NaN or infinity in a stem: found where the input is read, named by file, channel, frame."""

from __future__ import annotations

import numpy as np
import pytest
from audio_factory import write_wav

from earfold.renderer.errors import AudioError
from earfold.renderer.io import StemReader, probe_stem, scan_stem
from earfold.renderer.render import RenderSettings, render

FS = 48000


def _stem(tmp_path, bad_frame: int, bad_channel: int, value: float, frames: int = FS):
    x = 0.1 * np.random.default_rng(5).standard_normal((frames, 6))
    x[bad_frame, bad_channel] = value
    return write_wav(tmp_path / "mix.wav", x, FS, floating=True)


def test_nan_in_a_stem_is_reported_by_input_file_channel_and_frame_not_scratch(tmp_path):
    # It used to surface late, in the scratch render, naming the hidden scratch file
    # (over HTTP that leaked the server's data directory).
    stem = _stem(tmp_path, 36000, 4, float("nan"))
    out = tmp_path / "out.wav"
    with pytest.raises(AudioError) as caught:
        render([stem], out, RenderSettings(layout="5.1"))
    msg = str(caught.value)
    assert "'mix.wav', channel 5 (Ls), holds NaN" in msg
    assert "frame 36000 (0.750 s)" in msg
    assert ".render.wav" not in msg and str(tmp_path) not in msg
    assert not out.exists()
    assert [p.name for p in tmp_path.iterdir()] == ["mix.wav"]


def test_infinity_in_one_of_several_mono_files_names_that_file(tmp_path):
    names = ["m_L.wav", "m_R.wav", "m_C.wav", "m_LFE.wav", "m_Ls.wav", "m_Rs.wav"]
    paths = []
    for k, name in enumerate(names):
        x = np.full((4800, 1), 0.01 * (k + 1))
        if name == "m_R.wav":
            x[123, 0] = -np.inf
        paths.append(write_wav(tmp_path / name, x, FS, floating=True))
    with pytest.raises(AudioError, match=r"'m_R\.wav' \(channel 2 \(R\)\) holds an infinite"):
        render(paths, tmp_path / "out.wav", RenderSettings(layout="5.1", loudness=None))


def test_scan_stem_finds_the_first_bad_sample_in_bounded_blocks(tmp_path):
    stem = _stem(tmp_path, 70000, 2, float("inf"), frames=2 * FS)
    info = probe_stem([stem])
    found = scan_stem(info, labels=["L", "R", "C", "LFE", "Ls", "Rs"], blocksize=4096)
    assert found is not None
    assert (found.channel, found.label, found.frame, found.kind) == (3, "C", 70000, "infinity")
    assert found.seconds == pytest.approx(70000 / FS)
    assert found.path == str(stem)
    assert "'mix.wav', channel 3 (C), holds an infinite value at frame 70000" in found.message
    # Without labels the channel is named by number only.
    assert "channel 3, holds" in scan_stem(info).message


def test_scan_stem_passes_a_clean_stem_and_an_excerpt_counts_frames_in_the_file(tmp_path):
    stem = _stem(tmp_path, 100, 0, 0.0)
    assert scan_stem(probe_stem([stem])) is None
    bad = _stem(tmp_path, 30000, 1, float("nan"))
    window = probe_stem([bad]).window(24000, 12000)
    with StemReader(window) as reader, pytest.raises(AudioError, match="at frame 30000"):
        for _ in reader.blocks(1000):
            pass


def test_a_reader_may_be_told_not_to_check(tmp_path):
    stem = _stem(tmp_path, 10, 0, float("nan"), frames=4800)
    with StemReader(probe_stem([stem]), check_finite=False) as reader:
        blocks = list(reader.blocks(4800))
    assert np.isnan(blocks[0][10, 0])
