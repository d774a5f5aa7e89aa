"""What an upload and a page learn of an ADM master: the short summary (probe_adm) and each
object's path sampled for drawing (object_paths), checked against object_positions (the
BS.2076-2 interpolation, tested on its own in test_adm_positions.py) and hand-computed
directions. Masters are hand-written after ITU-R BS.2076-2 and BS.2088 by adm_factory."""

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
    write_master,
)
from numpy.testing import assert_allclose

from earfold.renderer.errors import AdmError
from earfold.renderer.io import write_audio
from earfold.renderer.objects import (
    PATH_POINTS,
    adm_overview,
    direction_vectors,
    object_paths,
    object_positions,
    probe_adm,
    read_adm,
)

RATE = 1000  # a low rate keeps a 9 s master small; times are what is checked


def _objects(path, blocks_of, *, names=("Gull", "Buoy"), audio_seconds=9.0, programmes=1):
    """A master of one object per name (tracks 1, 2, ...), ``blocks_of(k, channel_id)``
    giving each one's blocks; ``programmes`` programmes, the k-th playing objects 0..k."""
    ids = [f"AO_{0x1001 + k:04X}" for k in range(len(names))]
    elements = []
    for p in range(programmes):
        code = f"{0x1001 + p:04X}"
        elements.append(programme(f"APR_{code}", f"Mix {p + 1}", [f"ACO_{code}"]))
        elements.append(content(f"ACO_{code}", f"C{p}", ids[: len(ids) - p]))
    entries = []
    for k, (object_id, name) in enumerate(zip(ids, names)):
        code = f"0003{0x1001 + k:04X}"
        uid = f"ATU_{k + 1:08X}"
        entries.append((k + 1, uid, f"AT_{code}_01", f"AP_{code}"))
        elements += [
            audio_object(object_id, name, packs=[f"AP_{code}"], uids=[uid]),
            pack(f"AP_{code}", "Objects", [f"AC_{code}"]),
            channel(f"AC_{code}", "Objects", blocks_of(k, f"AC_{code}")),
            stream_and_track(f"AC_{code}", f"AP_{code}"),
        ]
    audio = np.zeros((int(audio_seconds * RATE), len(names)), np.float32)
    return write_master(
        path, audio=audio, rate=RATE, chna=chna_body(entries), axml=document(*elements)
    )


def _moving_then_resting(k, ch):
    if k == 0:  # left to right over 2 s from 1 s, a jump back to the front at 5 s
        return [
            object_block(ch, 1, rtime=seconds(0), duration=seconds(1), az=90.0, el=0.0),
            object_block(ch, 2, rtime=seconds(1), duration=seconds(2), az=-90.0, el=30.0),
            object_block(ch, 3, rtime=seconds(3), duration=seconds(2), az=-90.0, el=30.0),
            object_block(ch, 4, rtime=seconds(5), duration=seconds(4), az=0.0, el=0.0, jump="1"),
        ]
    return [object_block(ch, 1, xyz=(-1.0, 0.0, 0.0))]  # cartesian: X = -1 is the left


def test_each_sample_of_a_path_is_the_interpolated_position(tmp_path):
    master = read_adm(_objects(tmp_path / "m.wav", _moving_then_resting))
    gull, buoy = object_paths(master, points=181)
    (obj, _) = master.objects
    times = np.array(gull["times_s"])
    assert 2 < len(times) <= 181 and np.all(np.diff(times) > 0)
    assert times[0] == 0.0 and times[-1] == pytest.approx(9.0 - 1 / RATE)
    # the oracle: object_positions at the same times (polar, so the angles as given)
    expected = object_positions(obj, times)
    assert_allclose(gull["azimuth_deg"], expected.positions[:, 0], atol=0.01)
    assert_allclose(gull["elevation_deg"], expected.positions[:, 1], atol=0.01)
    assert_allclose(gull["gain"], expected.gain, atol=1e-5)
    # Samples dropped lie inside runs that neither move nor change gain: a linear
    # interpolation of the kept ones gives back every one of the 181.
    every = np.linspace(0.0, 9.0 - 1 / RATE, 181)
    full = object_positions(obj, every).positions[:, 0]
    assert_allclose(np.interp(every, times, gull["azimuth_deg"]), full, atol=0.01)
    # hand-computed: at rest at +90 until 1 s, at (-90, 30) from 3 s; the jump at 5 s
    # (jumpPosition 1, no interpolationLength: BS.2076-2, at once) between two samples
    assert gull["azimuth_deg"][0] == 90.0 and gull["elevation_deg"][0] == 0.0
    at_four = int(np.searchsorted(times, 4.0))
    assert gull["azimuth_deg"][at_four - 1 : at_four + 1] == [-90.0, -90.0]
    assert gull["azimuth_deg"][-1] == 0.0 and gull["elevation_deg"][-1] == 0.0
    # The resting cartesian object: two points, at the left (BS.2076: X right, Y front).
    assert buoy["cartesian"] and len(buoy["times_s"]) == 2
    assert buoy["azimuth_deg"] == [90.0, 90.0] and buoy["elevation_deg"] == [0.0, 0.0]
    assert (buoy["object"], buoy["track"], buoy["blocks"]) == ("Buoy", 2, 1)


