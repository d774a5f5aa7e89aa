"""ADM masters rendered to binaural: beds as loudspeakers, objects that rest or move, the
options that do not apply refused (hand-written masters after ITU-R BS.2076-2 and
BS.2088, built by adm_factory)."""

from __future__ import annotations

import numpy as np
import pytest
from adm_factory import (
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
    write_master,
)
from scipy import signal

from earfold.renderer.errors import RendererError
from earfold.renderer.io import read_audio, write_audio
from earfold.renderer.render import RenderSettings, plan_render, render

FS = 48000
FLAT = {"loudness": None, "true_peak": None, "subtype": "FLOAT"}


def _uid(k: int) -> str:
    return f"ATU_{k:08X}"


BED = [(k, _uid(k), f"AT_0001000{k}_01", "AP_00010003") for k in range(1, 7)]


def _master(path, audio, blocks, *, bed=True):
    """A master with (optionally) a 5.1 bed on tracks 1-6 and one object on the next
    track, whose channel holds ``blocks`` (object_block strings)."""
    track = 7 if bed else 1
    entries = ([*BED] if bed else []) + [(track, _uid(track), "AT_00031001_01", "AP_00031001")]
    objects = ["AO_1002"] + (["AO_1001"] if bed else [])
    parts = [
        programme("APR_1001", "Main", ["ACO_1001"]),
        content("ACO_1001", "All", objects),
        audio_object("AO_1002", "Voice", packs=["AP_00031001"], uids=[_uid(track)]),
        pack("AP_00031001", "Objects", ["AC_00031001"]),
        channel("AC_00031001", "Objects", blocks),
        stream_and_track("AC_00031001", "AP_00031001"),
    ]
    if bed:
        parts.append(
            audio_object("AO_1001", "Bed", packs=["AP_00010003"], uids=[e[1] for e in BED])
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
        (RenderSettings(room="small"), "room"),
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
