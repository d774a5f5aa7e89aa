"""Levels of a stem (earfold.renderer.io.measure_levels): peak, RMS, overview, low share.

Reference values are textbook: a sine of amplitude A has peak 20 log10 A and RMS
20 log10 (A / sqrt 2) dBFS (RMS of a sine, A / sqrt 2).
"""

from __future__ import annotations

import json
import math
import tracemalloc

import numpy as np
import pytest
from audio_factory import write_pattern_wav
from numpy.testing import assert_allclose

from earfold.renderer.errors import AudioError
from earfold.renderer.io import OVERVIEW_POINTS, measure_levels, probe_stem, write_audio

FS = 48000


def _sine(freq: float, amplitude: float, seconds: float = 2.0) -> np.ndarray:
    t = np.arange(int(seconds * FS)) / FS
    return amplitude * np.sin(2 * np.pi * freq * t)


def _levels(tmp_path, columns, name="stem.wav", **kwargs):
    data = np.stack(columns, axis=1).astype(np.float32)
    path = tmp_path / name
    write_audio(path, data, FS, subtype="FLOAT")
    return measure_levels(probe_stem([path]), **kwargs)


@pytest.mark.parametrize("amplitude", [1.0, 0.5, 0.1])
def test_peak_and_rms_of_a_sine(tmp_path, amplitude):
    # 1.2 kHz at 48 kHz: 40 samples a period, one of them on the crest; the 2 s and each
    # of the 240 windows (400 frames) hold whole periods.
    levels = _levels(tmp_path, [_sine(1200, amplitude)])
    (ch,) = levels.channels
    assert_allclose(ch.peak_dbfs, 20 * math.log10(amplitude), atol=0.01)
    assert_allclose(ch.rms_dbfs, 20 * math.log10(amplitude / math.sqrt(2)), atol=0.01)
    assert levels.frames == 2 * FS and levels.sample_rate == FS
    assert levels.points == OVERVIEW_POINTS == len(ch.overview)
    # every window of a steady sine reads the same
    for peak, rms in ch.overview:
        assert_allclose(peak, 20 * math.log10(amplitude), atol=0.01)
        assert_allclose(rms, 20 * math.log10(amplitude / math.sqrt(2)), atol=0.01)


def test_a_silent_channel_is_null_never_infinite(tmp_path):
    levels = _levels(tmp_path, [_sine(1000, 0.5), np.zeros(2 * FS)], labels=["L", "R"])
    left, right = levels.channels
    assert (left.label, right.label) == ("L", "R")
    assert right.peak_dbfs is None and right.rms_dbfs is None and right.low_share is None
    assert all(p == [None, None] for p in levels.to_dict()["channels"][1]["overview"])
    text = json.dumps(levels.to_dict(), allow_nan=False)  # no -inf, no NaN
    assert '"peak_dbfs": null' in text


def test_low_share_separates_50_hz_from_1_khz(tmp_path):
    levels = _levels(
        tmp_path, [_sine(50, 0.5), _sine(1000, 0.5), _sine(50, 0.5) + _sine(1000, 0.5)]
    )
    low, high, both = (c.low_share for c in levels.channels)
    assert low == pytest.approx(1.0, abs=0.01)
    assert high == pytest.approx(0.0, abs=0.001)
    assert both == pytest.approx(0.5, abs=0.01)  # equal amplitudes: equal energies


def test_overview_follows_the_signal_in_time(tmp_path):
    # Silent first half, then a sine: the first 120 windows are null, the rest read it.
    x = np.concatenate([np.zeros(FS), _sine(1200, 0.25, 1.0)])
    (ch,) = _levels(tmp_path, [x]).channels
    half = OVERVIEW_POINTS // 2
    assert all(p == (None, None) for p in ch.overview[:half])
    assert all(p[0] == pytest.approx(20 * math.log10(0.25), abs=0.01) for p in ch.overview[half:])
    assert_allclose(
        ch.rms_dbfs, 20 * math.log10(0.25 / math.sqrt(2)) - 10 * math.log10(2), atol=0.01
    )


def test_a_stem_shorter_than_the_overview(tmp_path):
    (ch,) = _levels(tmp_path, [np.full(100, 0.5)], points=240).channels
    filled = [p for p in ch.overview if p != (None, None)]
    assert len(filled) == 100  # a frame each; the other windows are empty
    assert all(p == pytest.approx((-6.02, -6.02), abs=0.01) for p in filled)


def test_non_finite_samples_are_refused_when_asked(tmp_path):
    x = _sine(1000, 0.5)
    x[1234] = np.nan
    with pytest.raises(AudioError, match="NaN .* at frame 1234"):
        _levels(tmp_path, [x], check_finite=True)


def test_memory_is_bounded_by_the_block_not_the_stem(tmp_path):
    # 60 s of 8 channels at 48 kHz, 16-bit, channel c holding the code c + 1 (a constant):
    # 92 MB as float32 if held whole. Measured in 65536-frame blocks it holds a few copies
    # of one block (float32 read, float64 working copy, low-passed copy): about 15 MB.
    frames, channels = 60 * FS, 8
    info = probe_stem([write_pattern_wav(tmp_path / "long.wav", frames, channels)])
    tracemalloc.start()
    try:
        levels = measure_levels(info)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 20 * 2**20, f"peak {peak} bytes for a {frames * channels * 4} B stem"
    for c, ch in enumerate(levels.channels):
        expected = 20 * math.log10((c + 1) / 2**15)
        assert_allclose([ch.peak_dbfs, ch.rms_dbfs], [expected, expected], atol=0.01)
        assert ch.low_share == pytest.approx(1.0, abs=1e-3)  # a constant is all 0 Hz