def test_a_path_is_bounded_whatever_the_blocks(tmp_path):
    """2,000 blocks of 4 ms circling the listener: at most ``points`` samples per object."""

    def circling(k, ch):
        return [
            object_block(ch, i + 1, rtime=seconds(i * 0.004), duration=seconds(0.004),
                         az=float(i * 7 % 360 - 180), el=0.0)
            for i in range(2000)
        ]  # fmt: skip

    master = read_adm(_objects(tmp_path / "m.wav", circling, names=("Moth",), audio_seconds=8))
    (moth,) = object_paths(master)
    assert len(moth["times_s"]) == PATH_POINTS
    assert len(moth["azimuth_deg"]) == len(moth["elevation_deg"]) == len(moth["gain"])
    with pytest.raises(AdmError, match="points must be 2 to 10000, got 1"):
        object_paths(master, points=1)


def test_an_object_span_and_mute_are_in_its_path(tmp_path):
    """An object that plays from 2 s for 3 s: its path covers its span only; muted, its
    gain is 0 (BS.2076-2 audioObject start, duration, mute)."""
    elements = [
        programme("APR_1001", "P", ["ACO_1001"]),
        content("ACO_1001", "C", ["AO_1001"]),
        audio_object("AO_1001", "Kite", packs=["AP_00031001"], uids=["ATU_00000001"],
                     start=seconds(2), duration=seconds(3), mute="1"),
        pack("AP_00031001", "Objects", ["AC_00031001"]),
        channel("AC_00031001", "Objects", [object_block("AC_00031001", 1, az=-45.0, el=10.0)]),
        stream_and_track("AC_00031001", "AP_00031001"),
    ]  # fmt: skip
    path = write_master(
        tmp_path / "m.wav",
        audio=np.zeros((9 * RATE, 1), np.float32),
        rate=RATE,
        chna=chna_body([(1, "ATU_00000001", "AT_00031001_01", "AP_00031001")]),
        axml=document(*elements),
    )
    (kite,) = object_paths(read_adm(path))
    assert kite["start_s"] == 2.0 and kite["end_s"] == 5.0 and kite["muted"]
    assert kite["times_s"] == [2.0, round(5.0 - 1 / RATE, 5)]
    assert kite["gain"] == [0.0, 0.0]
    assert kite["azimuth_deg"] == [-45.0, -45.0] and kite["elevation_deg"] == [10.0, 10.0]


def test_direction_vectors_follow_the_adm_axes():
    # BS.2076-2: cartesian X to the right, Y to the front, Z up; ours x front, y left, z up
    got = direction_vectors(np.array([[0, 1, 0], [1, 0, 0], [0, 0, 1], [0, 0, 0]]), True)
    assert_allclose(got, [[1, 0, 0], [0, -1, 0], [0, 0, 1], [1, 0, 0]])
    polar = direction_vectors(np.array([[-90.0, 0.0, 1.0], [0.0, 90.0, 1.0]]), False)
    assert_allclose(polar, [[0, -1, 0], [0, 0, 1]], atol=1e-12)


def test_the_probe_of_a_master_counts_what_its_programme_plays(tmp_path):
    path = _objects(tmp_path / "m.wav", _moving_then_resting, programmes=2)
    summary = probe_adm(path)
    assert summary["programme"] == {"id": "APR_1001", "name": "Mix 1"}
    assert summary["programmes"] == [
        {"id": "APR_1001", "name": "Mix 1"},
        {"id": "APR_1002", "name": "Mix 2"},
    ]
    assert (summary["objects"], summary["moving_objects"], summary["beds"]) == (2, 1, 0)
    assert (summary["hoa_tracks"], summary["tracks"], summary["duration_s"]) == (0, 2, 9.0)
    assert summary["ignored"] == [] and summary["container"] == "RIFF"
    second = probe_adm(path, programme="Mix 2")
    assert second["programme"]["id"] == "APR_1002" and second["objects"] == 1
    with pytest.raises(AdmError, match="'m.wav': no audioProgramme 'Mix 3'"):
        probe_adm(path, programme="Mix 3")


