"""Room filters for the engine: timing, level, DRR, RT60, exact vs shared, determinism."""

from __future__ import annotations

import json
import math

import numpy as np
import pyroomacoustics as pra
import pytest
from numpy.testing import assert_allclose

from earfold.renderer.defaults import SPEED_OF_SOUND
from earfold.renderer.engine import convolve_reference
from earfold.renderer.errors import RoomError
from earfold.renderer.geometry import direction_to_vector
from earfold.renderer.hrtf import HrirSet, sphere_grid
from earfold.renderer.layouts import Layout, Speaker, get_layout
from earfold.renderer.room import (
    BANDS_HZ,
    ROOMS,
    SURFACES,
    build_room_filters,
    exact_brirs,
    measure_rt60,
    room_from_dict,
)
from earfold.renderer.signals import minimum_phase_spectrum

FS = 16000


def _omni_set(fs: float = FS) -> HrirSet:
    """A unit impulse for both ears in every direction: an omnidirectional point."""
    az, el = sphere_grid(30.0)
    ir = np.zeros((az.size, 2, 8))
    ir[:, :, 0] = 1.0
    return HrirSet(name="omni", samplerate=float(fs), ir=ir, directions=direction_to_vector(az, el))


def _uniform_room(alpha: float = 0.15, **extra: object):
    return room_from_dict(
        {"dimensions": [8.0, 6.0, 3.5], "absorption": {s: alpha for s in SURFACES}, **extra}
    )


def _one(distance: float | None = None) -> Layout:
    return Layout("one", (Speaker("C", 0.0, 0.0, distance),))


# -- measurement -----------------------------------------------------------------------


def test_measure_rt60_reads_a_known_exponential_decay():
    # Synthetic decay: white noise with an exponential envelope of RT60 = 0.8 s, which
    # every band then has. Schroeder/ISO 3382-1 T20 and T30 must read it back; within 5 %
    # (the Gaussian noise's own fluctuation). Cross-check against pyroomacoustics'
    # experimental.measure_rt60 (reference library; broadband, -5 to -35 dB).
    rng = np.random.default_rng(3)
    t60, fs = 0.8, 16000
    n = np.arange(int(1.2 * t60 * fs))
    # Eight independent realisations, whose energies measure_rt60 sums, so the noise's
    # own level wander averages out.
    ir = rng.standard_normal((8, n.size)) * 10.0 ** (-3.0 * n / (t60 * fs))
    m = measure_rt60(ir, fs)
    for k, band in enumerate(BANDS_HZ):
        if band <= 4000:
            assert m["t30_s"][k] == pytest.approx(t60, rel=0.05), band
            assert m["t20_s"][k] == pytest.approx(t60, rel=0.05), band
    assert m["t30_s"][BANDS_HZ.index(8000.0)] is None  # above 0.95 x Nyquist at 16 kHz
    theirs = pra.experimental.measure_rt60(ir[0], fs=fs, decay_db=30)
    assert theirs == pytest.approx(t60, rel=0.05)


def test_measure_rt60_says_none_when_the_decay_does_not_reach_the_range():
    # 1000 samples of steady noise: the Schroeder curve only falls by about
    # 10 log10(1000) = 30 dB at the very end, never to -35 dB, so T30 is not measurable.
    ir = np.random.default_rng(4).standard_normal(1000)
    m = measure_rt60(ir, FS)
    assert m["t30_s"][BANDS_HZ.index(1000.0)] is None
    with pytest.raises(RoomError, match=r"at least 8 samples, got shape \(3,\)"):
        measure_rt60(np.ones(3), FS)


# -- building --------------------------------------------------------------------------


