"""Tests of the delivery stage: loudness targets, "match", the ceiling after dither.

Delivered loudness is read back from the written file by pyloudnorm (PyPI,
``Meter(rate, filter_class="DeMan")``, an independent BS.1770-4 implementation) where it
is installed, and by our own meter otherwise; the true peak by
:func:`earfold.renderer.loudness.true_peak` (checked against EBU Tech 3341 in
test_loudness.py). Test renders are made here: noise bursts as programme material.
"""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pytest
from numpy.testing import assert_allclose

from earfold.renderer.errors import DeliveryError, RenderCancelled
from earfold.renderer.io import read_audio, write_audio
from earfold.renderer.loudness import (
    DeliveryOptions,
    LoudnessMeter,
    deliver,
    format_measurement,
    measure_file,
    parse_loudness,
    parse_true_peak,
    true_peak,
)

FS = 48000


def bursts(seconds: int = 12, level: float = 0.05, seed: int = 0) -> np.ndarray:
    """Programme material: 1 s noise bursts every 2 s, stereo, float32."""
    rng = np.random.default_rng(seed)
    x = np.zeros((seconds * FS, 2), dtype=np.float32)
    for start in range(0, seconds * FS, 2 * FS):
        x[start : start + FS] = rng.standard_normal((FS, 2)) * level
    return x


@pytest.fixture()
def render(tmp_path):
    path = tmp_path / "render.float.wav"
    write_audio(path, bursts(), FS, subtype="FLOAT")
    return path


def integrated(path) -> float:
    data, rate = read_audio(path)
    try:
        import pyloudnorm
    except ImportError:
        return measure_file(path).integrated_lufs
    return pyloudnorm.Meter(rate, filter_class="DeMan").integrated_loudness(data.astype(np.float64))


