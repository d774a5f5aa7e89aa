"""The ADM model read from hand-written masters (structure and examples of ITU-R BS.2076-2,
chunk layouts of BS.2088): programme -> content -> objects (nested) -> packs -> channels ->
tracks, common definitions (BS.2094, from memory), and every malformed case as a clear
error. Files are written by ``adm_factory``."""

from __future__ import annotations

import json
import math
import time

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
    stream_and_track,
    uid,
    write_master,
)
from numpy.testing import assert_allclose

from earfold.renderer.errors import AdmError
from earfold.renderer.objects import inspect_adm, read_adm

TRACKS = 15


BED = BED_51
OBJECT_TRACKS = [
    (7, uid(7), "AT_00031001_01", "AP_00031001"),
    (8, uid(8), "AT_00031002_01", "AP_00031002"),
    (9, uid(9), "AT_00031003_01", "AP_00031003"),
]
HOA = [(10 + k, uid(10 + k), f"AT_0004000{k + 1}_01", "AP_00040001") for k in range(4)]
MATRIX = [(14, uid(14), "AC_00021001", "AP_00021001")]
BINAURAL = [(15, uid(15), "AC_00051001", "AP_00051001")]
ENTRIES = BED + OBJECT_TRACKS + HOA + MATRIX + BINAURAL


def _parts() -> dict[str, str]:
    """The master's elements by a short name, so a test can replace one."""
    return {
        "prog": programme("APR_1001", "Main", ["ACO_1001", "ACO_1002", "ACO_1003"]),
        "prog2": programme("APR_1002", "Bed only", ["ACO_1001"]),
        "bed_content": content("ACO_1001", "Bed", ["AO_1001"]),
        "obj_content": content("ACO_1002", "Objects", ["AO_1002", "AO_1003", "AO_1006"]),
        "bed": audio_object("AO_1001", "Bed", packs=["AP_00010003"], uids=[e[1] for e in BED]),
        "bird": audio_object("AO_1002", "Bird", packs=["AP_00031001"], uids=[uid(7)]),
        "group": audio_object(
            "AO_1003",
            "Group",
            objects=["AO_1004", "AO_1005"],
            start="00:00:01.00000",
            duration="00:00:04.00000",
            gain='<gain gainUnit="dB">-6</gain>',
        ),
        "voice": audio_object(
            "AO_1004",
            "Voice",
            packs=["AP_00031002"],
            uids=[uid(8)],
            gain="0.5",
            start="00:00:00.50000",
            duration="00:00:10.00000",
        ),
        "muted": audio_object("AO_1005", "Muted", packs=["AP_00031003"], uids=[uid(9)], mute="1"),
        "scene": audio_object("AO_1006", "Scene", packs=["AP_00040001"], uids=[e[1] for e in HOA]),
        "matrix": audio_object("AO_1007", "Matrix", packs=["AP_00021001"], uids=[uid(14)]),
        "binaural": audio_object("AO_1008", "Bin", packs=["AP_00051001"], uids=[uid(15)]),
        "matrix_content": content("ACO_1003", "Other", ["AO_1007", "AO_1008"]),
        "pack1": pack("AP_00031001", "Objects", ["AC_00031001"]),
        "pack2": pack("AP_00031002", "Objects", ["AC_00031002"]),
        "pack3": pack("AP_00031003", "Objects", ["AC_00031003"]),
        "pack_m": pack("AP_00021001", "Matrix", ["AC_00021001"]),
        "pack_b": pack("AP_00051001", "Binaural", ["AC_00051001"]),
        "ch1": channel(
            "AC_00031001",
            "Objects",
            [
                object_block(
                    "AC_00031001",
                    1,
                    rtime="00:00:00.00000",
                    duration="00:00:01.00000",
                    az=30.0,
                    el=0.0,
                ),
                object_block(
                    "AC_00031001",
                    2,
                    rtime="00:00:01.00000",
                    duration="00:00:02.00000",
                    az=-60.0,
                    el=20.0,
                    dist=0.5,
                ),
            ],
        ),
        "ch2": channel("AC_00031002", "Objects", [object_block("AC_00031002", 1, az=0, el=0)]),
        "ch3": channel(
            "AC_00031003", "Objects", [object_block("AC_00031003", 1, xyz=(0.5, 1.0, 0.0))]
        ),
        "ch_m": channel("AC_00021001", "Matrix", []),
        "ch_b": channel("AC_00051001", "Binaural", []),
        "st1": stream_and_track("AC_00031001", "AP_00031001"),
        "st2": stream_and_track("AC_00031002", "AP_00031002"),
        "st3": stream_and_track("AC_00031003", "AP_00031003"),
    }