def test_direct_sound_has_the_right_delay_and_level():
    # Two loudspeakers at 1 m and 2 m: the nearer arrives (2 - 1) / c earlier and twice as
    # loud (1/r, spherical spreading; the farther keeps unit gain).
    room = _uniform_room(order=0)
    layout = Layout("two", (Speaker("A", 0.0, 0.0, 1.0), Speaker("B", 90.0, 0.0, 2.0)))
    f = build_room_filters(_omni_set(), layout, room, FS, max_tail_seconds=0.1)
    arrival = [s["direct_arrival_samples"] for s in f.report["speakers"]]
    assert_allclose(arrival[1] - arrival[0], (2.0 - 1.0) / SPEED_OF_SOUND * FS, atol=1e-3)
    # Energies, not peaks: a band-limited impulse between samples has a lower sample peak.
    # Within 1 %: the fractional delay's sinc is cut LEAD_SAMPLES (16) before the arrival
    # of these test impulses, which start at their sample 0 (measured HRIRs start earlier
    # than their onset, so there the cut falls on near-silence).
    assert_allclose(np.sum(f.early[:, 0, : f.tail_offset] ** 2, axis=-1), [4.0, 1.0], rtol=0.01)
    assert f.report["reference_distance_m"] == 2.0


def test_drr_at_the_critical_distance_is_about_zero():
    # Schroeder (1996): at r_c = 0.057 sqrt(V / T) an omnidirectional source's direct and
    # reverberant energies are equal; within 3 dB (the tolerance). Omni "HRIRs",
    # broadband energies; reverberant = everything except the direct impulse.
    room = _uniform_room(0.15)
    r_c = 0.057 * math.sqrt(room.volume / float(room.rt60[BANDS_HZ.index(1000.0)]))
    f = build_room_filters(_omni_set(), _one(r_c), room, FS, order=3)
    h = exact_brirs(f)[0, 0]
    k = int(round(f.report["speakers"][0]["direct_arrival_samples"]))
    direct = np.sum(h[k - 16 : k + 17] ** 2)
    reverberant = np.sum(h**2) - direct
    drr = 10 * math.log10(direct / reverberant)
    assert abs(drr) <= 3.0
    assert f.report["speakers"][0]["drr_db"] == pytest.approx(drr, abs=0.5)


def test_rt60_measured_back_from_the_full_response():
    # The report's T30 is measured on the whole response (ISO 3382-1); within 10 % of the
    # requested time from 250 Hz to 4 kHz, as for the tail alone.
    room = ROOMS["medium"]
    f = build_room_filters(_omni_set(), get_layout("2.0"), room, FS, order=2)
    measured = f.report["rt60_measured"]["t30_s"]
    for band in (250.0, 500.0, 1000.0, 2000.0, 4000.0):
        k = BANDS_HZ.index(band)
        assert measured[k] == pytest.approx(float(room.rt60[k]), rel=0.10), band


def test_shared_tail_equals_exact_mode_through_convolve_reference():
    # Oracle: scipy's oaconvolve via convolve_reference. Rendering early per channel plus
    # the tail once from the weighted, delayed channel sum must equal rendering each
    # loudspeaker's whole response (exact_brirs).
    room = ROOMS["small"]
    layout = get_layout("5.1")
    f = build_room_filters(_omni_set(), layout, room, FS, max_tail_seconds=0.05)
    rng = np.random.default_rng(0)
    x = rng.standard_normal((2000, layout.channels))
    exact = convolve_reference(x, exact_brirs(f))
    mono = x @ f.tail_weights
    delayed = np.concatenate([np.zeros(f.tail_offset), mono])[:, None]
    shared_early = convolve_reference(x, f.early)
    shared_tail = convolve_reference(delayed, f.tail[None])
    n = exact.shape[0]
    shared = np.zeros((max(n, shared_early.shape[0], shared_tail.shape[0]), 2))
    shared[: shared_early.shape[0]] += shared_early
    shared[: shared_tail.shape[0]] += shared_tail
    assert_allclose(shared[:n], exact, atol=1e-10)
    assert np.all(shared[n:] == 0)


def test_lfe_rows_are_zero_and_do_not_feed_the_tail():
    layout = get_layout("5.1")
    f = build_room_filters(_omni_set(), layout, ROOMS["small"], FS, max_tail_seconds=0.05)
    lfe = layout.lfe_indices[0]
    assert not np.any(f.early[lfe])
    assert f.tail_weights[lfe] == 0.0
    assert_allclose(np.delete(f.tail_weights, lfe), 1.0)
    assert f.early.shape[:2] == (6, 2)


