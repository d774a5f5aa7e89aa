"""The free-field diffuse response (renderer/room/_diffuse_response.py): a short two-ear
noise with the HRIR set's diffuse-field spectrum and interaural coherence, at the loudness
of an average direct pair."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal
from scipy.spatial import SphericalVoronoi

from earfold.hrtf_sets import get_shipped
from earfold.renderer.errors import RoomError
from earfold.renderer.hrtf import load_hrir_set
from earfold.renderer.loudness import k_weighting_sos
from earfold.renderer.room import diffuse_field, diffuse_response, mean_pair_energy

RATE = 48000.0
OCTAVES = (125.0, 250.0, 500.0, 1000.0, 2000.0, 4000.0, 8000.0)


@pytest.fixture(scope="module")
def kemar():
    return load_hrir_set(get_shipped("mit-kemar").path, RATE)


@pytest.fixture(scope="module")
def solid_angles(kemar):
    """Each measured direction's share of the sphere (its Voronoi cell; capped at three
    times the median as the diffuse field's weights are, for the set's unmeasured cap
    below -40 degrees)."""
    area = SphericalVoronoi(kemar.directions, 1.0, threshold=1e-6).calculate_areas()
    area = np.minimum(area, 3.0 * np.median(area))
    return area / area.sum()


def _k_energy(ir):
    """Energy after the BS.1770-4 K-weighting (both ears), the filter's tail included:
    the loudness of white noise through ``ir``, up to a constant."""
    padded = np.concatenate([ir, np.zeros((*ir.shape[:-1], int(RATE) // 2))], axis=-1)
    return np.sum(scipy.signal.sosfilt(k_weighting_sos(RATE), padded, axis=-1) ** 2, (-2, -1))


def test_the_response_is_short_two_ears_float64_and_fixed_by_its_seed(kemar):
    h = diffuse_response(kemar, RATE, seed=3)
    assert h.shape == (2, 960) and h.dtype == np.float64  # 20 ms
    np.testing.assert_array_equal(h, diffuse_response(kemar, RATE, seed=3))
    assert not np.allclose(h, diffuse_response(kemar, RATE, seed=4))
    assert diffuse_response(kemar, RATE, seed=3, seconds=0.03).shape == (2, 1440)
    assert h[:, -1].max() < 0.05 * np.abs(h).max()  # faded out


def test_its_energy_is_the_mean_energy_of_the_sets_pairs(kemar, solid_angles):
    pair_energy = np.sum(kemar.ir.astype(np.float64) ** 2, axis=(1, 2))
    np.testing.assert_allclose(mean_pair_energy(kemar), solid_angles @ pair_energy, rtol=1e-9)
    for seed in range(3):
        h = diffuse_response(kemar, RATE, seed=seed)
        np.testing.assert_allclose(np.sum(h**2), mean_pair_energy(kemar), rtol=1e-12)


def test_a_diffuse_part_is_as_loud_as_a_direct_one(kemar, solid_angles):
    # ITU-R BS.1770-4: loudness is the K-weighted energy summed over channels. White noise
    # through the response against the same noise through the set's pairs, powers
    # averaged over the sphere: within 0.5 dB (measured: within 0.08 dB over 5 seeds).
    direct = solid_angles @ _k_energy(kemar.ir.astype(np.float64))
    for seed in range(5):
        diffuse = _k_energy(diffuse_response(kemar, RATE, seed=seed))
        assert abs(10.0 * np.log10(diffuse / direct)) < 0.5


def test_spectrum_and_coherence_follow_the_sets_diffuse_field(kemar):
    n = 960
    freqs = np.fft.rfftfreq(n, 1.0 / RATE)
    field = diffuse_field(kemar, freqs)
    cross, power = np.zeros(len(freqs)), np.zeros((2, len(freqs)))
    seeds = 16
    for seed in range(seeds):
        spectra = np.fft.rfft(diffuse_response(kemar, RATE, seed=seed), axis=-1)
        cross += (spectra[0] * np.conj(spectra[1])).real
        power += np.abs(spectra) ** 2
    for centre in OCTAVES:
        band = (freqs >= centre / np.sqrt(2)) & (freqs < centre * np.sqrt(2))
        # Each ear's share of its energy in the octave: the diffuse-field power's (within
        # 1.5 dB over 16 seeds: a 20 ms burst has only 2 to 5 bins below 500 Hz;
        # measured at most 0.8 dB).
        for ear in range(2):
            measured = power[ear, band].sum() / power[ear].sum()
            wanted = field.power[ear, band].sum() / field.power[ear].sum()
            assert abs(10.0 * np.log10(measured / wanted)) < 1.5, (centre, ear)
        # The ears' real coherence in the octave: the set's diffuse-field coherence
        # (ears mixed to it per bin, as the late tail is; common practice). Within 0.1
        # (measured 0.07) from 250 Hz up; at 125 Hz the burst's 50 Hz resolution blends
        # in the falling coherence above, so there only "coherent" is asked (0.81 for
        # 0.89).
        got = cross[band].sum() / np.sqrt(power[0, band].sum() * power[1, band].sum())
        weight = np.sqrt(field.power[0, band] * field.power[1, band])
        want = np.sum(field.coherence[band] * weight) / np.sqrt(
            field.power[0, band].sum() * field.power[1, band].sum()
        )
        if centre >= 250.0:
            assert abs(got - want) < 0.1, (centre, got, want)
        else:
            assert got > 0.7 and want > 0.7


def test_bad_requests_are_refused(kemar):
    with pytest.raises(RoomError, match="resample it first"):
        diffuse_response(kemar, 44100.0)
    with pytest.raises(RoomError, match="seconds must be from"):
        diffuse_response(kemar, RATE, seconds=1.0)
    with pytest.raises(RoomError, match="samplerate must be a positive"):
        diffuse_response(kemar, float("nan"))