def _write(tmp_path, parts=None, entries=ENTRIES, container="RIFF", name="m.wav"):
    parts = _parts() if parts is None else parts
    audio = np.zeros((480, TRACKS), np.float32)
    return write_master(
        tmp_path / name,
        audio=audio,
        chna=chna_body(entries),
        axml=document(*parts.values()),
        container=container,
    )


@pytest.fixture
def master_path(tmp_path):
    return _write(tmp_path)


@pytest.mark.parametrize("container", ["RIFF", "RF64", "BW64"])
def test_the_whole_master(tmp_path, container):
    master = read_adm(_write(tmp_path, container=container))
    assert master.container == container
    assert (master.programme_id, master.programme_name) == ("APR_1001", "Main")
    assert master.programmes == (
        ("APR_1001", "Main", ("ACO_1001", "ACO_1002", "ACO_1003")),
        ("APR_1002", "Bed only", ("ACO_1001",)),
    )
    assert [c[0] for c in master.contents] == ["ACO_1001", "ACO_1002", "ACO_1003"]
    # Beds: the common 5.1 pack (BS.2094, from memory), labels as BS.2051 names.
    assert [b.label for b in master.beds] == ["M+030", "M-030", "M+000", "LFE", "M+110", "M-110"]
    assert [b.track for b in master.beds] == [0, 1, 2, 3, 4, 5]
    assert [b.lfe for b in master.beds] == [False, False, False, True, False, False]
    assert master.beds[4].position == (110.0, 0.0, 1.0)
    assert all(b.channel.common for b in master.beds)
    # Objects, nested ones with their parents' gain, mute and span.
    bird, voice, muted = master.objects
    assert (bird.object_id, bird.track, bird.start, bird.end) == ("AO_1002", 6, 0, None)
    assert len(bird.blocks) == 2 and bird.blocks[1].position == (-60.0, 20.0, 0.5)
    assert voice.object_path == ("AO_1003", "AO_1004")
    assert_allclose(voice.gain, 0.5 * 10 ** (-6 / 20), rtol=1e-12)
    # the voice starts at 0.5 s but plays within its group's span, 1 s to 5 s
    assert (float(voice.start), float(voice.end)) == (1.0, 5.0)
    assert muted.mute and not voice.mute and muted.blocks[0].cartesian
    assert muted.blocks[0].position == (0.5, 1.0, 0.0)
    # HOA: the common first-order pack, ACN order, SN3D.
    (scene,) = master.hoa
    assert (scene.order, scene.normalization) == (1, "SN3D")
    assert scene.tracks == (9, 10, 11, 12) and scene.acns == (0, 1, 2, 3)
    # Matrix and Binaural are listed, not dropped.
    assert any("type Matrix, which is not supported; chna track 14" in m for m in master.ignored)
    assert any("type Binaural, which is not supported; chna track 15" in m for m in master.ignored)
    assert set(master.packs) >= {"AP_00010003", "AP_00031001", "AP_00040001"}
    assert master.packs["AP_00010003"].common
    json.dumps(master.to_dict())