def test_same_seed_is_bit_identical_other_seed_differs():
    args = (_omni_set(), get_layout("2.0"), ROOMS["small"], FS)
    a = build_room_filters(*args, seed=1, max_tail_seconds=0.1)
    b = build_room_filters(*args, seed=1, max_tail_seconds=0.1)
    c = build_room_filters(*args, seed=2, max_tail_seconds=0.1)
    assert np.array_equal(a.early, b.early) and np.array_equal(a.tail, b.tail)
    assert np.array_equal(a.early, c.early)  # the early part is deterministic geometry
    assert not np.allclose(a.tail, c.tail)


def test_early_part_is_short_and_ends_after_the_crossfade():
    room = ROOMS["large"]
    f = build_room_filters(_omni_set(), get_layout("2.0"), room, FS, max_tail_seconds=0.1)
    fade = int(round(0.005 * FS))
    assert f.early.shape[-1] == f.tail_offset + fade
    # The tail starts one mixing time after the farthest direct sound.
    arrival = f.report["reference_arrival_samples"]
    assert f.tail_offset == pytest.approx(arrival + room.mixing_time * FS, abs=1.0)
    assert f.report["speakers"][0]["reflections"] > 0


def test_wall_filters_are_minimum_phase_with_the_requested_magnitude():
    # Homomorphic minimum phase (Oppenheim and Schafer): same magnitude, energy at the
    # start (a minimum-phase sequence has the fastest energy build-up of any sequence with
    # its magnitude; here almost all of it within the first 10 ms).
    nfft = 8192
    freqs = np.fft.rfftfreq(nfft, 1 / FS)
    magnitude = 0.3 + 0.6 / (1 + (freqs / 1000.0) ** 2)
    spectrum = minimum_phase_spectrum(magnitude, nfft)
    assert_allclose(np.abs(spectrum), magnitude, rtol=1e-9)
    h = np.fft.irfft(spectrum, n=nfft)
    assert np.sum(h[: int(0.01 * FS)] ** 2) > 0.999 * np.sum(h**2)


def test_reflections_carry_their_walls_band_gains():
    # A flat room whose walls and ceiling absorb everything (beta = 0), so the only
    # reflection of order 1 is the floor's. Its spectrum (order 1 minus order 0) at each
    # band centre is spreading x beta_floor(band): the wall filter's magnitude is the band
    # gain at the centre, as the band weights are 1 there.
    beta = np.array([1.0, 1.0, 0.9, 0.8, 0.7, 0.6, 0.5])
    absorption = {s: 1.0 for s in SURFACES}
    absorption["floor"] = (1.0 - beta**2).tolist()
    data = {"dimensions": [20.0, 20.0, 3.0], "absorption": absorption, "mixing_time_ms": 40}
    built = [
        build_room_filters(
            _omni_set(), _one(1.5), room_from_dict({**data, "order": n}), FS, max_tail_seconds=0.05
        )
        for n in (0, 1)
    ]
    reflection = built[1].early[0, 0] - built[0].early[0, 0]
    path = math.hypot(1.5, 2 * 1.2)  # to the floor and back up to the ears
    nfft = 1 << 16
    spectrum = np.abs(np.fft.rfft(reflection, n=nfft))
    freqs = np.fft.rfftfreq(nfft, 1 / FS)
    for k, band in enumerate(BANDS_HZ):
        if 250 <= band <= 4000:
            at = np.argmin(np.abs(freqs - band))
            assert spectrum[at] == pytest.approx(1.5 / path * beta[k], rel=0.03), band


def test_report_is_json_ready():
    f = build_room_filters(_omni_set(), get_layout("2.0"), ROOMS["small"], FS, max_tail_seconds=0.2)
    d = json.loads(json.dumps(f.report))
    for key in (
        "room",
        "tail_offset_samples",
        "early_length",
        "tail_length",
        "rt60_requested_s",
        "rt60_measured",
        "mixing_time_ms",
        "speakers",
        "bulk_delay_samples",
    ):
        assert key in d
    assert d["early_length"] == f.early.shape[-1] and d["tail_length"] == f.tail.shape[-1]


