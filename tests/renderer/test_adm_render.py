"""ADM masters rendered to binaural: beds as loudspeakers, objects that rest or move, the
options that do not apply refused (hand-written masters after ITU-R BS.2076-2 and
BS.2088, built by adm_factory)."""

from __future__ import annotations

import numpy as np
import pytest
from adm_factory import (
    BED_51,
    audio_object,
    channel,
    chna_body,
    content,
    document,
    object_block,
    pack,
    programme,
    seconds,
    stream_and_track,
    uid,
    write_master,
)
from scipy import signal

from earfold.renderer.errors import RendererError
from earfold.renderer.io import read_audio, write_audio
from earfold.renderer.render import RenderSettings, plan_render, render

FS = 48000
FLAT = {"loudness": None, "true_peak": None, "subtype": "FLOAT"}


BED = BED_51


def _master(path, audio, blocks, *, bed=True, bed_span=(None, None)):
    """A master with (optionally) a 5.1 bed on tracks 1-6 (playing within ``bed_span``,
    start and duration strings) and one object on the next track, whose channel holds
    ``blocks`` (object_block strings)."""
    track = 7 if bed else 1
    entries = ([*BED] if bed else []) + [(track, uid(track), "AT_00031001_01", "AP_00031001")]
    objects = ["AO_1002"] + (["AO_1001"] if bed else [])
    parts = [
        programme("APR_1001", "Main", ["ACO_1001"]),
        content("ACO_1001", "All", objects),
        audio_object("AO_1002", "Voice", packs=["AP_00031001"], uids=[uid(track)]),
        pack("AP_00031001", "Objects", ["AC_00031001"]),
        channel("AC_00031001", "Objects", blocks),
        stream_and_track("AC_00031001", "AP_00031001"),
    ]
    if bed:
        parts.append(
            audio_object(
                "AO_1001",
                "Bed",
                packs=["AP_00010003"],
                uids=[e[1] for e in BED],
                start=bed_span[0],
                duration=bed_span[1],
            )
        )
    return write_master(path, audio=audio, chna=chna_body(entries), axml=document(*parts))


def _noise(seconds_: float, seed: int = 1) -> np.ndarray:
    return (0.1 * np.random.default_rng(seed).standard_normal(int(seconds_ * FS))).astype(
        np.float32
    )


def test_a_resting_object_renders_as_the_loudspeaker_at_its_position(tmp_path):
    # The check: an object at a loudspeaker's position renders like that
    # loudspeaker in a channel render (1e-4), here M+030 = L of a 5.1 bed.
    s = _noise(1.0)
    audio = np.zeros((len(s), 7), np.float32)
    audio[:, 6] = s
    master = _master(tmp_path / "m.wav", audio, [object_block("AC_00031001", 1, az=30.0, el=0.0)])
    stem = np.zeros((len(s), 6), np.float32)
    stem[:, 0] = s
    write_audio(tmp_path / "s.wav", stem, FS, subtype="FLOAT")
    report = render([str(master)], tmp_path / "a.wav", RenderSettings(**FLAT))
    render([str(tmp_path / "s.wav")], tmp_path / "b.wav", RenderSettings(layout="5.1", **FLAT))
    a, _ = read_audio(tmp_path / "a.wav")
    b, _ = read_audio(tmp_path / "b.wav")
    assert a.shape[0] >= b.shape[0]
    peak = np.abs(b).max()
    np.testing.assert_allclose(a[: len(b)], b, atol=1e-4 * peak)
    assert len(a) == len(b) or np.abs(a[len(b) :]).max() <= 1e-4 * peak
    assert report["adm"]["objects_rendered"][0]["object"] == "Voice"
    assert report["engine"]["objects"]["sources"] == 1