def test_a_common_binaural_pack_is_listed_without_its_definition(tmp_path):
    """A Binaural pack need not be resolved (nor known) to be reported as not rendered."""
    parts = _parts()
    del parts["pack_b"], parts["ch_b"]
    parts["binaural"] = audio_object("AO_1008", "Bin", packs=["AP_00050001"], uids=[uid(15)])
    entries = ENTRIES[:-1] + [(15, uid(15), "AT_00050001_01", "AP_00050001")]
    master = read_adm(_write(tmp_path, parts, entries))
    assert any("AP_00050001 is of type Binaural" in m for m in master.ignored)


def test_a_programme_without_contents_plays_nothing(tmp_path):
    parts = _parts()
    parts["prog"] = programme("APR_1001", "Empty", [])
    master = read_adm(_write(tmp_path, parts))
    assert master.programme_id == "APR_1001"
    assert not master.objects and not master.beds and not master.hoa


def test_a_programme_chosen_by_id_or_name(master_path):
    assert read_adm(master_path, programme="APR_1002").programme_name == "Bed only"
    bed_only = read_adm(master_path, programme="Bed only")
    assert bed_only.programme_id == "APR_1002"
    assert len(bed_only.beds) == 6 and not bed_only.objects and not bed_only.hoa
    with pytest.raises(AdmError, match=r"no audioProgramme 'x'.*APR_1001 \('Main'\)"):
        read_adm(master_path, programme="x")


def test_without_programme_every_content_plays(tmp_path):
    parts = _parts()
    del parts["prog"], parts["prog2"]
    master = read_adm(_write(tmp_path, parts))
    assert master.programme_id is None and len(master.objects) == 3
    assert "every audioContent is played" in master.notes[0]


def test_without_programme_or_content_the_top_objects_play(tmp_path):
    parts = _parts()
    for key in ("prog", "prog2", "bed_content", "obj_content", "matrix_content"):
        del parts[key]
    master = read_adm(_write(tmp_path, parts))
    assert [o.object_id for o in master.objects] == ["AO_1002", "AO_1004", "AO_1005"]


def test_track_uid_to_channel_directly(tmp_path):
    """BS.2076-2: a track UID may name its channel format (chna trackRef AC_...)."""
    parts = _parts()
    del parts["st1"]
    entries = [e if e[0] != 7 else (7, uid(7), "AC_00031001", "AP_00031001") for e in ENTRIES]
    master = read_adm(_write(tmp_path, parts, entries))
    assert master.objects[0].channel.channel_id == "AC_00031001"


def test_nested_packs(tmp_path):
    parts = _parts()
    parts["pack1"] = pack("AP_00031001", "Objects", [], packs=["AP_00031004"])
    parts["pack4"] = pack("AP_00031004", "Objects", ["AC_00031001"])
    entries = [e if e[0] != 7 else (7, uid(7), "AT_00031001_01", "AP_00031004") for e in ENTRIES]
    master = read_adm(_write(tmp_path, parts, entries))
    assert master.objects[0].channel.channel_id == "AC_00031001"
    assert master.packs["AP_00031001"].pack_ids == ("AP_00031004",)


def test_unsupported_block_parameters_are_listed_once_with_a_count(tmp_path):
    parts = _parts()
    blocks = [
        object_block(
            "AC_00031002",
            k + 1,
            rtime=f"00:00:0{k}.00000",
            duration="00:00:01.00000",
            az=0,
            el=0,
            extra='<objectDivergence>0.5</objectDivergence><headphoneVirtualise bypass="1"/>',
        )
        for k in range(3)
    ]
    parts["ch2"] = channel("AC_00031002", "Objects", blocks)
    master = read_adm(_write(tmp_path, parts))
    assert "audioChannelFormat AC_00031002: objectDivergence is not rendered (3 times)" in (
        master.ignored
    )
    assert any("headphoneVirtualise (bypass" in m and "(3 times)" in m for m in master.ignored)


