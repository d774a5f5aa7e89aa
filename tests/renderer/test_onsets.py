"""Onset detection, ITD estimates and fractional delays (renderer/onsets.py)."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from earfold.renderer.errors import HrirError
from earfold.renderer.hrtf import (
    cross_correlation_itd,
    fractional_delay,
    interaural_time_difference,
    onset_times,
)

FS = 48000.0


def gaussian_pulse(position: float, sigma: float, n: int = 256, sign: float = 1.0) -> np.ndarray:
    """exp(-(t - position)^2 / (2 sigma^2)) sampled at t = 0 .. n-1.

    With sigma >= 2 samples the pulse is band-limited to rounding (its spectrum at
    Nyquist is exp(-pi^2 sigma^2 / 2) < 3e-9), so sampling it loses nothing.
    """
    t = np.arange(n)
    return sign * np.exp(-((t - position) ** 2) / (2.0 * sigma**2))


def gaussian_onset(position: float, sigma: float, threshold_db: float) -> float:
    """Where the pulse first reaches threshold_db of its peak (hand-derived):
    exp(-x^2 / (2 sigma^2)) = g  =>  x = sigma * sqrt(-2 ln g), before the peak."""
    g = 10.0 ** (threshold_db / 20.0)
    return position - sigma * np.sqrt(-2.0 * np.log(g))


# -- onset_times -----------------------------------------------------------------------


@pytest.mark.parametrize("position", [40.0, 40.25, 57.5, 81.83, 120.0 + 1.0 / 3.0])
@pytest.mark.parametrize("threshold_db", [-20.0, -6.0, -40.0])
def test_onset_of_gaussian_pulse_at_fractional_position(position, threshold_db):
    sigma = 2.5
    ir = gaussian_pulse(position, sigma)
    # Expected crossing from the closed form above (hand-derived), within 0.05 sample.
    expected = gaussian_onset(position, sigma, threshold_db)
    assert_allclose(onset_times(ir, threshold_db=threshold_db), expected, atol=0.05)


def test_onset_keeps_leading_shape_and_ignores_polarity():
    positions = np.array([[30.1, 44.7, 61.35], [33.9, 50.05, 72.6]])
    sigma = 3.0
    irs = np.stack(
        [
            np.stack([gaussian_pulse(p, sigma, sign=(-1.0) ** j) for j, p in enumerate(row)])
            for row in positions
        ]
    )
    assert irs.shape == (2, 3, 256)
    onsets = onset_times(irs)
    assert onsets.shape == (2, 3)
    # Closed-form crossing of each pulse (hand-derived), whatever its sign.
    assert_allclose(onsets, gaussian_onset(positions, sigma, -20.0), atol=0.05)


def test_onset_uses_the_band_limited_peak_not_the_sample_peak():
    # A pulse centred half-way between samples: its samples peak 2.7 % below the true
    # peak. Without oversampling the threshold (and so the onset) would be found on the
    # samples' peak; with it, on the continuous pulse's.
    sigma, position = 2.0, 60.5
    ir = gaussian_pulse(position, sigma)
    expected = gaussian_onset(position, sigma, -20.0)  # hand-derived closed form
    assert_allclose(onset_times(ir, oversample=16), expected, atol=0.02)
    assert abs(onset_times(ir, oversample=1) - expected) > abs(
        onset_times(ir, oversample=16) - expected
    )


def test_onset_is_zero_when_the_first_sample_is_loud():
    ir = np.zeros(64)
    ir[0] = 1.0
    ir[1:10] = 0.5
    assert_allclose(onset_times(ir, oversample=1), 0.0)


def test_onset_of_silent_ir_names_its_index():
    irs = np.stack([gaussian_pulse(40.0, 2.0), np.zeros(256)])
    with pytest.raises(HrirError, match=r"index \(1,\) is all zeros"):
        onset_times(irs)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"threshold_db": 3.0}, "onset threshold must be a negative number of dB, got 3.0"),
        ({"oversample": 0}, "oversample must be a positive integer, got 0"),
        ({"oversample": 2.5}, "oversample must be a positive integer, got 2.5"),
    ],
)
def test_onset_rejects_bad_arguments(kwargs, message):
    with pytest.raises(HrirError, match=message):
        onset_times(gaussian_pulse(40.0, 2.0), **kwargs)


# -- interaural time differences --------------------------------------------------------


def test_onset_itd_is_positive_when_left_ear_leads():
    left = gaussian_pulse(40.0, 2.5)
    right = gaussian_pulse(40.0 + 17.3, 2.5)
    # Same pulse shape at both ears: the onset difference equals the shift, 17.3 samples.
    tol = 0.05 / FS
    assert_allclose(interaural_time_difference(np.stack([left, right]), FS), 17.3 / FS, atol=tol)
    assert_allclose(interaural_time_difference(np.stack([right, left]), FS), -17.3 / FS, atol=tol)


def test_onset_itd_passes_threshold_to_onset_times():
    left = gaussian_pulse(40.0, 2.0)
    right = gaussian_pulse(60.0, 4.0)  # broader: its onset depends more on the threshold
    pair = np.stack([left, right])
    for db in (-10.0, -30.0):
        # Difference of the two closed-form crossings (hand-derived).
        expected = (gaussian_onset(60.0, 4.0, db) - gaussian_onset(40.0, 2.0, db)) / FS
        itd = interaural_time_difference(pair, FS, threshold_db=db)
        assert_allclose(itd, expected, atol=0.05 / FS)


@pytest.mark.parametrize("shift", [13.37, -21.6, 0.0])
def test_cross_correlation_itd_finds_a_known_delay(shift):
    # Broad pulses (sigma 6 samples: energy mostly below 1.5 kHz at 48 kHz) shifted
    # analytically, so the expected lag is exactly `shift` samples.
    left = gaussian_pulse(100.0, 6.0, n=512)
    right = gaussian_pulse(100.0 + shift, 6.0, n=512)
    assert_allclose(cross_correlation_itd(np.stack([left, right]), FS), shift / FS, atol=0.05 / FS)


def test_cross_correlation_itd_rejects_cutoff_above_nyquist():
    pair = np.stack([gaussian_pulse(40.0, 3.0), gaussian_pulse(45.0, 3.0)])
    with pytest.raises(HrirError, match=r"cut-off must lie between 0 and Nyquist \(24000.0 Hz\)"):
        cross_correlation_itd(pair, FS, cutoff=30000.0)


def test_itd_rejects_a_pair_of_the_wrong_shape():
    with pytest.raises(HrirError, match=r"shape \(2, N\), left ear first; got \(3, 16\)"):
        interaural_time_difference(np.ones((3, 16)), FS)


# -- fractional_delay -------------------------------------------------------------------


@pytest.mark.parametrize("delay", [0, 1, 7, 40])
def test_integer_delay_is_an_exact_shift(delay):
    rng = np.random.default_rng(1234)
    ir = rng.standard_normal((3, 2, 64))
    out = fractional_delay(ir, float(delay))
    # Oracle: slicing (a shift with zeros shifted in).
    expected = np.zeros_like(ir)
    expected[..., delay:] = ir[..., : 64 - delay]
    assert_allclose(out, expected, atol=1e-12)


@pytest.mark.parametrize("advance", [1, 5, 30])
def test_negative_integer_delay_advances(advance):
    rng = np.random.default_rng(99)
    ir = rng.standard_normal(48)
    out = fractional_delay(ir, -float(advance), length=60)
    # Oracle: slicing; the first `advance` samples are dropped, zeros follow the end.
    expected = np.zeros(60)
    expected[: 48 - advance] = ir[advance:]
    assert_allclose(out, expected, atol=1e-12)


def test_integer_delay_matches_np_roll_on_a_padded_signal():
    rng = np.random.default_rng(7)
    ir = np.concatenate([rng.standard_normal(20), np.zeros(44)])
    # Oracle: numpy.roll, which equals a shift while the rolled-out part is zeros.
    assert_allclose(fractional_delay(ir, 11.0), np.roll(ir, 11), atol=1e-12)


def test_per_ir_delays_broadcast_and_length_extends():
    rng = np.random.default_rng(3)
    ir = rng.standard_normal((4, 2, 32))
    delays = np.array([[0, 3], [5, 1], [2, 2], [8, 0]], dtype=float)
    out = fractional_delay(ir, delays, length=45)
    assert out.shape == (4, 2, 45)
    for idx in np.ndindex(4, 2):
        d = int(delays[idx])
        expected = np.zeros(45)
        expected[d : d + 32] = ir[idx]  # oracle: slicing
        assert_allclose(out[idx], expected, atol=1e-12)


@pytest.mark.parametrize("delay", [0.3, 0.5, -0.7, 2.25, 10.9])
def test_fractional_delay_of_an_impulse_is_a_sinc(delay):
    n = np.arange(256)
    impulse = np.zeros(256)
    impulse[100] = 1.0
    out = fractional_delay(impulse, delay)
    # Ideal band-limited delay of a unit impulse = sinc(n - 100 - d) (Shannon
    # interpolation; oracle numpy.sinc). The FFT makes it the periodic sinc of the padded
    # length (>= 4x the IR), which differs from sinc by less than 2e-4 here.
    assert_allclose(out, np.sinc(n - 100 - delay), atol=2e-4)


@pytest.mark.parametrize("delay", [0.37, 3.5, -2.8])
def test_fractional_delay_of_a_band_limited_pulse_is_exact(delay):
    # A Gaussian with sigma 3 samples is band-limited to rounding, so its ideal delay is
    # the same Gaussian moved by `delay` (closed form).
    out = fractional_delay(gaussian_pulse(80.0, 3.0), delay)
    assert_allclose(out, gaussian_pulse(80.0 + delay, 3.0), atol=1e-9)


def test_delay_and_advance_round_trip():
    ir = gaussian_pulse(70.0, 2.5) - 0.5 * gaussian_pulse(85.0, 4.0)
    there = fractional_delay(ir, 4.63, length=300)
    back = fractional_delay(there, -4.63, length=256)
    assert_allclose(back, ir, atol=1e-9)


def test_fractional_delay_rejects_shapes_that_do_not_broadcast():
    with pytest.raises(HrirError, match=r"delay shape \(3,\) does not broadcast .* \(2,\)"):
        fractional_delay(np.ones((2, 16)), np.zeros(3))


def test_fractional_delay_rejects_non_finite_delay():
    with pytest.raises(HrirError, match="delays must be finite numbers of samples, got nan"):
        fractional_delay(np.ones(16), float("nan"))
