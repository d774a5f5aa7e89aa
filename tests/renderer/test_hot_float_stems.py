"""Float stems far above full scale: metered and delivered to the target, never silent."""

from __future__ import annotations

import numpy as np
import pytest

from earfold.renderer.errors import AudioError
from earfold.renderer.io import write_audio
from earfold.renderer.loudness import LoudnessMeter, measure_file
from earfold.renderer.render import RenderSettings, render

FS = 48000


def _hot_stem(tmp_path, sigma: float, seconds: float = 2.0):
    noise = np.random.default_rng(7).standard_normal((int(seconds * FS), 6)) * sigma
    path = tmp_path / "hot.wav"
    write_audio(path, noise.astype(np.float32), FS, subtype="FLOAT")
    return path


@pytest.mark.parametrize("sigma", [1e2, 1e10, 1e30])
def test_a_float_stem_far_above_full_scale_is_delivered_at_the_target(tmp_path, sigma):
    # Noise of sigma 100 is about +40 dBFS: its blocks used to fall off the top of the
    # gating histogram, the render was called silent and the limiter delivered -5.7 LUFS.
    out = tmp_path / "out.wav"
    report = render([_hot_stem(tmp_path, sigma)], out, RenderSettings(layout="5.1"))
    delivery = report["delivery"]
    assert delivery["render_integrated_lufs"] > 0.0
    measured = measure_file(out)  # the delivered file, measured again
    assert measured.integrated_lufs == pytest.approx(-23.0, abs=0.1)
    assert measured.true_peak_dbtp is not None and measured.true_peak_dbtp <= -1.0
    assert delivery["output"]["integrated_lufs"] == pytest.approx(-23.0, abs=0.1)


def test_the_meter_reads_blocks_far_above_its_first_histogram_bins():
    meter = LoudnessMeter(FS, 1)
    sine = np.sin(2 * np.pi * 1000 * np.arange(2 * FS) / FS)
    # A 1 kHz full-scale sine reads -3.01 LUFS (BS.1770-4); scaled by 1e30 (+600 dB).
    meter.process((1e30 * sine)[:, None])
    assert meter.result().integrated_lufs == pytest.approx(600.0 - 3.01, abs=0.02)


def test_the_meter_is_unchanged_for_normal_levels():
    x = 0.1 * np.random.default_rng(3).standard_normal((3 * FS, 2))
    a, b = LoudnessMeter(FS, 2), LoudnessMeter(FS, 2)
    a.process(x)
    b.process(1e6 * x)  # grows the histogram; the same audio 120 dB up
    ra, rb = a.result(), b.result()
    assert rb.integrated_lufs == pytest.approx(ra.integrated_lufs + 120.0, abs=0.01)
    assert rb.loudness_range_lu == pytest.approx(ra.loudness_range_lu, abs=0.011)


@pytest.mark.parametrize("sigma", [1e34, 3e37])
def test_a_stem_near_the_float32_maximum_is_rendered_scaled_and_delivered(tmp_path, sigma):
    # Above about 1e33 the engine's float32 FFT overflows; the render used to fail on
    # the hidden scratch file. It is rendered again 2**-64 down and delivered.
    out = tmp_path / "out.wav"
    report = render([_hot_stem(tmp_path, sigma, 1.0)], out, RenderSettings(layout="5.1"))
    measured = measure_file(out)
    assert measured.integrated_lufs == pytest.approx(-23.0, abs=0.1)
    assert measured.true_peak_dbtp <= -1.0
    delivery = report["delivery"]
    assert delivery["render_integrated_lufs"] > 660.0  # in the stem's own terms
    assert delivery["gain_db"] == pytest.approx(-23.0 - delivery["render_integrated_lufs"], 0.02)
    assert any("rendered 385.3 dB down" in w for w in report["warnings"])
    assert sorted(p.name for p in tmp_path.iterdir()) == ["hot.wav", "out.wav"]


def test_a_stem_too_hot_for_the_engine_without_delivery_is_refused_cleanly(tmp_path):
    # Without a delivery stage the output would keep any scale: a clear error, not a
    # message naming a scratch file, and nothing left behind.
    out = tmp_path / "out.wav"
    settings = RenderSettings(layout="5.1", loudness=None, true_peak=None, subtype="FLOAT")
    with pytest.raises(AudioError, match="too high for the engine") as caught:
        render([_hot_stem(tmp_path, 1e37, 1.0)], out, settings)
    assert ".render.wav" not in str(caught.value) and ".part" not in str(caught.value)
    assert [p.name for p in tmp_path.iterdir()] == ["hot.wav"]


def test_the_true_peak_of_a_stem_near_the_float32_maximum_is_read_not_lost():
    # Interpolated in float32, a sine at 3e38 overflowed: the true peak read as
    # digital silence. It must read the same as at full scale, plus the level.
    from earfold.renderer.loudness import true_peak

    t = np.arange(FS) / FS
    x = np.sin(2 * np.pi * (FS / 4) * t + np.pi / 4)[:, None]  # inter-sample peaks
    quiet = true_peak(x.astype(np.float32), FS)
    with np.errstate(over="raise", invalid="raise"):
        hot = true_peak((3e38 * x).astype(np.float32), FS)
    assert hot - 20 * np.log10(3e38) == pytest.approx(quiet, abs=1e-4)
    assert quiet > 20 * np.log10(np.sqrt(0.5)) + 2.5  # between the samples, above them
