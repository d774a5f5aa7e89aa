"""HRIR sets: direction lookup, interpolation, coverage fallback, resampling."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.signal.windows import tukey

from earfold.hrtf_sets import get_shipped
from earfold.renderer.errors import HrirError
from earfold.renderer.geometry import direction_to_vector, vector_to_direction
from earfold.renderer.hrtf import HrirSet, load_hrir_set


def _grid(step: float = 10.0, min_el: float = -90.0) -> tuple[np.ndarray, np.ndarray]:
    az, el = [], []
    for e in np.arange(min_el, 90.0 + 1e-9, step):
        if abs(e) == 90:
            az.append(0.0)
            el.append(e)
            continue
        n = max(int(round(360 / step * np.cos(np.radians(e)))), 1)
        for a in np.arange(n) * 360.0 / n:
            az.append(a)
            el.append(e)
    return np.array(az), np.array(el)


def _impulse_set(az: np.ndarray, el: np.ndarray, taps: int = 128) -> HrirSet:
    """Each HRIR is one band-limited impulse whose delay depends on the direction.

    The delay model is a plane wave over two ears 0.35 m apart at 48 kHz (large, so that
    neighbouring directions differ by whole samples and a naive average would split the
    impulse in two).
    """
    dirs = direction_to_vector(az, el)
    fs = 48000.0
    delays = 40 + np.stack([-dirs[:, 1], dirs[:, 1]], axis=1) * 0.175 / 343 * fs
    n = np.arange(taps)
    ir = np.sinc(n[None, None, :] - delays[:, :, None]) * tukey(taps, 0.2)
    return HrirSet(name="impulses", samplerate=fs, ir=ir, directions=dirs)


def test_measured_direction_is_used_as_is():
    az, el = _grid()
    hset = _impulse_set(az, el)
    pair = hset.pair(direction_to_vector(az[17], el[17]))
    assert pair.method == "measured"
    assert pair.neighbours == (17,)
    assert_allclose(pair.ir, hset.ir[17])


def test_interpolation_weights_are_barycentric():
    az, el = _grid()
    hset = _impulse_set(az, el)
    d = direction_to_vector(13.0, 4.0)
    pair = hset.pair(d)
    assert pair.method == "interpolated"
    assert len(pair.neighbours) == 3
    w = np.array(pair.weights)
    assert np.all(w >= 0)
    assert_allclose(w.sum(), 1.0)
    # The weighted vertices point back at the requested direction (barycentric property).
    v = hset.directions[list(pair.neighbours)].T @ w
    assert_allclose(v / np.linalg.norm(v), d, atol=1e-9)


def test_interpolation_picks_the_triangle_holding_the_direction_on_kemar():
    """Regression: two rings of the KEMAR grid with the same azimuths make trapezoids that
    the hull splits into two triangles on one plane; the lookup took the first of the two,
    which for about one direction in five did not hold it (a weight down to -0.99, clipped
    away). The weights must be barycentric on the triangle that holds the direction: none
    negative, and the weighted vertices pointing back at it."""
    kemar = load_hrir_set(get_shipped("mit-kemar").path)
    rng = np.random.default_rng(11)
    d = rng.standard_normal((400, 3))
    d /= np.linalg.norm(d, axis=1, keepdims=True)
    d = d[np.degrees(np.arcsin(d[:, 2])) > -39.0]  # the grid covers -40 degrees and up
    for direction in d:
        pair = kemar.pair(direction)
        if pair.method != "interpolated":
            continue
        w = np.array(pair.weights)
        v = kemar.directions[list(pair.neighbours)].T @ w
        assert_allclose(v / np.linalg.norm(v), direction, atol=1e-9)


def test_interpolation_aligns_onsets_so_impulses_do_not_split():
    """Two neighbours a few samples apart: a plain average would give two half-height
    impulses (a comb filter); onset alignment keeps one impulse at the weighted delay."""
    az, el = _grid()
    hset = _impulse_set(az, el)
    pair = hset.pair(direction_to_vector(65.0, 3.0))
    assert pair.method == "interpolated"
    peaks = np.max(np.abs(pair.ir), axis=-1)
    assert np.all(peaks > 0.9), peaks
    # The arrival is the weighted arrival of the neighbours (within a tenth of a sample).
    true = hset.ir[list(pair.neighbours)]
    onset_true = np.array(pair.weights) @ np.argmax(np.abs(true), axis=-1)
    assert np.all(np.abs(np.argmax(np.abs(pair.ir), axis=-1) - onset_true) <= 1)


def test_partial_sphere_falls_back_to_nearest_with_warning():
    az, el = _grid(min_el=-40.0)
    hset = _impulse_set(az, el)
    below = hset.pair(direction_to_vector(0.0, -80.0))
    assert below.method == "nearest"
    assert below.warning is not None and "nearest" in below.warning
    _, used_el = vector_to_direction(hset.directions[below.neighbours[0]])
    assert_allclose(used_el, -40.0)
    # Inside the measured region interpolation still works.
    assert hset.pair(direction_to_vector(33.0, 25.0)).method == "interpolated"


def test_horizontal_ring_interpolates_along_the_ring():
    az = np.arange(0.0, 360.0, 15.0)
    hset = _impulse_set(az, np.zeros_like(az))
    pair = hset.pair(direction_to_vector(20.0, 0.0))
    assert pair.method == "interpolated"
    assert_allclose(sorted(pair.weights), [1 / 3, 2 / 3], atol=1e-9)
    off = hset.pair(direction_to_vector(20.0, 30.0))
    assert off.method == "nearest" and off.warning


def test_bad_arrays_are_clear_errors():
    with pytest.raises(HrirError, match=r"shape \(M, 2, N\)"):
        HrirSet(name="x", samplerate=48000, ir=np.zeros((3, 3, 8)), directions=np.eye(3))
    with pytest.raises(HrirError, match="directions"):
        HrirSet(name="x", samplerate=48000, ir=np.zeros((3, 2, 8)), directions=np.eye(2))


def test_resampling_keeps_the_response_and_is_cached():
    kemar = get_shipped("mit-kemar").path
    a = load_hrir_set(kemar, 48000)
    b = load_hrir_set(kemar, 48000)
    assert a is b  # cached per (file, rate)
    native = load_hrir_set(kemar)
    assert native.samplerate == 44100
    assert a.samplerate == 48000
    assert a.taps == int(np.ceil(native.taps * 48000 / 44100))
    # Polyphase resampling (scipy.signal.resample_poly) keeps the in-band magnitude:
    # compare the front HRIR's spectra on a common frequency grid up to 16 kHz.
    f = np.linspace(200, 16000, 200)

    def mag(ir, fs):
        spec = np.fft.rfft(ir, n=8192)
        return np.interp(f, np.fft.rfftfreq(8192, 1 / fs), np.abs(spec))

    i = int(np.argmax(native.directions @ np.array([1.0, 0, 0])))
    db = 20 * np.log10(mag(a.ir[i, 0], 48000) / mag(native.ir[i, 0], 44100))
    assert np.max(np.abs(db)) < 0.5


def _spectral_distortion(est: np.ndarray, ref: np.ndarray, fs: float) -> float:
    """RMS over 0.2-16 kHz of the dB difference of magnitude spectra, mean of both ears
    (the usual spectral distortion measure for HRTF interpolation; common practice)."""
    n = 2048
    freqs = np.fft.rfftfreq(n, 1 / fs)
    band = (freqs >= 200) & (freqs <= 16000)
    e = np.abs(np.fft.rfft(est, n=n))[:, band]
    r = np.abs(np.fft.rfft(ref, n=n))[:, band]
    db = 20 * np.log10(np.maximum(e, 1e-12) / np.maximum(r, 1e-12))
    return float(np.mean(np.sqrt(np.mean(db**2, axis=-1))))


def test_leave_one_out_interpolation_beats_nearest_neighbour_on_kemar(record_property):
    """Leave-one-out on the MIT KEMAR set (Gardner and Martin, 1994): drop a measured
    direction, rebuild it from its neighbours, and compare with the measurement."""
    kemar = load_hrir_set(get_shipped("mit-kemar").path)
    az, el = vector_to_direction(kemar.directions)
    rng = np.random.default_rng(7)
    # Directions with measured neighbours all round (not the lowest ring, not the pole).
    candidates = np.nonzero((el > -35) & (el < 75))[0]
    picks = rng.choice(candidates, size=40, replace=False)
    sd_interp, sd_nearest = [], []
    for i in picks:
        reduced = kemar.without(int(i))
        d = kemar.directions[i]
        est = reduced.pair(d)
        assert est.method == "interpolated"
        sd_interp.append(_spectral_distortion(est.ir, kemar.ir[i], kemar.samplerate))
        sd_nearest.append(
            _spectral_distortion(reduced.nearest_pair(d).ir, kemar.ir[i], kemar.samplerate)
        )
    mean_i, mean_n = float(np.mean(sd_interp)), float(np.mean(sd_nearest))
    record_property("sd_interpolated_db", round(mean_i, 3))
    record_property("sd_nearest_db", round(mean_n, 3))
    print(
        f"\nKEMAR leave-one-out, 40 directions: spectral distortion 0.2-16 kHz "
        f"interpolated {mean_i:.2f} dB, nearest neighbour {mean_n:.2f} dB"
    )
    assert mean_i < mean_n


def test_derived_sets_keep_every_field_and_get_caches_of_their_own():
    # The resampled copy used to drop ``dropped``, the equalised copy the reader's
    # warnings: each copy listed the fields by hand.
    from earfold.renderer.eq import equalised

    base = load_hrir_set(get_shipped("rigid-sphere").path, 48000.0)
    odd = base.derived(dropped=3, warnings=("an odd set",))
    resampled = odd.resampled(44100.0)
    eq_set, _ = equalised(odd)
    for copy in (resampled, eq_set, odd.without(0)):
        assert copy.dropped == 3 and copy.warnings == ("an odd set",)
        assert (copy.name, copy.sha256, copy.room_type) == (base.name, base.sha256, base.room_type)
        assert copy._cache is not odd._cache
    assert resampled.samplerate == 44100.0 and odd.samplerate == 48000.0