def sha256(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.mark.parametrize("target", [-23.0, -16.0, -14.0])
def test_targets_are_reached_when_the_limiter_stays_idle(render, tmp_path, target):
    out = tmp_path / "out.wav"
    report = deliver(render, out, DeliveryOptions(loudness=target), input_loudness=None)
    assert report["limiter"]["samples_limited"] == 0
    assert_allclose(integrated(out), target, atol=0.1)  # pyloudnorm (DeMan) on the file
    assert_allclose(report["output"]["integrated_lufs"], target, atol=0.1)
    assert report["target"] == target and report["target_lufs"] == target
    assert report["warnings"] == []


@pytest.mark.parametrize("target", [-23.0, -3.0])  # limiter idle, then working hard
def test_a_measurement_passed_in_gives_the_same_delivery(render, tmp_path, target):
    """The render pass's meter (true peak included) lets the stage skip its measuring
    pass and, when the render cannot reach the ceiling, the limiter's interpolation and
    the output's metering; the file stays the same, and the report within rounding."""
    options = DeliveryOptions(loudness=target)
    plain = deliver(render, tmp_path / "plain.wav", options, input_loudness=None)
    meter = LoudnessMeter(FS, 2)
    meter.process(read_audio(render)[0])
    told = deliver(render, tmp_path / "told.wav", options, input_loudness=None, render_meter=meter)
    assert sha256(tmp_path / "told.wav") == sha256(tmp_path / "plain.wav")
    loud = target == -3.0
    assert (plain["limiter"]["samples_limited"] > 0) == loud
    assert told == plain
    # Unless the limiter works, the output's figures are the render's plus the gain;
    # metering the delivered file reads the same (within the report's 0.01 rounding).
    assert told["output_from_render"] is not loud
    again = measure_file(tmp_path / "told.wav").to_dict(series=False)
    for key in (
        "integrated_lufs",
        "momentary_max_lufs",
        "short_term_max_lufs",
        "loudness_range_lu",
        "true_peak_dbtp",
        "sample_peak_dbfs",
    ):
        assert_allclose(told["output"][key], again[key], atol=0.011, err_msg=key)


def test_match_reproduces_the_input_loudness(render, tmp_path):
    out = tmp_path / "out.wav"
    report = deliver(render, out, DeliveryOptions(loudness="match"), input_loudness=-19.3)
    assert_allclose(integrated(out), -19.3, atol=0.1)
    assert report["target"] == "match" and report["target_lufs"] == -19.3
    assert_allclose(report["gain_db"], -19.3 - report["render_integrated_lufs"], atol=0.01)


def test_no_target_applies_no_gain(render, tmp_path):
    out = tmp_path / "out.wav"
    report = deliver(
        render, out, DeliveryOptions(loudness=None), input_loudness=-30.0, subtype="FLOAT"
    )
    assert report["gain_db"] == 0.0
    data, _ = read_audio(out)
    source, _ = read_audio(render)
    np.testing.assert_array_equal(data, source)  # limiter idle, FLOAT: the same samples


@pytest.mark.parametrize("subtype", ["PCM_16", "PCM_24", "FLOAT"])
def test_ceiling_holds_in_the_written_file_after_dither(render, tmp_path, subtype):
    out = tmp_path / "loud.wav"
    report = deliver(
        render,
        out,
        DeliveryOptions(loudness=-3.0, true_peak=-1.0),
        input_loudness=None,
        subtype=subtype,
        seed=3,
    )
    data, _ = read_audio(out)
    assert true_peak(data, FS) <= -1.0  # the file as written, dither included
    assert report["true_peak_before_dbtp"] > -1.0  # the limiter had work to do
    assert report["true_peak_after_dbtp"] <= -1.0
    assert report["limiter"]["max_gain_reduction_db"] > 6.0
    assert any("may be too high" in w for w in report["warnings"])
    assert any("below the target, because of limiting" in w for w in report["warnings"])


def test_temp_file_is_left_untouched_and_the_report_is_json(render, tmp_path):
    before = sha256(render)
    report = deliver(
        render,
        tmp_path / "out.flac",
        DeliveryOptions(loudness=-16.0),
        input_loudness=None,
        subtype="PCM_16",
    )
    assert sha256(render) == before
    assert report["output"]["format"] == "FLAC"
    json.dumps(report, allow_nan=False)
    assert set(report) >= {
        "target",
        "input_integrated_lufs",
        "render_integrated_lufs",
        "gain_db",
        "output",
        "true_peak_before_dbtp",
        "true_peak_after_dbtp",
        "ceiling_dbtp",
        "limiter",
        "warnings",
    }


def test_limiter_off_is_reported_and_overs_warned(tmp_path):
    t = np.arange(2 * FS)
    x = 1.2 * np.sin(np.pi / 2 * t + np.pi / 4)  # fs/4 at 45 degrees: samples 0.85, peak 1.2
    path = tmp_path / "hot.wav"
    write_audio(path, np.stack([x, x], axis=1), FS, subtype="FLOAT")
    report = deliver(
        path,
        tmp_path / "out.wav",
        DeliveryOptions(loudness=None, true_peak=None),
        input_loudness=None,
    )
    assert report["limiter"]["enabled"] is False and report["ceiling_dbtp"] is None
    # The meter reads this tone within +0.2 / -0.4 dB (EBU Tech 3341 case 16's tolerance).
    assert -0.4 <= report["true_peak_after_dbtp"] - 20 * np.log10(1.2) <= 0.2
    assert any("limiter is off" in w and "above 0 dBTP" in w for w in report["warnings"])


def test_silent_render_gets_no_gain_and_a_warning(tmp_path):
    path = tmp_path / "silent.wav"
    write_audio(path, np.zeros((FS, 2)), FS, subtype="FLOAT")
    report = deliver(
        path, tmp_path / "out.wav", DeliveryOptions(loudness=-23.0), input_loudness=None
    )
    assert report["gain_db"] == 0.0 and report["render_integrated_lufs"] is None
    assert any("silent" in w for w in report["warnings"])


def test_match_without_a_measured_input_gets_no_gain(render, tmp_path):
    report = deliver(
        render, tmp_path / "out.wav", DeliveryOptions(loudness="match"), input_loudness=None
    )
    assert report["gain_db"] == 0.0
    assert any("'match' applied no gain" in w for w in report["warnings"])


def test_cancel_leaves_no_output(render, tmp_path):
    polls = iter([False, False, True])
    out = tmp_path / "out.wav"
    with pytest.raises(RenderCancelled):
        deliver(
            render,
            out,
            DeliveryOptions(),
            input_loudness=-20.0,
            cancelled=lambda: next(polls, True),
        )
    assert not out.exists()
    assert [p.name for p in tmp_path.iterdir()] == ["render.float.wav"]


def test_progress_runs_from_zero_to_one(render, tmp_path):
    seen: list[float] = []
    deliver(
        render, tmp_path / "out.wav", DeliveryOptions(), input_loudness=-20.0, progress=seen.append
    )
    assert seen == sorted(seen) and 0 < seen[0] < 1 and seen[-1] == 1.0


@pytest.mark.parametrize(
    "text, expected",
    [
        ("-23", -23.0),
        (" -16.5 ", -16.5),
        ("-23 LUFS", -23.0),
        ("-24lkfs", -24.0),
        ("match", "match"),
        (" MATCH ", "match"),
        ("none", None),
        ("Off", None),
    ],
)
def test_parse_loudness(text, expected):
    assert parse_loudness(text) == expected


@pytest.mark.parametrize(
    "text, message",
    [
        ("loud", r"invalid loudness target 'loud'; give a level in LUFS between -70 and 0"),
        ("", r"invalid loudness target ''"),
        ("-23 dB", r"invalid loudness target '-23 dB'"),
        ("nan", r"invalid loudness target 'nan'"),
        ("5", r"loudness target '5' is out of range; choose between -70 and 0 LUFS"),
        ("-70", r"loudness target '-70' is out of range"),
        ("0", r"loudness target '0' is out of range"),
    ],
)
def test_parse_loudness_refuses_bad_values(text, message):
    with pytest.raises(DeliveryError, match=message):
        parse_loudness(text)


@pytest.mark.parametrize(
    "text, expected",
    [
        ("-1", -1.0),
        ("-0.5 dBTP", -0.5),
        ("0", 0.0),
        ("off", None),
        ("NONE", None),
    ],
)
def test_parse_true_peak(text, expected):
    assert parse_true_peak(text) == expected


@pytest.mark.parametrize(
    "text, message",
    [
        ("1", r"true-peak ceiling '1' is out of range; choose from -30 to 0 dBTP"),
        ("-1 LUFS", r"invalid true-peak ceiling '-1 LUFS'; give a level in dBTP"),
        ("max", r"invalid true-peak ceiling 'max'.*'off' for no limiter"),
    ],
)
def test_parse_true_peak_refuses_bad_values(text, message):
    with pytest.raises(DeliveryError, match=message):
        parse_true_peak(text)


def test_options_are_checked_on_construction():
    with pytest.raises(
        DeliveryError,
        match=r"loudness must be a LUFS number, 'match' or None, "
        r"not 'loud'",
    ):
        DeliveryOptions(loudness="loud")
    with pytest.raises(DeliveryError, match=r"true-peak ceiling 3 is out of range"):
        DeliveryOptions(true_peak=3)
    with pytest.raises(DeliveryError, match=r"invalid loudness target True"):
        DeliveryOptions(loudness=True)
    assert DeliveryOptions(loudness=-23).loudness == -23.0


def test_format_measurement_lists_values_and_gaps():
    m = LoudnessMeter(FS, 2)
    m.process(bursts(6))
    text = format_measurement(m.result())
    assert "integrated" in text and "LUFS" in text and "dBTP" in text
    assert "6.0 s (48000 Hz, 2 channels)" in text
    silent = LoudnessMeter(FS, 2)
    silent.process(np.zeros((FS, 2), dtype=np.float32))
    assert "n/a (silent or under 0.4 s)" in format_measurement(silent.result())
