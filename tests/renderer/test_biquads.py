"""Headphone EQ: Audio EQ Cookbook biquads, JSON band lists and impulse-response files."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from earfold.renderer.eq import (
    BAND_TYPES,
    Band,
    bands_sos,
    cookbook_biquad,
    load_headphone_eq,
    parse_bands,
)
from earfold.renderer.errors import HeadphoneEqError
from earfold.renderer.io import write_audio

REPO = Path(__file__).resolve().parents[2]


def _gain_db(sos: np.ndarray, f: float, fs: float) -> float:
    _, h = signal.sosfreqz(sos, worN=[f], fs=fs)
    return float(20 * np.log10(np.abs(h[0])))


@pytest.mark.parametrize("fs", [44100.0, 48000.0])
@pytest.mark.parametrize("f0", [60.0, 1000.0, 8000.0])
def test_cookbook_gain_at_the_centre_or_corner(fs, f0):
    # Audio EQ Cookbook (R. Bristow-Johnson): with the bilinear transform pre-warped at f0,
    # |H(f0)| is exactly the analogue prototype's value there: the gain for a peaking band,
    # half the gain (in dB) for a shelf, Q for the low- and high-pass (20 log10 Q dB).
    for gain in (-9.0, 4.5, 12.0):
        sos = cookbook_biquad(Band("peaking", f0, gain, 1.4), fs)[None]
        assert abs(_gain_db(sos, f0, fs) - gain) < 0.01
        for kind in ("low_shelf", "high_shelf"):
            sos = cookbook_biquad(Band(kind, f0, gain, 0.7071), fs)[None]
            assert abs(_gain_db(sos, f0, fs) - gain / 2) < 0.01
    for kind in ("low_pass", "high_pass"):
        for q in (0.5, 0.7071, 2.0):
            sos = cookbook_biquad(Band(kind, f0, 0.0, q), fs)[None]
            assert abs(_gain_db(sos, f0, fs) - 20 * np.log10(q)) < 0.01


@pytest.mark.parametrize("fs", [44100.0, 48000.0])
def test_shelves_reach_their_gain_at_the_band_edges(fs):
    # The bilinear transform maps DC and Nyquist exactly: a low shelf has its whole gain at
    # DC, a high shelf at Nyquist (Audio EQ Cookbook prototypes: H(0) = A^2, H(inf) = A^2).
    low = cookbook_biquad(Band("low_shelf", 200.0, 6.0), fs)[None]
    high = cookbook_biquad(Band("high_shelf", 5000.0, -6.0), fs)[None]
    _, h = signal.sosfreqz(low, worN=[0.0], fs=fs)
    assert abs(20 * np.log10(abs(h[0])) - 6.0) < 0.01
    _, h = signal.sosfreqz(high, worN=[fs / 2], fs=fs)
    assert abs(20 * np.log10(abs(h[0])) + 6.0) < 0.01


def test_peaking_band_matches_the_cookbook_coefficients_by_hand():
    # Hand computation from the cookbook formulas for f0 = fs/4 (w0 = pi/2, cos 0, sin 1),
    # gain +6 dB, Q = 1: A = 10^(6/40), alpha = 1/2.
    a = 10 ** (6 / 40)
    b = np.array([1 + 0.5 * a, 0.0, 1 - 0.5 * a])
    den = np.array([1 + 0.5 / a, 0.0, 1 - 0.5 / a])
    expected = np.concatenate([b, den]) / den[0]
    assert_allclose(
        cookbook_biquad(Band("peaking", 12000.0, 6.0, 1.0), 48000.0), expected, atol=1e-12
    )


def test_band_list_errors_name_the_problem():
    with pytest.raises(HeadphoneEqError, match="unknown type 'notch'; choose one of peaking"):
        parse_bands([{"type": "notch", "frequency": 1000}])
    with pytest.raises(HeadphoneEqError, match="band 1: frequency must be a number"):
        parse_bands([{"type": "peaking"}])
    with pytest.raises(HeadphoneEqError, match="unknown key"):
        parse_bands([{"type": "peaking", "frequency": 100, "gain": 3}])
    with pytest.raises(HeadphoneEqError, match="non-empty list of bands"):
        parse_bands({"bands": []})
    with pytest.raises(HeadphoneEqError, match="Nyquist"):
        bands_sos([Band("peaking", 30000.0, 3.0)], 48000.0)


def test_band_list_errors_describe_values_without_printing_their_contents():
    # An array, bytes or a long list where a band or a number belongs is named by its
    # kind and size; a message never carries the value's whole repr.
    with pytest.raises(HeadphoneEqError, match=r"band 1: expected an object, got a list of 500"):
        parse_bands([list(range(500))])
    with pytest.raises(
        HeadphoneEqError, match=r"frequency must be a number, got binary data \(3 bytes\)"
    ):
        parse_bands([{"type": "peaking", "frequency": b"1e3"}])
    with pytest.raises(HeadphoneEqError) as info:
        parse_bands([{"type": "peaking", "frequency": np.arange(100.0)}])
    assert "an array of 100 float64 values" in str(info.value) and "99." not in str(info.value)


def test_example_files_load_and_shape_the_response():
    bright = load_headphone_eq(REPO / "examples" / "headphone_eq" / "bright.json", 48000.0)
    dark = load_headphone_eq(REPO / "examples" / "headphone_eq" / "dark.json", 48000.0)
    for eq in (bright, dark):
        assert eq.kind == "bands" and eq.ir.shape[0] == 2 and len(eq.report["sha256"]) == 64
        assert {b["type"] for b in eq.report["bands"]} <= set(BAND_TYPES)
    n = 1 << 16
    f = np.fft.rfftfreq(n, 1 / 48000)
    k = int(np.searchsorted(f, 12000))
    # The FIR (the cascade's impulse response) keeps the cascade's response (sosfreqz).
    parsed = json.loads((REPO / "examples" / "headphone_eq" / "bright.json").read_text())
    bands, gain = parse_bands(parsed)
    _, h = signal.sosfreqz(bands_sos(bands, 48000.0), worN=f[[k]], fs=48000.0)
    fir = np.abs(np.fft.rfft(bright.ir[0], n))[k]
    assert abs(20 * np.log10(fir) - (20 * np.log10(abs(h[0])) + gain)) < 0.01
    # "bright" lifts 12 kHz against 1 kHz; "dark" lowers it.
    j = int(np.searchsorted(f, 1000))
    tilt = [20 * np.log10(np.abs(np.fft.rfft(e.ir[0], n))[[k, j]]) for e in (bright, dark)]
    assert tilt[0][0] - tilt[0][1] > 2 and tilt[1][0] - tilt[1][1] < -2


def test_impulse_response_file_is_resampled_keeping_its_response(tmp_path):
    # A 2-channel IR at 44.1 kHz: left a +6 dB peaking band at 1 kHz, right a plain delta.
    fs = 44100
    impulse = np.zeros(2048)
    impulse[0] = 1.0
    left = signal.sosfilt(cookbook_biquad(Band("peaking", 1000.0, 6.0, 1.0), fs)[None], impulse)
    path = tmp_path / "cans.wav"
    write_audio(
        path, np.stack([left, impulse], axis=1).astype(np.float32) * 0.5, fs, subtype="FLOAT"
    )
    eq = load_headphone_eq(path, 48000.0)
    assert eq.kind == "impulse response" and eq.report["source_samplerate"] == fs
    n = 1 << 15
    f = np.fft.rfftfreq(n, 1 / 48000)
    spec = 20 * np.log10(np.abs(np.fft.rfft(eq.ir, n, axis=-1)) / 0.5)
    k1, k2 = np.searchsorted(f, [1000, 100])
    assert abs(spec[0, k1] - 6.0) < 0.1 and abs(spec[0, k2]) < 0.3
    assert abs(spec[1, k1]) < 0.1


def test_unreadable_headphone_files_give_clear_errors(tmp_path):
    bad = tmp_path / "eq.json"
    bad.write_text("{not json")
    with pytest.raises(HeadphoneEqError, match="not valid JSON"):
        load_headphone_eq(bad, 48000.0)
    noise = tmp_path / "eq.wav"
    noise.write_bytes(b"RIFF0000WAVEjunk")
    with pytest.raises(HeadphoneEqError, match="neither a JSON band list nor a readable"):
        load_headphone_eq(noise, 48000.0)
    with pytest.raises(HeadphoneEqError, match="cannot read headphone EQ"):
        load_headphone_eq(tmp_path / "missing.json", 48000.0)


def test_example_ir_is_reproduced_by_its_generator_and_matches_the_bands(tmp_path):
    import importlib.util

    spec = importlib.util.spec_from_file_location(
        "make_ir", REPO / "examples" / "headphone_eq" / "make_ir.py"
    )
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    fresh = module.make(tmp_path / "dark-ir.wav")
    committed = REPO / "examples" / "headphone_eq" / "dark-ir.wav"
    # Samples, not bytes: a float WAV's PEAK chunk carries a time stamp.
    from earfold.renderer.io import read_audio

    np.testing.assert_array_equal(read_audio(fresh)[0], read_audio(committed)[0])
    # Read at 48 kHz (resampled from 44.1 kHz), it keeps the band list's response.
    ir_eq = load_headphone_eq(committed, 48000.0)
    bands_eq = load_headphone_eq(REPO / "examples" / "headphone_eq" / "dark.json", 48000.0)
    n = 1 << 15
    f = np.fft.rfftfreq(n, 1 / 48000)
    # Up to 10 kHz: above it the cookbook biquads themselves differ between 44.1 and
    # 48 kHz (the bilinear transform's warping near Nyquist), not the resampling.
    check = (f >= 100) & (f <= 10000)
    a = 20 * np.log10(np.abs(np.fft.rfft(ir_eq.ir[0], n)))[check]
    b = 20 * np.log10(np.abs(np.fft.rfft(bands_eq.ir[0], n)))[check]
    assert np.max(np.abs(a - b)) < 0.1