def test_a_loudspeaker_that_moves_is_placed_at_its_first_position(tmp_path):
    parts = _parts()
    speaker = (
        '<audioBlockFormat audioBlockFormatID="AB_00011001_{k:08X}" rtime="00:00:0{t}.00000" '
        'duration="00:00:01.00000"><speakerLabel>urn:itu:bs:2051:0:speaker:U+045</speakerLabel>'
        '<position coordinate="azimuth">{az}</position>'
        '<position coordinate="azimuth" bound="min">40</position>'
        '<position coordinate="elevation">30</position></audioBlockFormat>'
    )
    parts["bed"] = audio_object("AO_1001", "Bed", packs=["AP_00011001"], uids=[uid(1)])
    parts["bedpack"] = pack("AP_00011001", "DirectSpeakers", ["AC_00011001"])
    parts["bedch"] = channel(
        "AC_00011001",
        "DirectSpeakers",
        [speaker.format(k=1, t=0, az=45), speaker.format(k=2, t=1, az=50)],
        extra='<frequency typeDefinition="lowPass">120</frequency>',
    )
    entries = [(1, uid(1), "AC_00011001", "AP_00011001")] + ENTRIES[6:]
    master = read_adm(_write(tmp_path, parts, entries))
    (bed,) = master.beds
    assert (bed.label, bed.position, bed.lfe) == ("U+045", (45.0, 30.0, 1.0), True)
    assert any("placed at its first block's position" in m for m in master.ignored)


# -- malformed masters: each a clear error ------------------------------------------------


def _replace(key, old, new):
    def mutate(parts):
        assert old in parts[key], (key, old)
        parts[key] = parts[key].replace(old, new)

    return mutate


def _add(key, value):
    def mutate(parts):
        parts[key] = value

    return mutate


def _drop(key):
    def mutate(parts):
        del parts[key]

    return mutate