def test_hrir_set_at_another_rate_is_resampled():
    f = build_room_filters(_omni_set(32000), _one(), ROOMS["small"], FS, max_tail_seconds=0.05)
    assert f.samplerate == FS


@pytest.mark.parametrize(
    ("kwargs", "pattern"),
    [
        ({"order": 9}, r"image-source order 9 must be an integer from 0 to 6"),
        ({"seed": -3}, r"seed -3 must be a non-negative integer"),
        ({"crossfade_s": 1.0}, r"crossfade 1\.0 s must be 0 to 0\.1 s"),
    ],
)
def test_bad_arguments_are_rejected(kwargs, pattern):
    with pytest.raises(RoomError, match=pattern):
        build_room_filters(_omni_set(), _one(), ROOMS["small"], FS, **kwargs)


def test_loudspeaker_outside_the_room_is_rejected():
    with pytest.raises(
        RoomError,
        match=r"loudspeaker 'C' at 9 m from the listener would stand "
        r"at .* outside room 'small'",
    ):
        build_room_filters(_omni_set(), _one(9.0), ROOMS["small"], FS)
    with pytest.raises(RoomError, match=r"sampling rate 100 Hz is outside 8000\.\.384000 Hz"):
        build_room_filters(_omni_set(), _one(), ROOMS["small"], 100)


def test_paths_outside_the_grid_are_a_note_near_it_and_a_warning_far_from_it():
    # The same room, two sets: one measured down to -40 degrees of elevation (as the shipped
    # KEMAR set), one on the horizontal plane only. Floor reflections fall under both
    # grids; under the first they are a property of the set (a note, with the largest gap),
    # under the second tens of degrees from any measurement (a warning).
    def omni(elevations):
        az, el = sphere_grid(30.0)
        keep = np.isin(np.round(el), elevations)
        ir = np.zeros((int(keep.sum()), 2, 8))
        ir[:, :, 0] = 1.0
        dirs = direction_to_vector(az[keep], el[keep])
        return HrirSet(name="omni", samplerate=float(FS), ir=ir, directions=dirs)

    room = _uniform_room(order=2)
    az, el = sphere_grid(30.0)
    down_to_40 = [e for e in np.unique(np.round(el)) if e >= -40]
    near = build_room_filters(omni(down_to_40), _one(1.5), room, FS, max_tail_seconds=0.1)
    assert near.report["warnings"] == []
    assert any("early path(s) arrive from directions" in n for n in near.report["notes"])
    flat = build_room_filters(omni([0.0]), _one(1.5), room, FS, max_tail_seconds=0.1)
    assert any("early path(s) arrive from directions" in w for w in flat.report["warnings"])


def test_rows_without_their_direct_sound_hold_the_reflections_alone():
    # The image-source model's order 0 is the direct path alone (Allen and Berkley 1979):
    # a row built without its direct sound is the whole row less the order-0 build's.
    room = _uniform_room()
    layout = get_layout("5.0")
    whole = build_room_filters(_omni_set(), layout, room, FS, max_tail_seconds=0.1)
    apart = build_room_filters(
        _omni_set(), layout, room, FS, max_tail_seconds=0.1, without_direct=(0, 2)
    )
    direct = build_room_filters(_omni_set(), layout, room, FS, max_tail_seconds=0.1, order=0)
    assert_allclose(apart.early[[1, 3, 4]], whole.early[[1, 3, 4]], atol=1e-15)
    assert_allclose(apart.early[[0, 2]] + direct.early[[0, 2]], whole.early[[0, 2]], atol=1e-12)
    assert np.abs(direct.early[0]).max() > 0.1  # a direct sound was there to leave out
    assert_allclose(apart.tail, whole.tail)
    assert apart.report["speakers"] == whole.report["speakers"]  # DRR of the whole row