def test_the_overview_adds_paths_and_bed_directions(tmp_path):
    """A 5.1 bed (common definitions, ITU-R BS.2094 AP_00010003) and one object: the bed's
    loudspeakers at their BS.2051 directions (0+5+0: L at +30, Ls at +110, from memory)."""
    bed = BED_51
    elements = [
        programme("APR_1001", "Main", ["ACO_1001"]),
        content("ACO_1001", "All", ["AO_1001", "AO_1002"]),
        audio_object("AO_1001", "Bed", packs=["AP_00010003"], uids=[e[1] for e in bed]),
        audio_object("AO_1002", "Gull", packs=["AP_00031001"], uids=["ATU_00000007"]),
        pack("AP_00031001", "Objects", ["AC_00031001"]),
        channel("AC_00031001", "Objects", [object_block("AC_00031001", 1, az=10.0, el=5.0)]),
        stream_and_track("AC_00031001", "AP_00031001"),
    ]
    entries = [*bed, (7, "ATU_00000007", "AT_00031001_01", "AP_00031001")]
    path = write_master(
        tmp_path / "m.wav",
        audio=np.zeros((RATE, 7), np.float32),
        rate=RATE,
        chna=chna_body(entries),
        axml=document(*elements),
    )
    overview = adm_overview(path, points=50)
    assert (overview["beds"], overview["objects"]) == (6, 1)
    directions = {d["label"]: d for d in overview["bed_directions"]}
    assert (directions["M+030"]["azimuth_deg"], directions["M+030"]["track"]) == (30.0, 1)
    assert directions["M-110"]["azimuth_deg"] == -110.0
    assert directions["LFE"]["lfe"] and not directions["M+000"]["lfe"]
    (gull,) = overview["paths"]
    assert gull["azimuth_deg"] == [10.0, 10.0] and gull["elevation_deg"] == [5.0, 5.0]


def test_the_probe_says_none_for_plain_audio_and_names_a_broken_master(tmp_path):
    write_audio(tmp_path / "plain.wav", np.zeros((100, 2), np.float32), 48000, subtype="FLOAT")
    assert probe_adm(tmp_path / "plain.wav") is None
    (tmp_path / "noise.wav").write_bytes(b"not a wav at all")
    assert probe_adm(tmp_path / "noise.wav") is None
    # an axml chunk that is not BS.2076 metadata (no audioFormatExtended): plain channels
    other = write_master(
        tmp_path / "other.wav",
        audio=np.zeros((10, 1), np.float32),
        chna=chna_body([]),
        axml="<?xml version='1.0'?><notes>a take from the pier</notes>",
    )
    assert probe_adm(other) is None
    broken = write_master(
        tmp_path / "broken.wav",
        audio=np.zeros((10, 1), np.float32),
        chna=chna_body([(1, "ATU_00000001", "AT_00031001_01", "AP_00031001")]),
        axml=document("<audioProgramme audioProgrammeID='APR_1001'>").replace(
            "</audioFormatExtended>", ""
        ),
    )
    with pytest.raises(AdmError, match=r"ADM master 'broken.wav': axml is not well-formed"):
        probe_adm(broken)


def test_the_inspect_command_gives_the_paths(tmp_path, capsys):
    import json

    from earfold.service.cli import main

    path = _objects(tmp_path / "m.wav", _moving_then_resting)
    assert main(["adm", "inspect", str(path), "--paths", "40", "--json"]) == 0
    printed = json.loads(capsys.readouterr().out)
    assert printed["paths"] == object_paths(read_adm(path), points=40)
    assert main(["adm", "inspect", str(path), "--paths", "40"]) == 0
    text = capsys.readouterr().out
    assert "path of 'Buoy': 0 s at (90, 0) deg to 8.999 s at (90, 0) deg, 2 point(s)" in text
    assert main(["adm", "inspect", str(path), "--paths", "1"]) == 2
    assert "points must be 2 to 10000" in capsys.readouterr().err
