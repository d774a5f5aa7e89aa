"""The report's plot section: third-octave spectra, energy decay curves, loudness series."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from scipy import signal

from earfold.renderer.io import write_audio
from earfold.renderer.render import (
    LOUDNESS_POINTS,
    RenderSettings,
    SpectrumMeter,
    energy_decay,
    render,
    schroeder_db,
    thin_series,
    third_octave_bands,
)
from earfold.renderer.render.plot_data import OutputSpectrum

FS = 48000


def test_third_octave_centres_are_the_iec_base_ten_series():
    # IEC 61260-1 base-10 exact mid-band frequencies 1000 * 10^(k/10); the nominal values
    # 31.5, 63, 125, 250, 2000, 8000 Hz round them (values recalled from the standard's
    # table: 31.62, 63.10, 125.89, 251.19, 1995.26, 7943.28).
    centres, lower, upper = third_octave_bands(FS)
    for exact in (31.62, 63.10, 125.89, 251.19, 1000.0, 1995.26, 7943.28):
        assert np.min(np.abs(centres - exact)) < 0.01
    assert_allclose(upper / lower, 10**0.1)  # a third of an octave, base 10
    assert_allclose(np.sqrt(lower * upper), centres)  # geometric mid-band
    assert centres[0] == pytest.approx(19.95, abs=0.01)
    assert upper[-1] < FS / 2
    # At 22.05 kHz only bands whose upper edge is below Nyquist remain.
    assert third_octave_bands(22050)[2][-1] < 11025


def test_sine_lands_in_its_band_at_its_mean_square():
    # A sine of amplitude A has mean square A^2 / 2 (handbook): 0.5 -> -9.03 dB.
    t = np.arange(5 * FS) / FS
    x = 0.5 * np.sin(2 * np.pi * 1000.0 * t)
    meter = SpectrumMeter(FS, 2)
    for start in range(0, len(x), 7919):  # odd block size: results must not depend on it
        block = x[start : start + 7919]
        meter.process(np.stack([block, 0.5 * block], axis=1))
    bands = meter.band_levels()
    i = int(np.argmin(np.abs(np.array(bands["centres_hz"]) - 1000.0)))
    left, right = bands["levels_db"]
    assert left[i] == pytest.approx(10 * math.log10(0.125), abs=0.05)
    assert right[i] == pytest.approx(10 * math.log10(0.125 / 4), abs=0.05)
    others = [v for j, v in enumerate(left) if abs(j - i) > 1]
    assert max(others) < left[i] - 60


def test_full_scale_sine_reads_minus_three():
    # Stated convention: a full-scale sine reads -3.01 dB (10 log10 of 1/2).
    t = np.arange(2 * FS) / FS
    meter = SpectrumMeter(FS, 1)
    meter.process(np.sin(2 * np.pi * 250.0 * t)[:, None])
    freqs, ms = meter.mean_square()
    assert 10 * math.log10(ms.sum()) == pytest.approx(-3.01, abs=0.02)


def test_white_noise_bands_match_scipy_welch():
    # Reference: scipy.signal.welch (Hann, 50 % overlap, density) integrated over each
    # band's bins; and Parseval: the bins sum to the signal's mean square.
    rng = np.random.default_rng(3)
    x = 0.1 * rng.standard_normal((10 * FS, 2))
    meter = SpectrumMeter(FS, 2)
    for start in range(0, len(x), 65536):
        meter.process(x[start : start + 65536])
    freqs, ms = meter.mean_square()
    f_ref, psd = signal.welch(x, fs=FS, window="hann", nperseg=meter.nfft, axis=0, detrend=False)
    df = f_ref[1] - f_ref[0]
    assert_allclose(ms, psd * df, rtol=1e-6, atol=1e-15)
    # Parseval: the bins add up to the mean square (about 0.01) within the estimate's spread.
    assert_allclose(ms.sum(axis=0), np.mean(x**2, axis=0), rtol=0.02)
    bands = meter.band_levels()
    # White noise: band power proportional to bandwidth, about +1 dB per third octave.
    levels = np.array(bands["levels_db"])
    centres = np.array(bands["centres_hz"])
    expected = 10 * np.log10(0.01 * (centres * (10**0.05 - 10**-0.05)) / (FS / 2))
    upper_bands = centres >= 200  # enough bins and segments for a 0.5 dB estimate
    assert_allclose(levels[:, upper_bands], np.tile(expected[upper_bands], (2, 1)), atol=0.5)


def test_strided_meter_analyses_a_bounded_even_sample_of_segments():
    # A long render is estimated from at most SPECTRUM_SEGMENTS segments, evenly spread;
    # the choice does not depend on the block sizes, and stride 1 is Welch's method.
    rng = np.random.default_rng(5)
    x = 0.1 * rng.standard_normal((40 * FS, 2)).astype(np.float32)
    full = SpectrumMeter(FS, 2)
    full.process(x)
    bounded = SpectrumMeter.for_length(FS, 2, len(x), max_segments=16)
    assert bounded.stride > 1
    for start in range(0, len(x), 30011):  # odd blocks
        bounded.process(x[start : start + 30011])
    assert 0 < bounded._segments <= 16
    # The same segments, chosen by hand: every stride-th of the full set.
    hop, nfft = full.nfft // 2, full.nfft
    window = signal.get_window("hann", nfft)
    picked = range(0, (len(x) - nfft) // hop + 1, bounded.stride)
    power = sum(
        np.abs(
            np.fft.rfft(x[k * hop : k * hop + nfft].astype(np.float64) * window[:, None], axis=0)
        )
        ** 2
        for k in picked
    )
    _, ms = bounded.mean_square()
    scale = np.full(nfft // 2 + 1, 2.0)
    scale[[0, -1]] = 1.0
    assert_allclose(
        ms, power / len(picked) * scale[:, None] / (nfft * np.sum(window**2)), rtol=1e-4, atol=1e-14
    )
    # And the estimate stays near the full one for stationary noise (bands >= 200 Hz).
    centres = np.array(full.band_levels()["centres_hz"])
    upper = centres >= 200
    assert_allclose(
        np.array(bounded.band_levels()["levels_db"])[:, upper],
        np.array(full.band_levels()["levels_db"])[:, upper],
        atol=1.0,
    )


def test_short_signal_is_one_segment_of_its_own_length():
    t = np.arange(4000) / FS
    meter = SpectrumMeter(FS, 1)
    meter.process((0.5 * np.sin(2 * np.pi * 3000.0 * t))[:, None])
    _, ms = meter.mean_square()
    assert 10 * math.log10(ms.sum()) == pytest.approx(10 * math.log10(0.125), abs=0.1)
    silent = SpectrumMeter(FS, 2).band_levels()
    assert all(v == -200.0 for row in silent["levels_db"] for v in row)


def test_schroeder_integral_of_an_exponential_matches_the_closed_form():
    # h(t) = exp(-t / tau): integral_t^T h^2 = (tau/2)(exp(-2t/tau) - exp(-2T/tau))
    # (Schroeder 1965, worked by hand).
    fs, tau, n = 8000, 0.05, 4000
    t = np.arange(n) / fs
    h = np.exp(-t / tau)
    edc = schroeder_db(h**2)
    closed = np.exp(-2 * t / tau) - np.exp(-2 * n / fs / tau)
    closed_db = 10 * np.log10(closed / closed[0])
    assert_allclose(edc[: n // 2], closed_db[: n // 2], atol=0.05)
    assert edc[0] == 0.0


def test_energy_decay_slope_gives_the_rt60_of_decaying_noise():
    # Exponentially decaying noise whose energy falls 60 dB in T: the EDC falls at
    # -60 / T dB per second in every band (ISO 3382-1 definition of reverberation time).
    rng = np.random.default_rng(7)
    rt60 = 0.6
    t = np.arange(int(1.5 * FS)) / FS
    # Eight rows (summed like ears) tame the spread of one noise draw in the 125 Hz band.
    ir = rng.standard_normal((8, t.size)) * 10 ** (-3 * t / rt60)
    out = energy_decay(ir, FS)
    assert out["bands_hz"] == [125.0, 250.0, 500.0, 1000.0, 2000.0, 4000.0, 8000.0]
    assert len(out["time_s"]) <= 160
    times = np.array(out["time_s"])
    for levels in out["levels_db"]:
        lv = np.array(levels)
        assert lv[0] == 0.0
        sel = (lv <= -5) & (lv >= -25)  # the T20 range
        slope = np.polyfit(times[sel], lv[sel], 1)[0]
        assert -60 / slope == pytest.approx(rt60, rel=0.1)
        assert np.all(np.diff(lv) <= 1e-9)  # a backward integral never rises


def test_thin_series_keeps_peaks_and_bounds_length():
    values = [-30.0] * 5000
    values[1234] = -10.0
    out, dt = thin_series(values, 0.1)
    assert len(out) <= LOUDNESS_POINTS
    assert max(out) == -10.0
    assert dt == pytest.approx(0.1 * math.ceil(5000 / LOUDNESS_POINTS))
    same, dt2 = thin_series([-20.0, -21.0], 0.1)
    assert same == [-20.0, -21.0] and dt2 == 0.1


@pytest.fixture(scope="module")
def stem_51(tmp_path_factory):
    folder = tmp_path_factory.mktemp("plots")
    rng = np.random.default_rng(11)
    x = (0.05 * rng.standard_normal((6 * FS, 6))).astype(np.float32)
    write_audio(folder / "bells.wav", x, FS)
    return folder


def test_render_report_has_bounded_plot_section_with_room(stem_51):
    report = render(
        [stem_51 / "bells.wav"], stem_51 / "out.wav", RenderSettings(layout="5.1", room="small")
    )
    plots = report["plots"]
    loud = plots["loudness"]
    assert loud["target_lufs"] == -23.0
    # The delivery stage normalised to -23 LUFS: the short-term readings of steady noise
    # sit there (EBU R128; tolerance for the render's edges).
    inner = loud["short_term_lufs"][2:-10]
    assert_allclose(inner, -23.0, atol=0.6)
    assert len(loud["momentary_lufs"]) <= LOUDNESS_POINTS
    spectra = plots["spectra"]
    assert spectra["ears"] == ["left", "right"]
    assert len(spectra["levels_db"]) == 2
    assert len(spectra["levels_db"][0]) == len(spectra["centres_hz"]) == 31
    decay = plots["room_decay"]
    assert decay["speaker"] == "L"  # the first loudspeaker, as the room's RT60 report
    # The decay curves and the room section's T20 (measured by room_filters on the same
    # response) agree: the slope between -5 and -25 dB gives the same time.
    t20 = report["room"]["rt60_measured"]["t20_s"]
    times = np.array(decay["time_s"])
    for band, levels, want in zip(decay["bands_hz"], decay["levels_db"], t20):
        lv = np.array(levels)
        sel = (lv <= -5) & (lv >= -25)
        if want is None or sel.sum() < 3:
            continue
        slope = np.polyfit(times[sel], lv[sel], 1)[0]
        assert -60 / slope == pytest.approx(want, rel=0.15), band
    assert len(json.dumps(plots)) < 60_000


def test_render_without_delivery_meters_the_file_itself(stem_51):
    report = render(
        [stem_51 / "bells.wav"],
        stem_51 / "raw.wav",
        RenderSettings(layout="5.1", loudness=None, true_peak=None),
    )
    plots = report["plots"]
    assert report["delivery"] is None
    assert plots["room_decay"] is None
    assert plots["loudness"]["target_lufs"] is None
    assert plots["loudness"]["integrated_lufs"] is not None
    assert len(plots["loudness"]["short_term_lufs"]) > 10


def test_frames_outside_the_analysed_segments_never_count():
    # The report reads only what a strided spectrum analyses (SpectrumMeter.needs): the
    # rest fed as silence gives the same figures, bit for bit.
    rng = np.random.default_rng(6)
    x = 0.1 * rng.standard_normal((50 * FS, 2)).astype(np.float32)
    full = SpectrumMeter.for_length(FS, 2, len(x), max_segments=12)
    sparse = SpectrumMeter.for_length(FS, 2, len(x), max_segments=12)
    assert sparse.stride > 2
    skipped = 0
    for start in range(0, len(x), 20000):
        block = x[start : start + 20000]
        full.process(block)
        if sparse.needs(start, start + len(block)):
            sparse.process(block)
        else:
            sparse.process(np.zeros_like(block))
            skipped += 1
    assert skipped > len(x) // 20000 // 3
    assert sparse._segments == full._segments
    assert_array_equal(sparse.mean_square()[1], full.mean_square()[1])
    # needs() against the segments themselves: frames [a, b) meet an analysed segment.
    hop, span = full.nfft // 2, full.stride * full.nfft // 2
    starts = np.arange(0, len(x), span)
    for a, b in ((0, 1), (hop, hop + 1), (full.nfft, span), (span - 1, span), (span + 5, span + 9)):
        meets = bool(np.any((starts < b) & (starts + full.nfft > a)))
        assert full.needs(a, b) == meets, (a, b)
    assert not full.needs(10, 10)


@pytest.mark.parametrize(
    "settings",
    [
        {"subtype": "PCM_16"},  # dithered, and the limiter at work (-3 LUFS is loud)
        {"loudness": -3.0, "room": "small"},
        {"subtype": "FLOAT", "loudness": -14.0},
    ],
)
def test_spectrum_fed_while_delivering_equals_reading_the_file(stem_51, monkeypatch, settings):
    # The delivery stage feeds the report's spectrum the samples it writes
    # (OutputSpectrum); the figures are those of reading the delivered file again.
    import earfold.renderer.render.runner as runner

    kwargs = {"layout": "5.1", "loudness": -3.0}
    kwargs.update(settings)
    fed = render([stem_51 / "bells.wav"], stem_51 / "fed.wav", RenderSettings(**kwargs))
    monkeypatch.setattr(runner, "OutputSpectrum", lambda *args: None)  # read the file
    read = render([stem_51 / "bells.wav"], stem_51 / "read.wav", RenderSettings(**kwargs))
    assert fed["delivery"]["limiter"]["samples_limited"] > 0 or kwargs.get("subtype") == "FLOAT"
    assert fed["plots"]["spectra"] == read["plots"]["spectra"]
    assert fed["plots"]["loudness"] == read["plots"]["loudness"]


def test_output_spectrum_takes_codes_in_any_blocks_and_knows_its_length(tmp_path):
    rng = np.random.default_rng(12)
    codes = (rng.integers(-(2**23), 2**23, (300_000, 2)) << 8).astype(np.int32)

    def decode(block: np.ndarray) -> np.ndarray:
        return np.multiply(block, np.float32(2.0**-31), dtype=np.float32)

    # The reference: the report's own reading, 65536-frame blocks of the decoded file.
    samples = decode(codes)
    ref = SpectrumMeter.for_length(FS, 2, len(codes), max_segments=6)
    for start in range(0, len(samples), 65536):
        ref.process(samples[start : start + 65536])
    feed = OutputSpectrum(FS, 2, len(codes))
    feed.meter.stride = ref.stride  # the same sparse choice as the reference
    for start in range(0, len(codes), 7001):
        feed(codes[start : start + 7001], decode)
    meter = feed.finish()
    assert meter is not None and meter._segments == ref._segments
    assert_array_equal(meter.mean_square()[1], ref.mean_square()[1])
    short = OutputSpectrum(FS, 2, len(codes) + 1)
    short(codes, decode)
    assert short.finish() is None  # not the file's length: the report reads the file
