"""Tests of the look-ahead true-peak limiter.

The ceiling is checked with an independent reading of the output: a fresh
:class:`earfold.renderer.loudness.TruePeakMeter` (BS.1770-4 Annex 2 method, 4x oversampling,
checked against EBU Tech 3341 in test_loudness.py) run on the float32 output. Hard
signals follow the issue's list: full-scale square waves, fs/4 sines at 45 degrees,
clipped noise, single impulses (also on the first and last frame), bursts after silence,
material 12 dB over the ceiling.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from earfold.renderer.errors import AudioError
from earfold.renderer.loudness import TARGET_MARGIN_DB, TruePeakLimiter, true_peak

FS = 48000


def limit(x: np.ndarray, rate: int = FS, sizes=None, seed: int = 0, **options):
    """Run a limiter over ``x`` in one block (or random sizes up to ``sizes``)."""
    lim = TruePeakLimiter(rate, x.shape[1], **options)
    if sizes is None:
        parts = [lim.process(x)]
    else:
        rng = np.random.default_rng(seed)
        parts, i = [], 0
        while i < len(x):
            n = int(rng.integers(1, sizes))
            parts.append(lim.process(x[i : i + n]))
            i += n
    parts.append(lim.flush())
    y = np.concatenate(parts)
    assert y.dtype == np.float32
    assert y.shape == x.shape  # exactly as long as the input
    return y, lim


def hard_signals(rate: int = FS) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(1)
    n = rate  # 1 s
    t = np.arange(n)
    stereo = np.ones((1, 2))
    impulses = np.zeros((n, 2))
    impulses[0, 0] = 1.0  # first frame: its look-ahead starts before the stream
    impulses[20000] = [1.0, -1.0]
    impulses[n - 1, 1] = -1.0  # last frame: its interpolation lies past the end
    burst = np.zeros((n, 2))
    burst[n // 2 :] = np.clip(rng.standard_normal((n - n // 2, 2)) * 2.0, -4.0, 4.0)
    return {
        "square 1 kHz full scale": np.sign(np.sin(2 * np.pi * 1000 * t / rate + 0.1))[:, None]
        * stereo,
        "square 997 Hz at +12 dB": 4.0
        * np.sign(np.sin(2 * np.pi * 997 * t / rate + 0.1))[:, None]
        * stereo,
        "fs/4 sine at 45 degrees, +3 dBTP": 1.41
        * np.sin(np.pi / 2 * t + np.pi / 4)[:, None]
        * stereo,
        "clipped noise": np.clip(rng.standard_normal((n, 2)) * 0.8, -1.0, 1.0),
        "single impulses": impulses,
        "burst after silence": burst,
        "noise 12 dB over the ceiling": rng.standard_normal((n, 2)) * 0.25 * 10 ** (12 / 20),
    }


SIGNALS = hard_signals()


@pytest.mark.parametrize("name", sorted(SIGNALS))
@pytest.mark.parametrize("ceiling", [-1.0, -0.1, -6.0])
def test_output_never_exceeds_the_ceiling(name, ceiling):
    x = SIGNALS[name].astype(np.float32)
    assert true_peak(x, FS) > ceiling  # the signal does need limiting
    y, lim = limit(x, ceiling_dbtp=ceiling)
    assert true_peak(y, FS) <= ceiling  # independent TruePeakMeter on the float32 output
    assert lim.max_gain_reduction_db > 0 and lim.samples_limited > 0


@pytest.mark.parametrize("rate", [44100, 96000, 192000])
def test_ceiling_holds_at_other_rates(rate):
    # 96 kHz oversamples 2x and 192 kHz not at all (BS.1770-4 Annex 2, from memory).
    for name, x in hard_signals(rate).items():
        y, _ = limit(x.astype(np.float32), rate=rate)
        assert true_peak(y, rate) <= -1.0, name


def test_streaming_in_random_blocks_is_bit_identical_to_one_block():
    for name in ("clipped noise", "burst after silence", "single impulses"):
        x = SIGNALS[name].astype(np.float32)
        whole, a = limit(x)
        parts, b = limit(x, sizes=3000, seed=4)
        assert_array_equal(parts, whole, err_msg=name)
        assert (a.samples_limited, a.max_gain_reduction_db) == (
            b.samples_limited,
            b.max_gain_reduction_db,
        )


def test_signals_below_the_ceiling_pass_bit_identically():
    rng = np.random.default_rng(8)
    x = (rng.standard_normal((3 * FS, 2)) * 0.05).astype(np.float32)  # about -14 dBTP
    y, lim = limit(x, sizes=20000)
    assert_array_equal(y, x)
    assert lim.samples_limited == 0 and lim.max_gain_reduction_db == 0.0


@pytest.mark.parametrize("scale", [0.05, 0.15])  # about -14 and -3 dBTP: under the target
def test_a_known_true_peak_under_the_target_bypasses_with_the_same_output(scale):
    rng = np.random.default_rng(9)
    x = (rng.standard_normal((2 * FS, 2)) * scale).astype(np.float32)
    known = 10 ** (true_peak(x, FS) / 20)
    full, lim_full = limit(x, sizes=30000)
    quick, lim_quick = limit(x, sizes=30000, known_true_peak=known)
    assert lim_quick.bypassed and not lim_full.bypassed
    assert_array_equal(quick, full)
    assert lim_quick.samples_limited == lim_full.samples_limited == 0
    # The full limiter measures what the bypass is told (float32 interpolation both).
    assert_allclose(lim_quick.input_true_peak, lim_full.input_true_peak, rtol=1e-6)
    assert_allclose(lim_quick.output_true_peak, lim_full.output_true_peak, rtol=1e-6)


def test_a_known_true_peak_over_the_target_changes_nothing():
    x = SIGNALS["noise 12 dB over the ceiling"].astype(np.float32)
    known = 10 ** (true_peak(x, FS) / 20)
    plain, lim_plain = limit(x, sizes=20000)
    told, lim_told = limit(x, sizes=20000, known_true_peak=known)
    assert not lim_told.bypassed
    assert_array_equal(told, plain)
    assert lim_told.samples_limited == lim_plain.samples_limited > 0
    assert lim_told.output_true_peak == lim_plain.output_true_peak
    # Just under the target but not by the bypass margin: the limiter works as usual.
    edge = TruePeakLimiter(FS, 2, known_true_peak=10 ** ((-1 - TARGET_MARGIN_DB) / 20))
    assert not edge.bypassed


@pytest.mark.parametrize("value", [-0.1, float("nan"), float("inf")])
def test_a_bad_known_true_peak_is_refused(value):
    with pytest.raises(AudioError, match="known_true_peak must be a finite level >= 0"):
        TruePeakLimiter(FS, 2, known_true_peak=value)


def offset_signal(rng: np.random.Generator) -> np.ndarray:
    """DC 0.5 plus a little noise (no frame near zero, so the gain can be read back as
    output / input), with a burst well over the ceiling in the middle."""
    n = FS
    x = 0.5 + 0.01 * rng.standard_normal((n, 2))
    x[20000:20480] += 1.2 * rng.standard_normal((480, 2))
    return x.astype(np.float32)


def test_counters_agree_with_the_gain_read_from_the_output():
    x = offset_signal(np.random.default_rng(6))
    y, lim = limit(x)
    gain = y.astype(np.float64) / x
    assert_allclose(gain[:, 0], gain[:, 1], rtol=1e-6)  # one gain for both channels
    limited = np.count_nonzero(np.any(y != x, axis=1))
    assert lim.samples_limited == limited
    assert_allclose(lim.max_gain_reduction_db, -20 * np.log10(gain.min()), atol=1e-4)


def test_an_isolated_peak_is_reduced_to_the_target_and_no_further():
    x = np.zeros((FS // 2, 2), dtype=np.float32)
    x[10000] = [1.0, 0.5]
    before = true_peak(x, FS)
    y, lim = limit(x, ceiling_dbtp=-3.0)
    target = -3.0 - TARGET_MARGIN_DB
    assert_allclose(lim.max_gain_reduction_db, before - target, atol=0.01)
    assert_allclose(true_peak(y, FS), target, atol=0.01)
    assert_allclose(y[10000, 1] / y[10000, 0], 0.5, rtol=1e-6)  # the image does not move


def test_gain_ramps_smoothly_and_recovers_completely():
    x = offset_signal(np.random.default_rng(12))
    y, lim = limit(x, lookahead_ms=5.0, release_ms=20.0)
    gain = (y.astype(np.float64) / x)[:, 0]
    depth = 1.0 - gain.min()
    frames = round(0.005 * FS)
    # The attack averages the held gain over the look-ahead, so it moves by at most
    # depth / look-ahead per frame (no step that would click); float32 rounding aside.
    assert np.max(np.abs(np.diff(gain))) <= depth / frames + 1e-6
    # The reduction starts at most one look-ahead (plus the 11-frame interpolation window
    # and hold) before the burst. With a 20 ms time constant a reduction of some 10 dB
    # decays below the 0.0001 dB where the release ends in 12 time constants (0.25 s):
    # the last 1000 frames (0.55 s on) are the input again, bit for bit.
    first = int(np.argmax(gain < 1.0))
    assert 20000 - 2 * frames - 30 <= first < 20000
    assert_array_equal(y[-1000:], x[-1000:])
    assert np.all(gain <= 1.0)


def test_process_returns_final_frames_and_flush_the_rest():
    lim = TruePeakLimiter(FS, 2)
    first = lim.process(np.zeros((100, 2), dtype=np.float32))
    assert first.shape == (0, 2)  # still inside the look-ahead
    rest = lim.flush()
    assert rest.shape == (100, 2)
    assert lim.flush().shape == (0, 2)
    with pytest.raises(AudioError, match="the limiter was flushed"):
        lim.process(np.zeros((1, 2), dtype=np.float32))


def test_mono_and_many_channels():
    rng = np.random.default_rng(3)
    for channels in (1, 6):
        x = (rng.standard_normal((FS // 2, channels)) * 0.6).astype(np.float32)
        y, _ = limit(x, sizes=5000)
        assert true_peak(y, FS) <= -1.0


@pytest.mark.parametrize(
    "options, message",
    [
        ({"ceiling_dbtp": 3.0}, r"ceiling_dbtp must be a number from -30 to 0 dBTP, not 3\.0"),
        ({"ceiling_dbtp": float("nan")}, r"ceiling_dbtp must be a number .*, not nan"),
        ({"lookahead_ms": 0.0}, r"lookahead_ms must be a number from 0\.5 to 50 ms"),
        ({"release_ms": "fast"}, r"release_ms must be a number from 1 to 5000 ms, not 'fast'"),
    ],
)
def test_bad_settings_are_refused(options, message):
    with pytest.raises(AudioError, match=message):
        TruePeakLimiter(FS, 2, **options)


def test_bad_blocks_are_refused():
    lim = TruePeakLimiter(FS, 2)
    with pytest.raises(AudioError, match=r"expected a block of shape \(frames, 2\), got \(4,\)"):
        lim.process(np.zeros(4, dtype=np.float32))
    with pytest.raises(AudioError, match="NaN or infinity"):
        lim.process(np.full((4, 2), np.inf, dtype=np.float32))


def stricter_check(x: np.ndarray, monkeypatch=None, normal_passes=None):
    """Limit with the check level set 0.18 dB under the gain's aim, so that the first
    pass leaves points over and the correction passes must act (white box: on real
    settings the first pass has always sufficed on the signals above)."""
    if normal_passes is not None:
        import earfold.renderer.loudness.limiter as limiter_module

        monkeypatch.setattr(limiter_module, "_NORMAL_PASSES", normal_passes)
    lim = TruePeakLimiter(FS, x.shape[1])
    lim._check = lim._target * 0.98
    y = np.concatenate([lim.process(x), lim.flush()])
    return y, lim


def test_correction_passes_bring_remaining_overs_under_the_check_level():
    x = SIGNALS["clipped noise"].astype(np.float32)
    y, lim = stricter_check(x)
    assert lim.corrections > 0
    assert true_peak(y, FS) <= 20 * np.log10(lim._check)
    assert np.all(np.any(y != 0, axis=1)[1:-1] | np.all(x[1:-1] == 0, axis=1))  # no muting


def test_last_resort_mutes_instead_of_letting_an_over_through(monkeypatch):
    x = SIGNALS["clipped noise"].astype(np.float32)
    y, lim = stricter_check(x, monkeypatch, normal_passes=0)
    assert lim.corrections > 0
    assert true_peak(y, FS) <= 20 * np.log10(lim._check)
    assert lim.max_gain_reduction_db == pytest.approx(300.0)  # a muted window, reported