MALFORMED = {
    "missing object": (
        _replace("obj_content", "AO_1006", "AO_1099"),
        r"audioObject AO_1099 \(referenced by APR_1001\) is not defined",
    ),
    "missing content": (_drop("bed_content"), r"audioContent ACO_1001 .* is not defined"),
    "missing pack": (_drop("pack2"), r"audioPackFormat AP_00031002 .* neither defined"),
    "missing channel": (_drop("ch2"), r"audioChannelFormat AC_00031002 .* neither defined"),
    "coded stream": (
        _replace(
            "st2",
            "<audioChannelFormatIDRef>AC_00031002</audioChannelFormatIDRef>",
            "",
        ),
        r"audioStreamFormat AS_00031002 \(of ATU_00000008\) refers to no audioChannelFormat",
    ),
    "track without stream": (
        _replace("st2", "<audioStreamFormatIDRef>AS_00031002</audioStreamFormatIDRef>", ""),
        r"audioTrackFormat AT_00031002_01 \(of ATU_00000008\) refers to no audioStreamFormat",
    ),
    "missing stream": (
        _replace("st2", 'audioStreamFormatID="AS_00031002"', 'audioStreamFormatID="AS_00031009"'),
        r"audioStreamFormat AS_00031002 .* is not defined",
    ),
    "object cycle": (
        _replace(
            "voice",
            "<audioTrackUIDRef>",
            "<audioObjectIDRef>AO_1003</audioObjectIDRef><audioTrackUIDRef>",
        ),
        r"audioObjects nest in a circle: AO_1003 -> AO_1004 -> AO_1003",
    ),
    "self nested object": (
        _replace(
            "bird",
            "<audioTrackUIDRef>",
            "<audioObjectIDRef>AO_1002</audioObjectIDRef><audioTrackUIDRef>",
        ),
        r"nest in a circle: AO_1002 -> AO_1002",
    ),
    "pack cycle": (
        lambda parts: parts.update(
            pack1=pack("AP_00031001", "Objects", ["AC_00031001"], packs=["AP_00031004"]),
            pack4=pack("AP_00031004", "Objects", [], packs=["AP_00031001"]),
        ),
        r"audioPackFormats nest in a circle: AP_00031001 -> AP_00031004 -> AP_00031001",
    ),
    "object ID form": (
        _replace("bird", 'audioObjectID="AO_1002"', 'audioObjectID="AO_10020"'),
        r"'AO_10020' is not an audioObject ID \(the form is AO_wwww\)",
    ),
    "ref ID form": (
        _replace("bird", "<audioPackFormatIDRef>AP_00031001", "<audioPackFormatIDRef>AP_0003100G"),
        r"'AP_0003100G' is not an audioPackFormat ID",
    ),
    "block ID form": (
        _replace("ch2", "AB_00031002_00000001", "AB_00031002_0001"),
        r"is not an audioBlockFormat ID \(the form is AB_yyyyxxxx_zzzzzzzz\)",
    ),
    "block of another channel": (
        _replace("ch2", "AB_00031002_00000001", "AB_00031001_00000001"),
        r"AB_00031001_00000001 does not belong to its audioChannelFormat AC_00031002",
    ),
    "duplicate ID": (
        _add("again", audio_object("AO_1002", "Again")),
        r"AO_1002 is defined twice \(first on line",
    ),
    "duplicate ID in other case": (
        _add(
            "again",
            pack("AP_0003100a", "Objects", ["AC_00031001"])
            + pack("AP_0003100A", "Objects", ["AC_00031001"]),
        ),
        r"AP_0003100A is defined twice",
    ),
    "type mismatch": (
        _replace("pack1", 'typeDefinition="Objects"', 'typeDefinition="HOA"'),
        r"AP_00031001 has typeDefinition 'HOA' but its ID says 'Objects'",
    ),
    "unknown type": (
        _add("odd", pack("AP_00091001", "Objects", [])),
        r"AP_00091001 has type 0009, none of 0001 \(DirectSpeakers\)",
    ),
    "blocks out of order": (
        _replace("ch1", 'rtime="00:00:01.00000"', 'rtime="00:00:00.50000"'),
        r"AB_00031001_00000002 starts at 0.5 s, before the previous block "
        r"AB_00031001_00000001 ends \(1 s\)",
    ),
    "negative duration": (
        _replace("ch1", 'duration="00:00:02.00000"', 'duration="-00:00:02.00000"'),
        r"'-00:00:02.00000' is negative",
    ),
    "bad time": (
        _replace("group", 'start="00:00:01.00000"', 'start="1.5"'),
        r"start of audioObject AO_1003: '1.5' is not an ADM time",
    ),
    "bad sample time": (
        _replace("group", 'start="00:00:01.00000"', 'start="00:00:01.48000S48000"'),
        r"48000 samples of a rate of 48000: the fraction must be less than a second",
    ),
    "mixed timed and untimed": (
        _replace("ch1", ' rtime="00:00:00.00000" duration="00:00:01.00000"', ""),
        r"mixes blocks with and without rtime/duration",
    ),
    "azimuth out of range": (
        _replace("ch1", ">30.0<", ">200<"),
        r"azimuth: '200' is outside -180 .. 180",
    ),
    "not a number": (_replace("ch1", ">30.0<", ">left<"), r"azimuth: 'left' is not a number"),
    "missing elevation": (
        _replace("ch2", '<position coordinate="elevation">0</position>', ""),
        r"position azimuth and elevation are not both given",
    ),
    "mixed coordinates": (
        _add(
            "ch1",
            channel(
                "AC_00031001",
                "Objects",
                [
                    object_block(
                        "AC_00031001",
                        1,
                        rtime="00:00:00.00000",
                        duration="00:00:01.00000",
                        az=0,
                        el=0,
                    ),
                    object_block(
                        "AC_00031001",
                        2,
                        rtime="00:00:01.00000",
                        duration="00:00:01.00000",
                        xyz=(0, 1, 0),
                    ),
                ],
            ),
        ),
        r"mixes polar and cartesian blocks",
    ),
    "interpolation past the block": (
        _add(
            "ch1",
            channel(
                "AC_00031001",
                "Objects",
                [
                    object_block(
                        "AC_00031001",
                        1,
                        rtime="00:00:00.00000",
                        duration="00:00:01.00000",
                        az=0,
                        el=0,
                        jump="1",
                        interpolation="1.5",
                    ),
                ],
            ),
        ),
        r"interpolationLength 1.5 s is longer than the block \(1 s\)",
    ),
    "bad flag": (_replace("muted", "<mute>1</mute>", "<mute>yes</mute>"), r"'yes' is not a flag"),
    "bad gain unit": (
        _replace("group", 'gainUnit="dB"', 'gainUnit="bel"'),
        r"gainUnit 'bel' is neither 'linear' nor 'dB'",
    ),
    "uid of another pack": (
        _replace("bird", "<audioPackFormatIDRef>AP_00031001", "<audioPackFormatIDRef>AP_00031002"),
        r"ATU_00000007 of audioObject AO_1002 belongs to pack AP_00031001 \(chna\), which is "
        r"not the object's pack AP_00031002",
    ),
    "uid not in chna": (
        _replace("bird", "ATU_00000007", "ATU_00000077"),
        r"audioTrackUID ATU_00000077 \(referenced by AO_1002\) is not in the chna chunk",
    ),
    "axml uid disagrees with chna": (
        _add(
            "uid",
            '<audioTrackUID UID="ATU_00000007"><audioTrackFormatIDRef>AT_00031002_01'
            "</audioTrackFormatIDRef><audioPackFormatIDRef>AP_00031001"
            "</audioPackFormatIDRef></audioTrackUID>",
        ),
        r"ATU_00000007: axml refers it to AT_00031002_01, chna to AT_00031001_01",
    ),
    "uids without pack": (
        _replace("bird", "<audioPackFormatIDRef>AP_00031001</audioPackFormatIDRef>", ""),
        r"AO_1002 has track UIDs but no audioPackFormatIDRef",
    ),
    "no audioFormatExtended": (None, r"no audioFormatExtended element"),
}