def test_the_bed_renders_as_a_channel_render_of_its_layout(tmp_path):
    bed = np.stack([_noise(0.5, seed) for seed in range(6)], axis=1)
    audio = np.concatenate([bed, np.zeros((len(bed), 1), np.float32)], axis=1)
    master = _master(tmp_path / "m.wav", audio, [object_block("AC_00031001", 1, az=0.0)])
    write_audio(tmp_path / "s.wav", bed, FS, subtype="FLOAT")
    render([str(master)], tmp_path / "a.wav", RenderSettings(**FLAT))
    render([str(tmp_path / "s.wav")], tmp_path / "b.wav", RenderSettings(layout="5.1", **FLAT))
    a, _ = read_audio(tmp_path / "a.wav")
    b, _ = read_audio(tmp_path / "b.wav")
    np.testing.assert_allclose(a[: len(b)], b, atol=1e-5 * np.abs(b).max())


def _itd_s(y: np.ndarray) -> float:
    """How much the left ear leads the right (s; positive: the source is on the left), by
    the peak of their cross-correlation below 1.5 kHz, where the time difference rules."""
    sos = signal.butter(4, 1500, fs=FS, output="sos")
    left, right = signal.sosfilt(sos, y[:, 0]), signal.sosfilt(sos, y[:, 1])
    lags = signal.correlation_lags(len(right), len(left))
    corr = signal.correlate(right, left)
    near = np.abs(lags) <= int(0.001 * FS)
    return float(lags[near][np.argmax(corr[near])] / FS)


def _ild_db(y: np.ndarray) -> float:
    return float(10 * np.log10(np.sum(y[:, 0] ** 2) / np.sum(y[:, 1] ** 2)))


