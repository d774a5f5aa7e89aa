"""Rigid-sphere head model (renderer/sphere.py)."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import special

from earfold.renderer.errors import HrirError
from earfold.renderer.geometry import direction_to_vector
from earfold.renderer.hrtf import (
    LEAD_SAMPLES,
    cross_correlation_itd,
    interaural_time_difference,
    onset_times,
    series_terms,
    sphere_grid,
    sphere_hrirs,
    sphere_transfer_function,
)

FS = 48000.0
A = 0.0875  # head radius, m (REFERENCES.md)
C = 343.0  # speed of sound, m/s (REFERENCES.md)


def db(x: np.ndarray) -> np.ndarray:
    return 20.0 * np.log10(np.abs(x))


def direct_series(freqs, incidence_deg, *, radius=A, distance=np.inf, c=C, terms=80):
    """Duda and Martens (1998) eqs. 1-2 evaluated term by term with scipy.special's
    spherical Bessel functions (h_m = j_m + i y_m, exp(-i omega t)), conjugated to the
    numpy.fft convention. Usable only where y_m does not overflow (moderate mu)."""
    mu = 2 * np.pi * np.asarray(freqs, float)[None, :] * radius / c
    x = np.cos(np.radians(np.asarray(incidence_deg, float)))[:, None]
    total = np.zeros((x.shape[0], mu.shape[1]), complex)
    for m in range(terms):
        dh = special.spherical_jn(m, mu, derivative=True) + 1j * special.spherical_yn(
            m, mu, derivative=True
        )
        p = special.eval_legendre(m, x)
        if np.isinf(distance):
            total += (-1j) ** (m - 1) * (2 * m + 1) * p / dh
        else:
            rho = distance / radius
            h = special.spherical_jn(m, mu * rho) + 1j * special.spherical_yn(m, mu * rho)
            total += (2 * m + 1) * p * h / dh
    if np.isinf(distance):
        out = total / mu**2
    else:
        out = -(rho / mu) * np.exp(-1j * mu * rho) * total
    return np.conj(out)


def horizontal(azimuths) -> np.ndarray:
    az = np.asarray(azimuths, dtype=float)
    return direction_to_vector(az, np.zeros_like(az))


# -- the transfer function ------------------------------------------------------------


@pytest.mark.parametrize("distance", [np.inf, 0.5, 0.25])
def test_series_matches_a_direct_evaluation_with_scipy_bessel_functions(distance):
    freqs = np.array([200.0, 1000.0, 3150.0, 8000.0, 12500.0])  # mu from 0.3 to 20
    angles = np.array([0.0, 35.0, 90.0, 140.0, 180.0])
    ours = sphere_transfer_function(freqs, angles, distance=distance)
    # Oracle: the same published series summed with scipy.special.spherical_jn/yn.
    assert_allclose(ours, direct_series(freqs, angles, distance=distance), rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize(
    ("freq", "ipsi_db", "contra_db"),
    [(500.0, 2.2, 0.4), (2000.0, 5.1, 1.2), (10000.0, 6.0, -0.8)],
)
def test_level_on_and_opposite_the_ear_axis(freq, ipsi_db, contra_db):
    # REFERENCES.md, Duda-Martens far field with a = 8.75 cm: values COMPUTED by the
    # project (not a published table), given to 0.1 dB; hence the 0.06 dB tolerance.
    level = db(sphere_transfer_function(freq, [0.0, 180.0]))
    assert_allclose(level, [ipsi_db, contra_db], atol=0.06)


def test_near_ear_level_rises_with_frequency():
    # Duda and Martens (1998), far-field curves (recalled): on the ear axis the response rises
    # monotonically from 0 dB towards +6 dB over this range.
    freqs = np.array([100.0, 300.0, 1000.0, 3000.0, 6000.0])
    level = db(sphere_transfer_function(freqs, 0.0))
    assert np.all(np.diff(level) > 0)
    # Our own series, cross-checked with the direct scipy evaluation above.
    assert_allclose(level, db(direct_series(freqs, [0.0]))[0], atol=1e-9)


def test_low_frequency_limit_is_unity():
    angles = np.linspace(0.0, 180.0, 13)
    # Duda and Martens (1998): far-field response -> 1 (0 dB, zero phase) as f -> 0,
    # the sphere being small against the wavelength.
    assert_allclose(sphere_transfer_function(0.0, angles), 1.0, atol=1e-15)
    assert_allclose(np.abs(sphere_transfer_function(1.0, angles)), 1.0, atol=1e-6)
    # REFERENCES.md: 0 dB at 50 Hz for all angles (COMPUTED, not published; to 0.1 dB).
    assert_allclose(db(sphere_transfer_function(50.0, angles)), 0.0, atol=0.05)


def test_low_frequency_phase_gives_kuhns_delay():
    # Kuhn, G. F. (1977), JASA 62(1), 157-167 (citation recalled): for ka << 1 each ear's
    # phase delay is -(3a / 2c) cos(incidence), i.e. an ITD of (3a/c) sin(theta)
    # (REFERENCES.md). In the numpy.fft convention a lead of tau is a phase of +omega tau.
    angles = np.linspace(0.0, 180.0, 7)
    f = 5.0
    phase = np.angle(sphere_transfer_function(f, angles))
    expected = 2 * np.pi * f * 1.5 * A / C * np.cos(np.radians(angles))
    assert_allclose(phase, expected, atol=1e-4 * expected.max())  # O(mu^3) terms left


def test_high_frequency_limit_on_the_ear_axis_is_pressure_doubling():
    # A rigid surface facing a plane wave doubles the pressure (+6.02 dB) once it is large
    # against the wavelength (geometrical acoustics; common practice).
    freqs = np.array([50.0, 100.0, 200.0]) * C / (2 * np.pi * A)  # mu = 50 .. 200
    assert_allclose(db(sphere_transfer_function(freqs, 0.0)), 20 * np.log10(2.0), atol=0.05)


@pytest.mark.parametrize("distance", [0.2, 0.5, 2.0])
def test_static_limit_at_finite_range_has_closed_form(distance):
    # f = 0 at range r, rho = r / a: sum_m (2m+1)/(m+1) P_m(cos th) rho^-m (limit of
    # Duda-Martens eq. 2). With P_m(1) = 1 and P_m(-1) = (-1)^m the sums are closed forms
    # (hand-derived): 2/(1-x) + ln(1-x)/x and 2/(1+x) - ln(1+x)/x, x = 1/rho.
    x = A / distance
    expected = [2 / (1 - x) + np.log(1 - x) / x, 2 / (1 + x) - np.log(1 + x) / x]
    at_zero = sphere_transfer_function(0.0, [0.0, 180.0], distance=distance)
    assert_allclose(at_zero, expected, rtol=1e-10)
    # ... and the series approaches it continuously.
    near_zero = sphere_transfer_function(0.01, [0.0, 180.0], distance=distance)
    assert_allclose(np.abs(near_zero), expected, rtol=1e-6)


def test_range_dependent_series_tends_to_the_far_field():
    # Duda and Martens (1998): eq. 2 -> eq. 1 as rho -> infinity; the difference falls
    # like a / r.
    freqs = np.array([50.0, 500.0, 2000.0, 10000.0])
    angles = np.array([0.0, 90.0, 180.0])
    far = sphere_transfer_function(freqs, angles)
    err_100 = np.abs(sphere_transfer_function(freqs, angles, distance=100.0) - far).max()
    err_1000 = np.abs(sphere_transfer_function(freqs, angles, distance=1000.0) - far).max()
    assert err_1000 < 2e-3
    assert_allclose(err_100 / err_1000, 10.0, rtol=0.1)


@pytest.mark.parametrize("distance", [np.inf, 0.15, 1.0])
def test_series_has_converged_with_the_default_term_count(distance):
    freqs = np.fft.rfftfreq(512, 1 / FS)[1:]  # up to 24 kHz, mu up to 38
    angles = np.array([0.0, 60.0, 120.0, 180.0])
    n = series_terms(2 * np.pi * freqs.max() * A / C, distance / A)
    default = sphere_transfer_function(freqs, angles, distance=distance)
    more = sphere_transfer_function(freqs, angles, distance=distance, terms=2 * n)
    assert_allclose(default, more, rtol=1e-9, atol=1e-12)


def test_output_shape_is_incidence_by_frequency():
    out = sphere_transfer_function(np.ones(5) * 1000.0, np.zeros((2, 3)))
    assert out.shape == (2, 3, 5)
    assert np.shape(sphere_transfer_function(1000.0, 30.0)) == ()


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"distance": 0.05}, r"source distance must be greater than the sphere radius 0.0875 m"),
        ({"radius": -1.0}, r"sphere radius must be a positive number of metres, got -1.0"),
        ({"c": 0.0}, r"speed of sound must be a positive number of m/s, got 0.0"),
    ],
)
def test_transfer_function_rejects_bad_geometry(kwargs, message):
    with pytest.raises(HrirError, match=message):
        sphere_transfer_function(1000.0, 0.0, **kwargs)


def test_transfer_function_rejects_negative_frequency():
    with pytest.raises(HrirError, match=r"frequencies must be finite and >= 0 Hz, got -5.0"):
        sphere_transfer_function([100.0, -5.0], 0.0)


# -- HRIRs ----------------------------------------------------------------------------


@pytest.fixture(scope="module")
def horizontal_irs() -> tuple[np.ndarray, np.ndarray]:
    az = np.array([15.0, 30.0, 45.0, 60.0, 75.0, 90.0])
    az = np.concatenate([az, -az])
    return az, sphere_hrirs(horizontal(az), FS)


def test_onset_itd_follows_woodworth(horizontal_irs):
    az, irs = horizontal_irs
    theta = np.radians(np.abs(az))
    # Woodworth's rigid-sphere formula (a/c)(theta + sin theta), a = 8.75 cm, c = 343 m/s
    # (REFERENCES.md); sign: positive when the left ear leads (source on the left).
    woodworth = np.sign(az) * A / C * (theta + np.sin(theta))
    itd = np.array([interaural_time_difference(pair, FS) for pair in irs])
    assert_allclose(itd, woodworth, rtol=0.10)


def test_low_frequency_itd_lies_between_woodworth_and_kuhn(horizontal_irs):
    az, irs = horizontal_irs
    left = az > 0
    theta = np.radians(az[left])
    itd = np.array([cross_correlation_itd(pair, FS) for pair in irs[left]])
    # Kuhn, G. F. (1977), JASA 62(1), 157-167 (citation recalled): a sphere's ITD grows
    # from Woodworth's high-frequency (a/c)(theta + sin theta) towards (3a/c) sin theta
    # as ka -> 0; the ITD of the pair low-passed below 1.5 kHz lies between the two
    # (REFERENCES.md).
    assert np.all(itd > A / C * (theta + np.sin(theta)))
    assert np.all(itd < 3 * A / C * np.sin(theta))


def test_source_on_the_left_reaches_the_left_ear_first():
    onsets = onset_times(sphere_hrirs(horizontal([90.0]), FS))[0]
    assert onsets[0] < onsets[1]


def test_left_right_mirror_swaps_the_ears():
    dirs = direction_to_vector(
        np.array([20.0, 75.0, 130.0, 180.0]), np.array([0.0, 30.0, -45.0, 10.0])
    )
    mirrored = dirs * np.array([1.0, -1.0, 1.0])
    irs = sphere_hrirs(dirs, FS)
    # Mirror symmetry of the sphere with ears at +/-90 degrees (geometry).
    assert_allclose(sphere_hrirs(mirrored, FS), irs[:, ::-1, :], atol=1e-12)


def test_front_back_mirror_is_identical_with_ears_on_the_axis():
    # Ears at +/-90 degrees lie on the y axis: x -> -x leaves every incidence angle, and so
    # every response, unchanged (geometry).
    dirs = direction_to_vector(np.array([20.0, 65.0, -40.0]), np.array([0.0, 20.0, -30.0]))
    back = dirs * np.array([-1.0, 1.0, 1.0])
    assert_allclose(sphere_hrirs(back, FS), sphere_hrirs(dirs, FS), atol=1e-12)


def test_hrir_spectrum_matches_the_series():
    az = np.array([0.0, 45.0, 90.0, 135.0, 180.0, -90.0])
    irs = sphere_hrirs(horizontal(az), FS)
    freqs = np.array([500.0, 2000.0, 10000.0])
    # Spectrum of the IR at those frequencies (direct DFT), against the series at the
    # same incidence angles: truncation, fade and taper cost < 0.05 dB below 19 kHz.
    n = np.arange(irs.shape[-1])
    spectrum = irs @ np.exp(-2j * np.pi * np.outer(n, freqs) / FS)
    incidence = np.abs(np.stack([90.0 - az, 90.0 + az], axis=-1))
    incidence = np.where(incidence > 180.0, 360.0 - incidence, incidence)
    assert_allclose(db(spectrum), db(sphere_transfer_function(freqs, incidence)), atol=0.05)


def test_every_onset_lies_after_the_lead_and_the_tail_dies_away():
    az, el = sphere_grid(30.0)
    irs = sphere_hrirs(direction_to_vector(az, el), FS)
    onsets = onset_times(irs)
    # Bulk delay rule: the earliest arrival is at LEAD_SAMPLES (24); the -20 dB onset
    # comes at most a few samples before it (the low-frequency part leads the peak).
    assert onsets.min() > 20.0
    assert onsets.min() < LEAD_SAMPLES
    peak = np.abs(irs).max(axis=-1, keepdims=True)
    assert np.all(np.abs(irs[..., -32:]) < 1e-5 * peak)  # below -100 dB before the fade


def test_sphere_hrirs_shape_and_dtype():
    irs = sphere_hrirs(horizontal([0.0, 30.0, 60.0]), 44100.0, taps=128)
    assert irs.shape == (3, 2, 128)
    assert irs.dtype == np.float64


@pytest.mark.parametrize(
    ("args", "kwargs", "message"),
    [
        ((np.ones((4, 2)), FS), {}, r"directions must have shape \(M, 3\), got \(4, 2\)"),
        ((np.zeros((1, 3)), FS), {}, "directions contain a zero vector"),
        ((np.ones((1, 3)), -1.0), {}, "sampling rate must be a positive number of Hz, got -1.0"),
        ((np.ones((1, 3)), FS), {"taps": 40}, "taps must be an integer >= 88, got 40"),
    ],
)
def test_sphere_hrirs_rejects_bad_input(args, kwargs, message):
    with pytest.raises(HrirError, match=message):
        sphere_hrirs(*args, **kwargs)


# -- the grid ---------------------------------------------------------------------------


def test_grid_covers_the_sphere_evenly():
    az, el = sphere_grid(10.0)
    assert np.sum(el == 90.0) == 1 and np.sum(el == -90.0) == 1
    assert np.sum(el == 0.0) == 36
    assert np.all((az > -180.0) & (az <= 180.0))
    vectors = direction_to_vector(az, el)
    # No duplicate directions, and the nearest neighbour of each is 6-14 degrees away.
    cos = np.clip(vectors @ vectors.T, -1, 1)
    np.fill_diagonal(cos, -1.0)
    nearest = np.degrees(np.arccos(cos.max(axis=1)))
    assert nearest.min() > 6.0 and nearest.max() < 14.0


def test_grid_rejects_spacing_that_does_not_divide_90():
    with pytest.raises(HrirError, match=r"grid spacing must divide 90 degrees .* got 7.0"):
        sphere_grid(7.0)
