"""Late tail: band split, decay (RT60 measured back), level, coherence, determinism."""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from earfold.hrtf_sets import get_shipped
from earfold.renderer.errors import RoomError
from earfold.renderer.geometry import direction_to_vector
from earfold.renderer.hrtf import HrirSet, load_hrir_set
from earfold.renderer.room import (
    BANDS_HZ,
    EAR_DISTANCE,
    ROOMS,
    SURFACES,
    TAIL_RANGE_DB,
    band_weights,
    diffuse_coherence,
    diffuse_field,
    late_tail,
    measure_rt60,
    room_from_dict,
    sphere_coherence,
    tail_length,
)

FS = 16000


def test_band_weights_sum_to_one_and_peak_at_their_centres():
    freqs = np.linspace(0.0, 24000.0, 20001)
    w = band_weights(freqs)
    assert w.shape == (7, freqs.size)
    assert np.all(w >= 0)
    assert_allclose(w.sum(axis=0), 1.0, atol=1e-12)
    at_centres = band_weights(np.array(BANDS_HZ))
    assert_allclose(at_centres, np.eye(7), atol=1e-12)


def test_same_seed_is_bit_identical_and_another_seed_differs():
    room = ROOMS["small"]
    a = late_tail(room, FS, 0.01, reference_distance=1.4, seed=5)
    b = late_tail(room, FS, 0.01, reference_distance=1.4, seed=5)
    c = late_tail(room, FS, 0.01, reference_distance=1.4, seed=6)
    assert np.array_equal(a, b)
    assert a.shape == c.shape and not np.allclose(a, c)


@pytest.mark.parametrize("name", sorted(ROOMS))
def test_rt60_measured_back_from_the_tail_matches_the_request(name):
    # ISO 3382-1: Schroeder backward integration, T30 fit from -5 to -35 dB; within 10 %
    # of the requested (Eyring) time in each octave band from 250 Hz to 4 kHz (the issue's
    # tolerance).
    room = ROOMS[name]
    tail = late_tail(room, FS, room.mixing_time, reference_distance=room.speaker_radius)
    measured = measure_rt60(tail, FS)
    for band in (250.0, 500.0, 1000.0, 2000.0, 4000.0):
        k = BANDS_HZ.index(band)
        assert measured["t30_s"][k] == pytest.approx(float(room.rt60[k]), rel=0.10), band


def test_tail_energy_is_the_statistical_reverberant_energy():
    # Statistical room acoustics (Kuttruff, Room Acoustics, ch. 5): the reverberant part of
    # the response holds 16 pi r^2 / R times the energy of a unit direct sound at r metres,
    # decaying as exp(-t / tau), tau = T / (6 ln 10), from emission. From t0 on:
    # 16 pi r^2 / R * exp(-t0 / tau). Uniform absorption, so every band agrees.
    room = room_from_dict({"dimensions": [8, 6, 3.5], "absorption": {s: 0.15 for s in SURFACES}})
    r, t0 = 2.0, 0.03
    tail = late_tail(room, FS, t0, reference_distance=r, crossfade_s=0.0)
    tau = float(room.rt60[0]) / (6 * math.log(10))
    expected = 16 * math.pi * r**2 / float(room.room_constant[0]) * math.exp(-t0 / tau)
    assert np.sum(tail[0] ** 2) == pytest.approx(expected, rel=0.05)


def _band_coherence(x: np.ndarray, band: float, fs: float) -> float:
    sos = signal.butter(
        3, [band / math.sqrt(2), band * math.sqrt(2)], btype="bandpass", fs=fs, output="sos"
    )
    left, right = signal.sosfilt(sos, x, axis=-1)
    return float(np.sum(left * right) / math.sqrt(np.sum(left**2) * np.sum(right**2)))