@pytest.mark.parametrize("case", [k for k in MALFORMED if MALFORMED[k][1]])
def test_malformed_master(tmp_path, case):
    mutate, message = MALFORMED[case]
    parts = _parts()
    if mutate is None:
        path = write_master(
            tmp_path / "m.wav",
            audio=np.zeros((4, TRACKS), np.float32),
            chna=chna_body(ENTRIES),
            axml="<ebuCoreMain><coreMetadata/></ebuCoreMain>",
        )
    else:
        mutate(parts)
        path = _write(tmp_path, parts)
    with pytest.raises(AdmError, match=message):
        read_adm(path)


def test_an_unknown_common_track_format(tmp_path):
    entries = [e if e[0] != 1 else (1, uid(1), "AT_000100FF_01", "AP_00010003") for e in ENTRIES]
    with pytest.raises(AdmError, match=r"AT_000100FF_01 \(of ATU_00000001\) is neither defined"):
        read_adm(_write(tmp_path, entries=entries))


def test_a_channel_outside_its_pack(tmp_path):
    entries = [e if e[0] != 1 else (1, uid(1), "AT_00010009_01", "AP_00010003") for e in ENTRIES]
    with pytest.raises(
        AdmError, match=r"channel format AC_00010009 is not in its pack AP_00010003"
    ):
        read_adm(_write(tmp_path, entries=entries))


def test_no_axml_or_no_chna(tmp_path):
    audio = np.zeros((4, 2), np.float32)
    plain = write_master(tmp_path / "a.wav", audio=audio, chna=None, axml=None)
    with pytest.raises(AdmError, match="has no axml chunk: it is not an ADM master"):
        read_adm(plain)
    no_chna = write_master(tmp_path / "b.wav", audio=audio, chna=None, axml=document())
    with pytest.raises(AdmError, match="no chna chunk"):
        read_adm(no_chna)


