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


def test_a_stem_too_hot_for_the_engine_is_refused_without_naming_the_scratch_file(tmp_path):
    # Near the float32 maximum (3.4e38) the engine's float32 FFT overflows: a clear
    # error, not a render, and no message about the hidden scratch render.
    out = tmp_path / "out.wav"
    with (
        np.errstate(over="ignore", invalid="ignore"),
        pytest.raises(AudioError, match="too high for the engine") as caught,
    ):
        render([_hot_stem(tmp_path, 1e37, 1.0)], out, RenderSettings(layout="5.1"))
    assert ".render.wav" not in str(caught.value)
    assert not out.exists()
    assert [p.name for p in tmp_path.iterdir()] == ["hot.wav"]