def _target_coherence(diffuse, band: float, fs: float) -> float:
    # The target curve averaged over the same octave filter, weighted by the ears' power.
    sos = signal.butter(
        3, [band / math.sqrt(2), band * math.sqrt(2)], btype="bandpass", fs=fs, output="sos"
    )
    f, h = signal.sosfreqz(sos, worN=diffuse.freqs, fs=fs)
    w = np.abs(h) ** 2
    pl, pr = diffuse.power
    return float(
        np.sum(w * np.sqrt(pl * pr) * diffuse.coherence)
        / math.sqrt(np.sum(w * pl) * np.sum(w * pr))
    )


def test_tail_has_the_diffuse_field_coherence_of_the_hrir_set():
    # Target: the diffuse-field coherence of the shipped rigid-sphere set (its own
    # cross-spectrum averaged over the sphere); the tolerance is 0.15.
    fs = 48000
    hset = load_hrir_set(get_shipped("rigid-sphere").path, fs)
    diffuse = diffuse_field(hset, np.fft.rfftfreq(8192, 1 / fs))
    room = ROOMS["medium"]
    tail = late_tail(room, fs, room.mixing_time, reference_distance=2.0, diffuse=diffuse)
    for band in (500.0, 2000.0):
        target = _target_coherence(diffuse, band, fs)
        assert abs(_band_coherence(tail, band, fs) - target) <= 0.15, band
    # And the curve itself behaves as a head's does: near 1 at low frequencies, near 0
    # once the wavelength is well below the head's size (common practice).
    c = diffuse_coherence(hset, np.array([100.0, 4000.0, 8000.0]))
    assert c[0] > 0.9 and abs(c[1]) < 0.2 and abs(c[2]) < 0.2


def _set(directions: np.ndarray, ir: np.ndarray) -> HrirSet:
    return HrirSet(name="test", samplerate=float(FS), ir=ir, directions=directions)


def test_identical_ears_are_fully_coherent():
    az = np.repeat(np.arange(0, 360, 30.0), 3)
    el = np.tile([-30.0, 0.0, 30.0], 12)
    rng = np.random.default_rng(1)
    ir = np.repeat(rng.standard_normal((az.size, 1, 32)), 2, axis=1)
    c = diffuse_coherence(_set(direction_to_vector(az, el), ir), np.array([100.0, 1000.0, 5000.0]))
    assert_allclose(c, 1.0, atol=1e-9)


def test_too_few_directions_fall_back_to_the_point_pair_model():
    # Two points d apart in a 3-D diffuse field: sin(kd) / (kd) (Cook et al. 1955, from
    # memory), computed here with numpy.sin rather than numpy.sinc.
    ir = np.zeros((2, 2, 16))
    ir[:, :, 0] = 1.0
    hset = _set(direction_to_vector(np.array([90.0, -90.0]), np.zeros(2)), ir)
    freqs = np.array([50.0, 300.0, 1000.0, 3000.0])
    kd = 2 * np.pi * freqs * EAR_DISTANCE / 343.0
    assert_allclose(diffuse_coherence(hset, freqs), np.sin(kd) / kd, atol=1e-12)
    assert_allclose(sphere_coherence(freqs), np.sin(kd) / kd, atol=1e-12)
    assert "sphere model" in diffuse_field(hset, freqs).method


def test_tail_length_reaches_the_range_of_the_slowest_band_and_respects_the_cap():
    room = ROOMS["large"]
    n = tail_length(room, FS)
    assert n == math.ceil(float(np.max(room.rt60)) * TAIL_RANGE_DB / 60.0 * FS)
    assert tail_length(room, FS, max_seconds=0.5) == int(0.5 * FS)
    assert late_tail(room, FS, 0.1, reference_distance=2.0, max_seconds=0.25).shape == (2, 4000)
    with pytest.raises(
        RoomError,
        match=r"max_seconds must be a positive number of seconds, "
        r"got -1",
    ):
        tail_length(room, FS, max_seconds=-1)


def test_tail_fades_in_and_out():
    tail = late_tail(ROOMS["small"], FS, 0.01, reference_distance=1.4, seed=2)
    assert np.all(np.abs(tail[:, 0]) < 0.05 * np.max(np.abs(tail)))
    assert np.all(np.abs(tail[:, -1]) < 1e-3 * np.max(np.abs(tail)))