def test_block_count_past_the_limit(tmp_path, monkeypatch):
    import earfold.renderer.objects._definitions as definitions

    monkeypatch.setattr(definitions, "MAX_BLOCKS_PER_CHANNEL", 1)
    with pytest.raises(AdmError, match=r"AC_00031001 has 2 audioBlockFormats, more than 1"):
        read_adm(_write(tmp_path))
    monkeypatch.setattr(definitions, "MAX_BLOCKS_PER_CHANNEL", 10)
    monkeypatch.setattr(definitions, "MAX_TOTAL_BLOCKS", 3)
    with pytest.raises(AdmError, match=r"more than 3 audioBlockFormats in the file"):
        read_adm(_write(tmp_path))


def test_a_long_nested_chain_is_refused_in_bounded_time(tmp_path):
    """200 objects each nesting the next: past the depth limit, refused quickly."""
    parts = _parts()
    for k in range(200):
        parts[f"chain{k}"] = audio_object(
            f"AO_{0x2000 + k:04X}", "c", objects=[f"AO_{0x2000 + k + 1:04X}"] if k < 199 else []
        )
    parts["obj_content"] = content("ACO_1002", "Objects", ["AO_2000"])
    begin = time.perf_counter()
    with pytest.raises(AdmError, match=r"audioObjects nest more than 32 deep under AO_2000"):
        read_adm(_write(tmp_path, parts))
    assert time.perf_counter() - begin < 2.0


def test_inspect_lists_everything(master_path):
    summary = inspect_adm(master_path)
    json.dumps(summary)
    bird = summary["objects"][0]
    assert bird["blocks"] == 2
    # the second block moves from the first's position over its whole length (1 s to 3 s)
    assert bird["motion"] == [1.0, 3.0]
    assert bird["ranges"] == {
        "azimuth": [-60.0, 30.0],
        "elevation": [0.0, 20.0],
        "distance": [0.5, 1.0],
    }
    assert summary["objects"][1]["motion"] is None
    assert [b["label"] for b in summary["beds"]][:3] == ["M+030", "M-030", "M+000"]
    assert summary["hoa"][0]["order"] == 1
    assert math.isclose(summary["duration"], 480 / 48000)
    assert len(summary["ignored"]) == 2


def test_the_inspect_command_prints_the_master_and_refuses_a_bad_one(master_path, tmp_path, capsys):
    from earfold.service.cli import main

    assert main(["adm", "inspect", str(master_path), "--json"]) == 0
    printed = json.loads(capsys.readouterr().out)
    assert printed == json.loads(json.dumps(inspect_adm(master_path)))
    assert main(["adm", "inspect", str(master_path)]) == 0
    text = capsys.readouterr().out
    assert "programme" in text and "objects" in text and "beds" in text
    plain = tmp_path / "plain.wav"
    plain.write_bytes(b"RIFF\x04\x00\x00\x00WAVE")
    assert main(["adm", "inspect", str(plain)]) == 2
    assert capsys.readouterr().err.startswith("earfold: error:")


def test_render_takes_an_adm_master_by_its_metadata_and_refuses_a_layout_for_it(
    master_path, tmp_path, capsys
):
    from earfold.service.cli import main

    out = tmp_path / "out.wav"
    assert main(["render", str(master_path), "-o", str(out), "--layout", "7.1.4"]) == 2
    err = capsys.readouterr().err
    assert "ADM object master" in err and "leave --layout out" in err and "adm inspect" in err
    assert not out.exists()
    assert main(["render", str(master_path), "-o", str(out), "--quiet"]) == 0
    assert out.exists()
    out.unlink()
    # A broadcast WAV whose axml holds other metadata (no audioFormatExtended) and no chna
    # is audio like any other.
    other = write_master(
        tmp_path / "described.wav",
        audio=0.01 * np.ones((4800, 2), np.float32),
        chna=None,
        axml='<?xml version="1.0"?><ebuCoreMain><coreMetadata/></ebuCoreMain>',
    )
    assert main(["render", str(other), "-o", str(out), "--layout", "2.0", "--quiet"]) == 0
    assert out.exists()