def test_a_moving_object_is_heard_along_its_path_without_clicks(tmp_path):
    # Left (+90) to right (-90) over 2 s, one block interpolated across its duration
    # (BS.2076: jumpPosition absent).
    s = _noise(2.5, seed=4)
    lowpassed = signal.sosfilt(signal.butter(8, 12000, fs=FS, output="sos"), s).astype(np.float32)
    master = _master(
        tmp_path / "m.wav",
        lowpassed[:, None],
        [
            object_block("AC_00031001", 1, rtime=seconds(0), duration=seconds(0.25), az=90.0),
            object_block("AC_00031001", 2, rtime=seconds(0.25), duration=seconds(2.0), az=-90.0),
        ],
        bed=False,
    )
    render([str(master)], tmp_path / "a.wav", RenderSettings(**FLAT))
    y, _ = read_audio(tmp_path / "a.wav")
    quarter = FS // 4
    assert _ild_db(y[quarter // 2 : quarter]) > 6.0  # at the left
    assert abs(_ild_db(y[int(1.2 * FS) : int(1.30 * FS)])) < 4.0  # passing the front
    assert _ild_db(y[int(2.2 * FS) : int(2.3 * FS)]) < -6.0  # at the right
    # and the interaural time difference: the nearer ear leads by about Woodworth's
    # 0.66 ms at 90 degrees (r = 8.75 cm, c = 343 m/s), nothing in front
    assert 0.4e-3 < _itd_s(y[quarter // 2 : quarter]) < 0.9e-3
    assert abs(_itd_s(y[int(1.2 * FS) : int(1.30 * FS)])) < 0.15e-3
    assert -0.9e-3 < _itd_s(y[int(2.2 * FS) : int(2.3 * FS)]) < -0.4e-3
    # no clicks: energy above 16 kHz per 5 ms frame stays near its running median
    high = signal.sosfilt(signal.butter(8, 16000, btype="high", fs=FS, output="sos"), y[:, 0])
    frames = high[: len(high) // 240 * 240].reshape(-1, 240)
    db = 10 * np.log10(np.sum(frames**2, axis=1) + 1e-30)
    k = 21
    median = np.array([np.median(db[max(0, i - k) : i + k]) for i in range(len(db))])
    moving = slice(60, int(2.2 * FS) // 240)
    assert np.max(db[moving] - median[moving]) < 6.0


def test_options_that_do_not_apply_to_an_adm_master_are_refused(tmp_path):
    audio = np.zeros((FS // 10, 7), np.float32)
    master = str(_master(tmp_path / "m.wav", audio, [object_block("AC_00031001", 1, az=0.0)]))
    for settings, words in (
        (RenderSettings(layout="5.1"), "leave --layout out"),
        (RenderSettings(headphone_eq="flat.csv"), "headphone_eq"),
        (RenderSettings(solo="L"), "solo"),
        (RenderSettings(adm_programme="Elsewhere"), "Elsewhere"),
    ):
        with pytest.raises(RendererError, match=words):
            plan_render([master], settings)
    plan = plan_render([master], RenderSettings(adm_programme="Main"))
    assert plan.objects is not None and plan.objects.channels == (6,)
    plain = tmp_path / "plain.wav"
    write_audio(plain, audio[:, :2], FS)
    with pytest.raises(RendererError, match="ADM masters only"):
        plan_render([str(plain)], RenderSettings(layout="2.0", adm_programme="Main"))


def _channel_render(tmp_path, bed, **settings):
    write_audio(tmp_path / "s.wav", bed, FS, subtype="FLOAT")
    render([str(tmp_path / "s.wav")], tmp_path / "b.wav", RenderSettings(layout="5.1", **settings))
    return read_audio(tmp_path / "b.wav")[0]


def test_a_bed_in_a_room_renders_as_a_channel_render_in_that_room(tmp_path):
    # The bed's rows come from the same room build as a channel render's (the objects'
    # array added beside them at the same radius): the same filters and shared tail.
    bed = np.stack([_noise(0.5, seed) for seed in range(6)], axis=1)
    audio = np.concatenate([bed, np.zeros((len(bed), 1), np.float32)], axis=1)
    master = _master(tmp_path / "m.wav", audio, [object_block("AC_00031001", 1, az=0.0)])
    report = render([str(master)], tmp_path / "a.wav", RenderSettings(room="small", **FLAT))
    a = read_audio(tmp_path / "a.wav")[0]
    b = _channel_render(tmp_path, bed, room="small", **FLAT)
    # The array stands nearer than the beds where the room's floor is close (the
    # virtual_distance of scenes): the room's time zero is its nearest arrival, so the
    # whole bed arrives that much later, otherwise unchanged.
    lag = len(a) - len(b)
    assert 0 <= lag < 0.002 * FS
    # The room build's transform length follows its longest early response, so the walls'
    # filters are sampled on another grid: the difference stays 80 dB down (1e-4 of peak).
    diff = a[lag:] - b
    assert 10 * np.log10(_energy(diff) / _energy(b)) < -80.0
    np.testing.assert_allclose(a[lag:], b, atol=1e-4 * np.abs(b).max())
    assert np.abs(a[:lag]).max() <= 1e-4 * np.abs(b).max()
    assert "virtual array" in report["adm"]["objects_method"]
    assert report["room"]["virtual_array"].startswith("20 directions")
    assert report["plots"]["room_decay"]["speaker"] == "1:M+030"


def _energy(y: np.ndarray) -> float:
    return float(np.sum(np.asarray(y, dtype=np.float64) ** 2))


def test_an_object_in_a_room_sounds_as_a_loudspeaker_at_its_place_in_that_room(tmp_path):
    # An object at M+030 in the room against the 5.1 L loudspeaker in the same room. Its
    # direct sound is its own pair at the room's direct arrival, as the loudspeaker's is;
    # its reflections are a VBAP mix (Pulkki 1997, unit power) of the reflection array's.
    # The direct sound matches to 1e-3 of the peak; the whole to 1 dB (the reflections of
    # the array's directions are not those of the loudspeaker's place), from the left.
    s = _noise(1.0, seed=7)
    audio = np.zeros((len(s), 7), np.float32)
    audio[:, 6] = s
    master = _master(tmp_path / "m.wav", audio, [object_block("AC_00031001", 1, az=30.0)])
    report = render([str(master)], tmp_path / "a.wav", RenderSettings(room="small", **FLAT))
    a = read_audio(tmp_path / "a.wav")[0]
    stem = np.zeros((len(s), 6), np.float32)
    stem[:, 0] = s
    b = _channel_render(tmp_path, stem, room="small", **FLAT)
    lag = len(a) - len(b)  # the reflection array's nearest row sets the room's time zero
    assert 0 <= lag < 0.002 * FS
    level_db = 10 * np.log10(_energy(a[lag:]) / _energy(b))
    assert abs(level_db) < 1.0
    assert _ild_db(a) > 1.0 and _ild_db(b) > 1.0
    assert report["engine"]["objects"]["sources"] == 1
    # the reflection array's 20 directions and the room's tail channel
    assert report["engine"]["object_mixes"] == [{"sources": 1, "first": 0, "channels": 21}]
    entry = report["adm"]["objects_rendered"][0]
    assert entry["rendered"] == (
        "own HRIR pairs along its path; reflections from the room's virtual array"
    )
    # The reflection array reaches below KEMAR's lowest measurements (-40 degrees); its
    # rows carry no direct sound, so only the room's note speaks of it, not a warning.
    assert not [w for w in report["warnings"] if "no measurements" in w]
    assert any("does not cover" in n for n in report["notes"])


def test_the_rooms_rows_do_not_grow_with_the_number_of_objects(tmp_path):
    # In a room an object keeps its own direct sound (its HRIR pairs, at the room's direct
    # arrival) and takes its reflections from the 20 directions of the reflection array,
    # whatever the number of objects.
    audio = np.zeros((FS // 10, 7), np.float32)
    master = _master(tmp_path / "m.wav", audio, [object_block("AC_00031001", 1, az=0.0)])
    plan = plan_render([str(master)], RenderSettings(room="small"))
    objects = plan.objects
    assert objects is not None and objects.bus_filters is not None
    assert objects.bus_filters.shape[0] == 21 and objects.channels == (6,)
    (mix,) = objects.mixes
    assert mix.channels == (6,) and mix.first == 0 and not mix.diffuse and mix.tail
    assert plan.room is not None
    assert objects.moving_delay == round(plan.room["reference_arrival_samples"])
    assert plan.tail is not None and objects.bus_tail_weights is not None
    # the reflection rows feed no tail: the objects' tail channel does, as a loudspeaker
    assert np.all(objects.bus_tail_weights[:20] == 0) and objects.bus_tail_weights[20] > 0


def test_a_bed_plays_only_within_its_objects_time_span(tmp_path):
    # BS.2076-2 audioObject start and duration: the bed object from 0.25 s for 0.25 s.
    bed = np.stack([_noise(1.0, seed) for seed in range(6)], axis=1)
    audio = np.concatenate([bed, np.zeros((len(bed), 1), np.float32)], axis=1)
    master = _master(
        tmp_path / "m.wav",
        audio,
        [object_block("AC_00031001", 1, az=0.0)],
        bed_span=("00:00:00.25000", "00:00:00.25000"),
    )
    report = render([str(master)], tmp_path / "a.wav", RenderSettings(**FLAT))
    a = read_audio(tmp_path / "a.wav")[0]
    gated = np.zeros_like(bed)
    gated[FS // 4 : FS // 2] = bed[FS // 4 : FS // 2]
    b = _channel_render(tmp_path, gated, **FLAT)
    np.testing.assert_allclose(a[: len(b)], b, atol=1e-5 * np.abs(b).max())
    assert np.abs(a[: FS // 5]).max() < 1e-6 * np.abs(b).max()  # float32 FFT rounding
    assert report["adm"]["time_spans"][0] == {
        "track": 1,
        "start_frame": FS // 4,
        "end_frame": FS // 2,
    }
    assert not any("time spans" in w for w in report["warnings"])


def _hoa_master(path, audio):
    """A master holding one first-order HOA pack (the BS.2094 common AP_00040001: ACN
    order, SN3D) on tracks 1-4."""
    entries = [(k + 1, uid(k + 1), f"AT_0004000{k + 1}_01", "AP_00040001") for k in range(4)]
    parts = [
        programme("APR_1001", "Main", ["ACO_1001"]),
        content("ACO_1001", "Scene", ["AO_1001"]),
        audio_object("AO_1001", "Air", packs=["AP_00040001"], uids=[e[1] for e in entries]),
    ]
    return write_master(path, audio=audio, chna=chna_body(entries), axml=document(*parts))


def _plane_wave_foa(s: np.ndarray, azimuth_deg: float) -> np.ndarray:
    """First-order AmbiX (ACN, SN3D) of a plane wave on the horizon: W, Y, Z, X."""
    a = np.radians(azimuth_deg)
    return np.stack([s, np.sin(a) * s, 0 * s, np.cos(a) * s], axis=1).astype(np.float32)


def test_an_hoa_pack_renders_as_the_scene_it_is(tmp_path):
    # The pack's tracks are decoded as an Ambisonic scene of its order is; the master's one
    # calibration (the 5.0 reference) differs from a scene's own (W's loudness) by a
    # constant, so the two renders are proportional.
    foa = _plane_wave_foa(_noise(0.5, seed=3), 90.0)
    master = _hoa_master(tmp_path / "m.wav", foa)
    render([str(master)], tmp_path / "a.wav", RenderSettings(**FLAT))
    write_audio(tmp_path / "s.wav", foa, FS, subtype="FLOAT")
    render([str(tmp_path / "s.wav")], tmp_path / "b.wav", RenderSettings(layout="foa", **FLAT))
    a = read_audio(tmp_path / "a.wav")[0]
    b = read_audio(tmp_path / "b.wav")[0]
    ratio = float(np.sum(a * b) / np.sum(b * b))
    np.testing.assert_allclose(a[: len(b)], ratio * b, atol=1e-4 * np.abs(a).max())
    assert _ild_db(a) > 6.0  # from the left


def test_an_hoa_pack_in_a_room_stays_on_its_side(tmp_path):
    foa = _plane_wave_foa(_noise(0.5, seed=5), -90.0)
    master = _hoa_master(tmp_path / "m.wav", foa)
    report = render([str(master)], tmp_path / "a.wav", RenderSettings(room="medium", **FLAT))
    a = read_audio(tmp_path / "a.wav")[0]
    assert _ild_db(a[: FS // 2]) < -3.0  # from the right, reflections and tail beside it
    assert report["room"]["synthetic"] and report["room"]["virtual_array"] is None
    assert len(a) > 0.5 * FS + 0.3 * FS  # the room's tail rings on


def _coherence(y: np.ndarray, low: float = 1000.0, high: float = 8000.0) -> float:
    """Interaural coherence of a render, magnitude of the normalised cross-spectrum
    averaged over ``low`` to ``high`` Hz (Welch)."""
    f, c = signal.coherence(y[:, 0], y[:, 1], fs=FS, nperseg=1024)
    band = (f >= low) & (f <= high)
    return float(np.mean(c[band]))


def _object_render(tmp_path, name, extra, az=0.0, **settings):
    s = _noise(1.5, seed=11)
    master = _master(
        tmp_path / f"{name}.wav",
        s[:, None],
        [object_block("AC_00031001", 1, az=az, extra=extra)],
        bed=False,
    )
    report = render([str(master)], tmp_path / f"{name}.out.wav", RenderSettings(**FLAT, **settings))
    return read_audio(tmp_path / f"{name}.out.wav")[0], report


def test_an_objects_width_spreads_it_over_the_array(tmp_path):
    # BS.2076-2 width: the object spread over its extent (multiple-direction VBAP onto the
    # virtual array: one signal on many directions, so the ears stay coherent; it is the
    # directions that spread). An object at the left, 360 degrees wide, comes from all
    # around the horizon: the large level difference of a point at the left (the head's
    # shadow) is nearly gone, at about the same level (unit-power gains; the coherent
    # low-frequency sum of a phantom source adds at most a few dB).
    point, _ = _object_render(tmp_path, "point", "", az=90.0)
    narrow, _ = _object_render(tmp_path, "narrow", "<width>60</width>", az=90.0)
    wide, report = _object_render(tmp_path, "wide", "<width>360</width>", az=90.0)
    entry = report["adm"]["objects_rendered"][0]
    assert entry["rendered"] == "spread over the virtual array"
    assert entry["largest_extent_deg"] == [360.0, 0.0]
    assert report["engine"]["object_mixes"] == [{"sources": 1, "first": 0, "channels": 50}]
    assert not any("width" in w for w in report["warnings"])
    assert _ild_db(point) > 10.0
    assert _ild_db(point) > _ild_db(narrow) > _ild_db(wide)
    assert abs(_ild_db(wide)) < 3.0
    assert abs(10 * np.log10(_energy(wide) / _energy(point))) < 4.0


def test_an_objects_diffuse_share_is_decorrelated_at_the_same_level(tmp_path):
    # BS.2076-2 diffuse = 1: all of the object through the diffuse channel, a response with
    # the set's diffuse-field spectrum and coherence at the mean energy of its pairs: as loud
    # as the point (1.5 dB: a front pair is not the mean pair), its ears far less alike.
    point, _ = _object_render(tmp_path, "point", "")
    diffuse, report = _object_render(tmp_path, "diffuse", "<diffuse>1</diffuse>")
    assert report["engine"]["object_mixes"] == [{"sources": 1, "first": 0, "channels": 1}]
    assert report["adm"]["objects_rendered"][0]["largest_diffuse"] == 1.0
    assert abs(10 * np.log10(_energy(diffuse) / _energy(point))) < 1.5
    assert _coherence(diffuse) < 0.5 < _coherence(point)
    # half diffuse: the power split sqrt(1 - d), sqrt(d) keeps the level
    half, _ = _object_render(tmp_path, "half", "<diffuse>0.5</diffuse>")
    e_half, e_point, e_diffuse = _energy(half), _energy(point), _energy(diffuse)
    assert abs(10 * np.log10(e_half / (0.5 * e_point + 0.5 * e_diffuse))) < 0.5


def test_diffuse_and_wide_objects_in_a_room(tmp_path):
    wide, report = _object_render(
        tmp_path, "roomwide", "<width>90</width><diffuse>0.3</diffuse>", room="medium"
    )
    # the spread (50 directions through the HRIRs), then the reflections (20), the
    # diffuse share and the tail
    assert report["engine"]["object_mixes"] == [
        {"sources": 1, "first": 0, "channels": 50},
        {"sources": 1, "first": 50, "channels": 22},
    ]
    assert np.all(np.isfinite(wide)) and len(wide) > 1.5 * FS
    assert abs(_ild_db(wide)) < 1.5


def test_an_excerpt_of_a_master_renders_that_part_of_it(tmp_path):
    # Blind comparisons render excerpts: the objects' paths are read at the excerpt's own
    # times, so past the filters' reach its output is the whole render's at those times.
    s = _noise(2.5, seed=4)
    master = _master(
        tmp_path / "m.wav",
        s[:, None],
        [
            object_block("AC_00031001", 1, rtime=seconds(0), duration=seconds(0.25), az=90.0),
            object_block("AC_00031001", 2, rtime=seconds(0.25), duration=seconds(2.0), az=-90.0),
        ],
        bed=False,
    )
    render([str(master)], tmp_path / "whole.wav", RenderSettings(**FLAT))
    report = render(
        [str(master)], tmp_path / "part.wav", RenderSettings(excerpt=(1.0, 0.5), **FLAT)
    )
    whole = read_audio(tmp_path / "whole.wav")[0]
    part = read_audio(tmp_path / "part.wav")[0]
    # From the filters' reach on, up to the last update: there the excerpt's path ends and
    # holds (a resting direction gets its exact pair, not the moving grid's).
    settle, end = 4096, FS // 2 - 2 * 480
    np.testing.assert_allclose(
        part[settle:end], whole[FS + settle : FS + end], atol=1e-4 * np.abs(whole).max()
    )
    assert report["adm"]["objects_rendered"][0]["moves_s"][0] == 1.0  # in the file's time


def test_a_diffuse_share_longer_than_the_sets_pairs_is_rendered_whole(tmp_path):
    # The diffuse channel's response (20 ms) may outlast a set's short pairs: the output
    # holds all of it (input frames + the longest response - 1).
    s = _noise(0.3, seed=2)
    master = _master(
        tmp_path / "m.wav",
        s[:, None],
        [object_block("AC_00031001", 1, az=0.0, extra="<diffuse>1</diffuse>")],
        bed=False,
    )
    plan = plan_render([str(master)], RenderSettings(hrtf="rigid-sphere", eq="none"))
    assert plan.objects is not None and plan.objects.bus_filters is not None
    longest = plan.objects.bus_filters.shape[-1]
    assert plan.length >= longest
    render(
        [str(master)], tmp_path / "a.wav", RenderSettings(hrtf="rigid-sphere", eq="none", **FLAT)
    )
    y = read_audio(tmp_path / "a.wav")[0]
    assert len(y) == len(s) + plan.length - 1
    assert np.abs(y[len(s) : len(s) + longest // 2]).max() > 0  # the response rings on


def test_an_objects_summary_is_the_same_read_in_small_pieces(tmp_path, monkeypatch):
    # The plan reads a path in bounded pieces (its memory does not grow with the master's
    # length): pieces of 7 samples must give what one piece gives, breakpoints included.
    from earfold.renderer.objects import read_adm
    from earfold.renderer.render import adm_feeds

    blocks = [
        object_block("AC_00031001", 1, rtime=seconds(0), duration=seconds(0.3), az=90.0),
        object_block("AC_00031001", 2, rtime=seconds(0.3), duration=seconds(0.4), az=-30.0),
        object_block(
            "AC_00031001", 3, rtime=seconds(0.7), duration=seconds(0.3), az=10.0, jump="1"
        ),
        object_block("AC_00031001", 4, rtime=seconds(1.0), duration=seconds(0.5), az=10.0),
    ]
    master = _master(
        tmp_path / "m.wav", np.zeros((int(1.5 * FS), 1), np.float32), blocks, bed=False
    )
    (channel,) = read_adm(master).objects
    _, whole = adm_feeds.object_path(channel, int(1.5 * FS), FS)
    monkeypatch.setattr(adm_feeds, "SUMMARY_SAMPLES", 7)
    _, pieces = adm_feeds.object_path(channel, int(1.5 * FS), FS)
    assert pieces == whole
    assert whole.entry["moves_s"] == [0.3, 0.7]  # moving 0.3 to 0.7 s, then a jump to rest
    assert 3 < whole.entry["breakpoints"] < 60


@pytest.mark.parametrize("container", ["RF64", "BW64"])
@pytest.mark.parametrize("odd", [False, True])
def test_a_master_renders_the_same_in_every_container(tmp_path, container, odd):
    # EBU Tech 3306 RF64 and ITU-R BS.2088 BW64 hold the same audio as RIFF; an axml chunk
    # of odd length (padded, as RIFF chunks are) is allowed. The audio library of the
    # time (libsndfile 1.2.2) refuses BW64's id and loses RF64's data chunk after such a
    # chunk: the renderer reads them through a header of its own (io.Rf64View).
    s = _noise(0.3, seed=9)
    xml = document(
        programme("APR_1001", "Main", ["ACO_1001"]),
        content("ACO_1001", "All", ["AO_1002"]),
        audio_object("AO_1002", "Voice", packs=["AP_00031001"], uids=[uid(1)]),
        pack("AP_00031001", "Objects", ["AC_00031001"]),
        channel("AC_00031001", "Objects", [object_block("AC_00031001", 1, az=45.0)]),
        stream_and_track("AC_00031001", "AP_00031001"),
    )
    if (len(xml.encode()) % 2 == 1) != odd:
        xml += " "
    entries = [(1, uid(1), "AT_00031001_01", "AP_00031001")]
    outputs = []
    for name, box in (("riff", "RIFF"), ("wide", container)):
        master = write_master(
            tmp_path / f"{name}.wav",
            audio=s[:, None],
            chna=chna_body(entries),
            axml=xml,
            container=box,
        )
        render([str(master)], tmp_path / f"{name}.out.wav", RenderSettings(**FLAT))
        outputs.append(read_audio(tmp_path / f"{name}.out.wav")[0])
    assert len(xml.encode()) % 2 == odd
    np.testing.assert_array_equal(outputs[1], outputs[0])


def test_an_objects_blocks_are_turned_into_arrays_a_fixed_number_of_times(tmp_path, monkeypatch):
    # The engines ask for an object's path a few seconds at a time: each lookup must use
    # the block arrays made once (objects.BlockTable), not walk the blocks again, or a long
    # master with many blocks would cost its blocks times its seconds.
    from earfold.renderer.objects import BlockTable

    made = []
    real = BlockTable.of.__func__

    def counted(cls, channel):
        made.append(channel.object_name)
        return real(cls, channel)

    monkeypatch.setattr(BlockTable, "of", classmethod(counted))
    counts = []
    for seconds_ in (3.0, 12.0):
        blocks = [
            object_block(
                "AC_00031001",
                k + 1,
                rtime=seconds(0.5 * k),
                duration=seconds(0.5),
                az=float(90 - 15 * (k % 12)),
            )
            for k in range(int(seconds_ / 0.5))
        ]
        master = _master(
            tmp_path / f"m{seconds_}.wav",
            np.zeros((int(seconds_ * FS), 1), np.float32),
            blocks,
            bed=False,
        )
        made.clear()
        render([str(master)], tmp_path / "out.wav", RenderSettings(**FLAT))
        counts.append(len(made))
    assert counts[0] == counts[1] <= 3


def test_an_object_in_a_room_renders_alike_with_shared_and_exact_tails(tmp_path):
    # room_mode exact convolves every row's whole response instead of feeding one shared
    # tail: for an object (its reflections through the array, its tail through a row of
    # its own) both modes are the same sum, to float rounding.
    s = _noise(0.6, seed=12)
    master = _master(
        tmp_path / "m.wav",
        s[:, None],
        [object_block("AC_00031001", 1, az=-40.0, el=10.0, extra="<diffuse>0.3</diffuse>")],
        bed=False,
    )
    outs = []
    for mode in ("shared", "exact"):
        render(
            [str(master)],
            tmp_path / f"{mode}.wav",
            RenderSettings(room="small", room_mode=mode, **FLAT),
        )
        outs.append(read_audio(tmp_path / f"{mode}.wav")[0])
    shared, exact = outs
    n = min(len(shared), len(exact))
    np.testing.assert_allclose(exact[:n], shared[:n], atol=1e-4 * np.abs(shared).max())


def test_an_object_circling_past_the_back_stays_behind(tmp_path):
    # Azimuths are written within -180..180, so a circling object crosses from 170 to
    # -170 degrees: rendered, it moves 20 degrees across the back, never through the front
    # (the short way round, as crossfading the two positions' renderings would).
    from earfold.renderer.objects import read_adm
    from earfold.renderer.render import adm_feeds

    blocks = [
        object_block("AC_00031001", 1, rtime=seconds(0), duration=seconds(0.5), az=170.0),
        object_block("AC_00031001", 2, rtime=seconds(0.5), duration=seconds(1.0), az=-170.0),
    ]
    s = _noise(1.5, seed=13)
    master = _master(tmp_path / "m.wav", s[:, None], blocks, bed=False)
    (channel,) = read_adm(master).objects
    path, summary = adm_feeds.object_path(channel, len(s), FS)
    vectors, _ = path.at(np.arange(0, len(s), 480))
    assert np.all(vectors[:, 0] < -0.93)  # cos(160 degrees): behind all the way
    assert summary.entry["moves_s"] == [0.5, 1.5]
    report = render([str(master)], tmp_path / "a.wav", RenderSettings(**FLAT))
    y = read_audio(tmp_path / "a.wav")[0]
    # Behind, the ears hear it nearly alike; the numbers' way (170, 90, 0, -90, -170)
    # would pass the left and the right side, 10 dB and more louder at one ear.
    for start in range(FS // 2, int(1.5 * FS) - FS // 10, FS // 10):
        assert abs(_ild_db(y[start : start + FS // 10])) < 6.0
    assert report["adm"]["objects_rendered"][0]["first_direction_deg"] == [170.0, 0.0]
