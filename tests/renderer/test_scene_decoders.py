"""Binaural scene decoders checked against the HRIR sets they come from.

References, as issue 17 names them: a plane wave encoded at ``d`` and decoded is compared
with the set's own HRIR pair at ``d`` (ITD by interaural cross-correlation below 1.5 kHz,
ILD in 1.5-6 kHz, spectral distortion 0.2-16 kHz); a diffuse scene's interaural coherence
is compared with the set's own diffuse-field coherence (computed by the room wing, as the
late tail's check does); its level with the set's own diffuse-field power. The published
MagLS result (Schoerkhuber, Zaunschirm, Hoeldrich, DAGA 2018): MagLS reproduces the
magnitudes above 2 kHz better than a linear decoder of the same order.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from earfold.hrtf_sets import get_shipped
from earfold.renderer.errors import SceneError
from earfold.renderer.geometry import direction_to_vector
from earfold.renderer.hrtf import cross_correlation_itd, load_hrir_set
from earfold.renderer.room import diffuse_field
from earfold.renderer.scenes import (
    decode_speaker_filters,
    encode,
    fold_matrix,
    max_re_weights,
    rotation_matrix,
    scene_decoder,
    speaker_gains,
    t_design,
    virtual_layout,
)
from earfold.renderer.scenes._covariance import covariance_mixing, decoder_covariance
from earfold.renderer.scenes._virtual import crossover_responses

FS = 48000
NFFT = 4096
FREQS = np.fft.rfftfreq(NFFT, 1 / FS)
AZIMUTHS = np.arange(-180.0, 180.0, 10.0)
HORIZONTAL = direction_to_vector(AZIMUTHS, np.zeros_like(AZIMUTHS))


@pytest.fixture(scope="module")
def sets():
    return {
        name: load_hrir_set(get_shipped(name).path, FS) for name in ("rigid-sphere", "mit-kemar")
    }


@pytest.fixture(scope="module")
def decoders(sets):
    cache: dict[tuple, object] = {}

    def get(name: str, order: int, method: str | None = None, **options):
        key = (name, order, method, tuple(sorted(options.items())))
        if key not in cache:
            cache[key] = scene_decoder(sets[name], order, method=method, **options)
        return cache[key]

    return get


def _decoded(decoder, direction) -> np.ndarray:
    return np.einsum("c,cet->et", encode(direction, decoder.order), decoder.filters)


def _plane_wave_errors(hset, decoder, directions):
    """Largest |ITD error| (ms), largest |ILD error| (dB) and mean spectral distortion (dB)
    0.2-16 kHz and 2-16 kHz over ``directions``."""
    ild_band = (FREQS >= 1500) & (FREQS <= 6000)
    bands = [(FREQS >= 200) & (FREQS <= 16000), (FREQS >= 2000) & (FREQS <= 16000)]
    weight = 1.0 / np.maximum(FREQS, 1.0)  # each octave counts the same
    itd, ild, sd = [], [], []
    for d in directions:
        ref, out = hset.pair(d).ir, _decoded(decoder, d)
        itd.append(cross_correlation_itd(out, FS) - cross_correlation_itd(ref, FS))
        r, o = np.fft.rfft(ref, NFFT), np.fft.rfft(out, NFFT)
        level = lambda x: 10 * np.log10(np.sum(np.abs(x[:, ild_band]) ** 2, axis=-1))  # noqa: E731
        ild.append(np.diff(level(o))[0] - np.diff(level(r))[0])
        err = 20 * np.log10((np.abs(o) + 1e-12) / (np.abs(r) + 1e-12))
        sd.append(
            [
                np.sqrt(np.sum(weight[b] * err[:, b] ** 2, axis=-1) / np.sum(weight[b])).mean()
                for b in bands
            ]
        )
    sd_mean = np.mean(sd, axis=0)
    return 1e3 * np.abs(itd).max(), np.abs(ild).max(), sd_mean[0], sd_mean[1]


def _measured_sample(hset, count=80):
    index = np.random.default_rng(1).choice(hset.measurements, count, replace=False)
    return hset.directions[index]


# -- plane waves against the set's own HRIRs --------------------------------------------


def test_order_three_keeps_itd_and_ild_on_the_horizontal_plane(sets, decoders):
    # Issue 17: ITD below 1.5 kHz within 0.1 ms, ILD 1.5-6 kHz within 3 dB, order 3,
    # horizontal plane; reference: the rigid-sphere set's own HRIRs (Duda and Martens 1998,
    # a = 8.75 cm, the head the order-to-frequency rule k a = N is written for).
    itd, ild, _, _ = _plane_wave_errors(
        sets["rigid-sphere"], decoders("rigid-sphere", 3), HORIZONTAL
    )
    assert itd <= 0.1 and ild <= 3.0, (itd, ild)
    # The measured KEMAR head is larger and has pinnae and a torso: at order 3 its ITD is
    # 0.13 ms short at +/-50-60 degrees (least squares alone does the same: order 3 is
    # not enough for a head of that size up to 1.5 kHz) and its ILD misses the
    # contralateral peak at +/-110 degrees by 4.9 dB. Order 5 meets the bounds.
    itd, ild, _, _ = _plane_wave_errors(sets["mit-kemar"], decoders("mit-kemar", 3), HORIZONTAL)
    assert itd <= 0.15 and ild <= 5.5, (itd, ild)
    itd, ild, _, _ = _plane_wave_errors(sets["mit-kemar"], decoders("mit-kemar", 5), HORIZONTAL)
    assert itd <= 0.1 and ild <= 3.0, (itd, ild)
    # The virtual decoder keeps the ITD too (its ILD is the reason MagLS exists).
    itd, _, _, _ = _plane_wave_errors(
        sets["rigid-sphere"], decoders("rigid-sphere", 3, "virtual"), HORIZONTAL
    )
    assert itd <= 0.1


@pytest.mark.parametrize("name", ["rigid-sphere", "mit-kemar"])
def test_spectral_distortion_falls_with_order(sets, decoders, name):
    # Issue 17: spectral distortion 0.2-16 kHz falls from order 1 to 3 to 5, for the
    # default decoders (virtual at first order, MagLS above) and for MagLS throughout.
    hset = sets[name]
    sample = _measured_sample(hset)
    for method in (None, "magls"):
        sd = [_plane_wave_errors(hset, decoders(name, n, method), sample)[2] for n in (1, 3, 5)]
        assert sd[0] > sd[1] > sd[2], (method, sd)


@pytest.mark.parametrize("name", ["rigid-sphere", "mit-kemar"])
def test_magls_beats_virtual_loudspeakers_above_2_khz_at_order_3(sets, decoders, name):
    # The published MagLS result (DAGA 2018): above 2 kHz the magnitude fit is closer to
    # the HRIRs than a linear decoder of the same order.
    hset = sets[name]
    sample = _measured_sample(hset)
    magls = _plane_wave_errors(hset, decoders(name, 3, "magls"), sample)[3]
    virtual = _plane_wave_errors(hset, decoders(name, 3, "virtual"), sample)[3]
    assert magls < virtual - 1.0, (magls, virtual)


# -- diffuse field ------------------------------------------------------------------------


def _octave(fc: float):
    return signal.butter(3, [fc / math.sqrt(2), fc * math.sqrt(2)], "bandpass", fs=FS, output="sos")


def _target_coherence(diffuse, fc: float) -> float:
    # The set's own coherence averaged over the octave, weighted by the ears' power (as
    # tests/renderer/test_late_tail.py does).
    _, h = signal.sosfreqz(_octave(fc), worN=diffuse.freqs, fs=FS)
    w = np.abs(h) ** 2
    pl, pr = diffuse.power
    return float(
        np.sum(w * np.sqrt(pl * pr) * diffuse.coherence)
        / math.sqrt(np.sum(w * pl) * np.sum(w * pr))
    )


def _decoder_coherence(decoder, fc: float) -> float:
    spectra = np.fft.rfft(decoder.filters, NFFT, axis=-1)
    cov = decoder_covariance(spectra, decoder.order)  # (F, 2, 2), SN3D diffuse field
    _, h = signal.sosfreqz(_octave(fc), worN=FREQS, fs=FS)
    w = np.abs(h) ** 2
    return float(
        np.sum(w * cov[:, 0, 1].real)
        / math.sqrt(np.sum(w * cov[:, 0, 0].real) * np.sum(w * cov[:, 1, 1].real))
    )


@pytest.mark.parametrize("name", ["rigid-sphere", "mit-kemar"])
def test_diffuse_scene_has_the_sets_own_interaural_coherence(sets, decoders, name):
    # Issue 17: within 0.15 of the set's diffuse-field coherence at 500 Hz and 2 kHz,
    # computed analytically from the decoder (SN3D diffuse covariance diag(1/(2n+1))).
    diffuse = diffuse_field(sets[name], FREQS)
    for order in range(1, 8):
        for method in ("magls", "virtual"):
            decoder = decoders(name, order, method)
            for fc in (500.0, 2000.0):
                got, want = _decoder_coherence(decoder, fc), _target_coherence(diffuse, fc)
                assert abs(got - want) <= 0.15, (order, method, fc, got, want)


def test_decoded_diffuse_noise_has_the_sets_coherence(sets, decoders):
    # The same check on audio: independent noise from the 124 points of a 15-design (a
    # diffuse field up to order 7), encoded at order 3, decoded by convolution, coherence
    # measured in octave bands as the late-tail test measures it.
    hset = sets["mit-kemar"]
    decoder = decoders("mit-kemar", 3)
    points = t_design(15)
    noise = np.random.default_rng(7).standard_normal((len(points), 4 * FS))
    scene = encode(points, 3).T @ noise  # (16, frames)
    ears = np.stack(
        [
            sum(signal.fftconvolve(scene[c], decoder.filters[c, e]) for c in range(16))
            for e in range(2)
        ]
    )
    diffuse = diffuse_field(hset, FREQS)
    for fc in (500.0, 2000.0):
        left, right = signal.sosfilt(_octave(fc), ears, axis=-1)
        got = float(np.sum(left * right) / math.sqrt(np.sum(left**2) * np.sum(right**2)))
        assert abs(got - _target_coherence(diffuse, fc)) <= 0.15, fc


@pytest.mark.parametrize("name", ["rigid-sphere", "mit-kemar"])
def test_diffuse_scene_keeps_its_level_from_order_1_to_7(sets, decoders, name):
    # Issue 17: no order sounds louder, within 1 dB; and the level is the set's own
    # diffuse-field power (what the HRIRs themselves give a diffuse field), 0.1-16 kHz.
    band = (FREQS >= 100) & (FREQS <= 16000)
    own = 10 * np.log10(np.sum(diffuse_field(sets[name], FREQS).power[:, band]))
    for method in ("magls", "virtual"):
        levels = []
        for order in range(1, 8):
            spectra = np.fft.rfft(decoders(name, order, method).filters, NFFT, axis=-1)
            cov = decoder_covariance(spectra, order)
            levels.append(10 * np.log10(np.sum(cov[band, 0, 0].real + cov[band, 1, 1].real)))
        assert max(levels) - min(levels) <= 1.0, (method, levels)
        assert_allclose(levels, own, atol=1.0)


# -- the decoder as a filter bank ------------------------------------------------------------


def test_decoder_shape_defaults_and_description(sets, decoders):
    first = decoders("rigid-sphere", 1)
    third = decoders("rigid-sphere", 3)
    assert first.method == "virtual" and third.method == "magls"
    assert third.filters.shape == (16, 2, 256) and third.filters.dtype == np.float64
    assert third.channels == 16 and third.samplerate == FS
    text = json.loads(json.dumps(first.description))
    assert text["method"] == "virtual" and text["order"] == 1 and text["input"] == "ACN, SN3D"
    assert len(text["directions"]) == len(virtual_layout(1)) == 10
    assert json.loads(json.dumps(third.description))["cutoff_hz"] == pytest.approx(1871.7, abs=0.1)
    kemar = decoders("mit-kemar", 3)
    assert kemar.filters.shape == (16, 2, 1024)  # 558 taps at 48 kHz -> 1024
    assert kemar.description["cut_energy_db"] < -20  # what the FIR length cut, reported


def test_rotation_and_normalisation_fold_into_the_filters(decoders):
    decoder = decoders("rigid-sphere", 3)
    front, left = direction_to_vector(0, 0), direction_to_vector(90, 0)
    turned = decoder.for_input(yaw=90.0)
    assert_allclose(
        np.einsum("c,cet->et", encode(front, 3), turned), _decoded(decoder, left), atol=1e-12
    )
    first = decoders("rigid-sphere", 1)
    y = encode(left, 1)
    fuma = np.array([y[0] / math.sqrt(2), y[3], y[1], y[2]])  # W X Y Z, W at -3 dB
    assert_allclose(
        np.einsum("c,cet->et", fuma, first.for_input("fuma")), _decoded(first, left), atol=1e-12
    )
    assert_allclose(fold_matrix(decoder.filters, rotation_matrix(3)), decoder.filters)
    with pytest.raises(SceneError, match="cannot feed 16 decoder channels"):
        fold_matrix(decoder.filters, np.eye(9))


def test_bad_requests_are_refused(sets):
    hset = sets["rigid-sphere"]
    with pytest.raises(SceneError, match=r"unknown Ambisonic decoder 'allrad'.*magls, virtual"):
        scene_decoder(hset, 3, method="allrad")
    for order in (0, 8):
        with pytest.raises(SceneError, match="order must be 1 to 7"):
            scene_decoder(hset, order)
    with pytest.raises(SceneError, match="64 to 65536 taps"):
        scene_decoder(hset, 2, taps=16)
    with pytest.raises(SceneError, match="FuMa is read for first order only"):
        scene_decoder(hset, 2).for_input("fuma")


def test_decoder_at_another_rate(sets):
    decoder = scene_decoder(sets["rigid-sphere"], 2, samplerate=44100, taps=300)
    assert decoder.samplerate == 44100 and decoder.filters.shape == (9, 2, 300)


# -- the pieces ------------------------------------------------------------------------------


def test_max_re_weights_match_the_published_approximation():
    # Zotter and Frank (Ambisonics, 2019; JAES 60(10) 2012): r_E ~ cos(137.9 deg /
    # (N + 1.51)), from memory; exact at first order: the largest root of P_2, 1/sqrt(3).
    assert max_re_weights(1)[1] == pytest.approx(1 / math.sqrt(3), abs=1e-12)
    for n in range(1, 8):
        exact = math.degrees(math.acos(max_re_weights(n)[1]))
        assert exact == pytest.approx(137.9 / (n + 1.51), abs=0.25), n


@pytest.mark.parametrize("order", [1, 4, 7])
def test_virtual_gains_keep_pressure_and_energy(order):
    # On a (2N + 1)-design the basic gains of a plane wave sum to 1 from any direction
    # (its pressure), and the max-rE gains have mean energy 1 over the sphere.
    points = virtual_layout(order)
    probe = np.random.default_rng(order).standard_normal((50, 3))
    basic = speaker_gains(points, order, "basic") @ encode(probe, order).T
    assert_allclose(basic.sum(axis=0), 1.0, atol=1e-10)
    energy = speaker_gains(points, order, "max-re") @ encode(t_design(15), order).T
    assert np.mean(np.sum(energy**2, axis=0)) == pytest.approx(1.0, abs=1e-10)


def test_crossover_bands_add_to_an_all_pass():
    low, high = crossover_responses(FREQS[1:], 1000.0, FS)
    assert_allclose(np.abs(low + high), 1.0, atol=1e-9)
    assert abs(low[np.argmin(np.abs(FREQS[1:] - 1000))]) == pytest.approx(0.5, abs=0.01)


def test_covariance_mixing_reaches_the_target():
    rng = np.random.default_rng(3)
    a = rng.standard_normal((5, 2, 3)) + 1j * rng.standard_normal((5, 2, 3))
    b = rng.standard_normal((5, 2, 3)) + 1j * rng.standard_normal((5, 2, 3))
    have, want = a @ np.conj(np.swapaxes(a, 1, 2)), b @ np.conj(np.swapaxes(b, 1, 2))
    m = covariance_mixing(have, want)
    assert_allclose(m @ have @ np.conj(np.swapaxes(m, 1, 2)), want, rtol=1e-6, atol=1e-9)
    # The closest mixing to the identity when nothing needs to change.
    assert_allclose(covariance_mixing(have, have), np.broadcast_to(np.eye(2), (5, 2, 2)), atol=1e-6)


def test_room_path_folds_speaker_filters_like_the_headphone_decoder(sets):
    # decode_speaker_filters (for a scene in a room) on the virtual loudspeakers' own HRIR
    # pairs is the plain virtual decoder.
    hset = sets["rigid-sphere"]
    points = virtual_layout(2)
    pairs = np.stack([hset.pair(p).ir for p in points])
    plain = scene_decoder(hset, 2, method="virtual", diffuse_constraint=False, taps=pairs.shape[-1])
    assert_allclose(decode_speaker_filters(pairs, points, 2, FS), plain.filters, atol=1e-12)
    with pytest.raises(SceneError, match="do not fit 20 directions"):
        decode_speaker_filters(pairs[:-1], points, 2, FS)


def test_magls_needs_as_many_directions_as_harmonics(sets):
    hset = sets["rigid-sphere"]
    few = hset.derived(ir=hset.ir[::40], directions=hset.directions[::40])  # 11 directions
    with pytest.raises(SceneError, match="has 11 directions; a MagLS decoder of order 3 fits 16"):
        scene_decoder(few, 3, method="magls")
    assert scene_decoder(few, 2, method="magls").filters.shape[0] == 9


# -- the shared SOFA corpus ------------------------------------------------------------------

MEASURED = ("MIT_KEMAR_large_pinna.sofa", "LISTEN_1002_IRC_1002_C_HRIR.sofa", "hrtf_c_nh898.sofa")


@pytest.mark.parametrize("filename", MEASURED)
def test_measured_sets_decode_with_their_own_diffuse_field(shared_sofa_dir, filename):
    # Any set: spectral distortion at its measured directions falls from order 1 to 3 to 5
    # (MagLS), and a diffuse scene has the set's own level (1 dB) and coherence (0.15).
    hset = load_hrir_set(shared_sofa_dir / "measured" / filename, FS)
    sample = _measured_sample(hset)
    diffuse = diffuse_field(hset, FREQS)
    band = (FREQS >= 100) & (FREQS <= 16000)
    own = 10 * np.log10(np.sum(diffuse.power[:, band]))
    sd = []
    for order in (1, 3, 5):
        decoder = scene_decoder(hset, order, method="magls")
        assert np.all(np.isfinite(decoder.filters))
        sd.append(_plane_wave_errors(hset, decoder, sample)[2])
        cov = decoder_covariance(np.fft.rfft(decoder.filters, NFFT, axis=-1), order)
        level = 10 * np.log10(np.sum(cov[band, 0, 0].real + cov[band, 1, 1].real))
        assert level == pytest.approx(own, abs=1.0)
        for fc in (500.0, 2000.0):
            assert abs(_decoder_coherence(decoder, fc) - _target_coherence(diffuse, fc)) <= 0.15
    assert sd[0] > sd[1] > sd[2], sd


def test_a_set_alike_in_every_direction_decodes_to_its_one_response(shared_sofa_dir):
    # Pulse.sofa holds the same impulse in all 1250 directions: a plane wave from anywhere
    # must decode to that impulse (only W carries anything), whatever the order or method.
    hset = load_hrir_set(shared_sofa_dir / "measured" / "Pulse.sofa", FS)
    probe = direction_to_vector([0.0, 75.0, -120.0], [0.0, 30.0, -60.0])
    for method in ("magls", "virtual"):
        decoder = scene_decoder(hset, 3, method=method)
        for d in probe:
            out = np.fft.rfft(_decoded(decoder, d), NFFT)
            ref = np.fft.rfft(hset.ir[0], NFFT)
            band = (FREQS >= 200) & (FREQS <= 16000)
            err = 20 * np.log10(np.abs(out[:, band]) / np.abs(ref[:, band]))
            # Measured: MagLS 0.22 dB at the front, 0.47 dB at -60 degrees (inside the grid's
            # unmeasured cap below -51 degrees, where the fit is regularised); virtual 0.
            assert np.abs(err).max() < 1.0, (method, np.abs(err).max())


def test_decoders_say_where_the_set_has_no_measurements(decoders):
    # KEMAR has nothing below -40 degrees elevation (hrtf_sets/MIT_KEMAR_normal_pinna.md).
    assert decoders("rigid-sphere", 5).warnings == ()
    assert decoders("rigid-sphere", 5, "virtual").warnings == ()
    (magls,) = decoders("mit-kemar", 5).warnings
    assert "no measurement within 49 degrees" in magls and "elevation -89" in magls
    (virtual,) = decoders("mit-kemar", 5, "virtual").warnings
    assert virtual.startswith("11 of 70 virtual loudspeakers lie where HRIR set")
    assert decoders("mit-kemar", 5).description["largest_gap_deg"] == pytest.approx(48.7, abs=0.1)
