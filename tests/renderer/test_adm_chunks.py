"""Header walking of ADM masters: RIFF/WAVE, RF64 (EBU Tech 3306), BW64 (ITU-R BS.2088),
and the ``chna`` chunk (BS.2088 section 4). Files are written by ``adm_factory``."""

from __future__ import annotations

import struct

import numpy as np
import pytest
import soundfile as sf
from adm_factory import chna_body, document, write_master
from numpy.testing import assert_array_equal

from earfold.renderer.errors import AdmError, AudioError
from earfold.renderer.io import Rf64View, audio_source
from earfold.renderer.objects import parse_chna, read_wav_chunks

AUDIO = (np.arange(3 * 101, dtype=np.float32).reshape(101, 3) / 1000.0) - 0.15
ENTRIES = [
    (1, "ATU_00000001", "AT_00010001_01", "AP_00010002"),
    (2, "ATU_00000002", "AT_00010002_01", "AP_00010002"),
    (3, "ATU_00000003", "AT_00031001_01", "AP_00031001"),
]
XML = document()


@pytest.mark.parametrize("container", ["RIFF", "RF64", "BW64"])
@pytest.mark.parametrize("axml_after_data", [False, True])
def test_each_container_gives_its_chunks_and_audio(tmp_path, container, axml_after_data):
    path = write_master(
        tmp_path / "m.wav",
        audio=AUDIO,
        chna=chna_body(ENTRIES),
        axml=XML,
        container=container,
        axml_after_data=axml_after_data,
    )
    chunks = read_wav_chunks(path)
    assert chunks.container == container
    assert (chunks.channels, chunks.sample_rate, chunks.frames) == (3, 48000, 101)
    assert chunks.format_tag == 3 and chunks.bits_per_sample == 32
    assert chunks.axml == XML.encode()
    assert chunks.chna == chna_body(ENTRIES)
    raw = path.read_bytes()[chunks.data_offset : chunks.data_offset + chunks.data_size]
    assert_array_equal(np.frombuffer(raw, "<f4").reshape(101, 3), AUDIO)
    # The audio library reads what we wrote: RIFF by path, RF64 and BW64 through the view.
    source = audio_source(path)
    try:
        samples, rate = sf.read(source, dtype="float32")
    finally:
        if isinstance(source, Rf64View):
            source.close()
    assert rate == 48000
    assert_array_equal(samples, AUDIO)


def test_libsndfile_refuses_the_bw64_id_by_path(tmp_path):
    """Why :class:`Rf64View` exists (libsndfile 1.2.2): a regression guard for the note."""
    path = write_master(tmp_path / "m.wav", audio=AUDIO, chna=None, axml=None, container="BW64")
    if sf.__libsndfile_version__ >= "1.3":
        pytest.skip("a newer libsndfile may read BW64 itself")
    with pytest.raises(sf.LibsndfileError):
        sf.info(str(path))


def test_rf64_view_refuses_other_files(tmp_path):
    path = write_master(tmp_path / "m.wav", audio=AUDIO, chna=None, axml=None)
    with pytest.raises(AudioError, match="not an RF64 or BW64 file"):
        Rf64View(path)
    assert audio_source(path) == str(path)


def test_axml_size_deferred_to_the_ds64_table(tmp_path):
    path = write_master(
        tmp_path / "m.wav", audio=AUDIO, chna=None, axml=XML, container="BW64", axml_in_ds64=True
    )
    assert read_wav_chunks(path).axml == XML.encode()


def test_odd_sized_chunks_are_padded(tmp_path):
    xml = XML + " "  # odd length
    assert len(xml.encode()) % 2 == 1
    path = write_master(
        tmp_path / "m.wav",
        audio=AUDIO,
        chna=chna_body(ENTRIES),
        axml=xml,
        extra=[(b"bext", b"abc")],
    )
    chunks = read_wav_chunks(path)
    assert chunks.axml == xml.encode()
    assert [c[0] for c in chunks.chunks] == ["fmt ", "bext", "chna", "axml", "data"]


def test_a_file_cut_short_names_the_chunk(tmp_path):
    path = write_master(tmp_path / "m.wav", audio=AUDIO, chna=chna_body(ENTRIES), axml=XML)
    path.write_bytes(path.read_bytes()[:-100])
    with pytest.raises(AdmError, match=r"chunk 'data' .* past the end of the file"):
        read_wav_chunks(path)


def test_a_chunk_claiming_a_huge_size_is_not_read(tmp_path):
    path = write_master(tmp_path / "m.wav", audio=AUDIO, chna=None, axml=XML)
    raw = bytearray(path.read_bytes())
    at = raw.index(b"axml")
    raw[at + 4 : at + 8] = struct.pack("<I", 0xFFFFFFF0)
    path.write_bytes(bytes(raw))
    with pytest.raises(AdmError, match="past the end of the file"):
        read_wav_chunks(path)


def test_axml_past_the_size_limit_is_refused_before_reading(tmp_path):
    path = write_master(tmp_path / "m.wav", audio=AUDIO, chna=None, axml=XML)
    with pytest.raises(AdmError, match="more than the 100 this reader accepts"):
        read_wav_chunks(path, max_axml_bytes=100)


@pytest.mark.parametrize(
    ("mutate", "message"),
    [
        (lambda raw: b"RIFX" + raw[4:], "is not a RIFF/WAVE, RF64 or BW64 file"),
        (lambda raw: raw[:12], "no fmt chunk"),
        (lambda raw: raw[:6], "is not a RIFF/WAVE"),
    ],
)
def test_not_a_usable_wav(tmp_path, mutate, message):
    path = write_master(tmp_path / "m.wav", audio=AUDIO, chna=None, axml=None)
    path.write_bytes(mutate(path.read_bytes()))
    with pytest.raises(AdmError, match=message):
        read_wav_chunks(path)


def test_no_data_chunk(tmp_path):
    path = write_master(tmp_path / "m.wav", audio=AUDIO, chna=None, axml=None)
    raw = bytearray(path.read_bytes())
    at = raw.index(b"data")
    raw[at : at + 4] = b"junk"
    path.write_bytes(bytes(raw))
    with pytest.raises(AdmError, match="no data chunk"):
        read_wav_chunks(path)


def test_rf64_without_ds64(tmp_path):
    path = write_master(tmp_path / "m.wav", audio=AUDIO, chna=None, axml=None, container="RF64")
    raw = bytearray(path.read_bytes())
    raw[12:16] = b"JUNK"
    path.write_bytes(bytes(raw))
    with pytest.raises(AdmError, match="must start with a ds64 chunk"):
        read_wav_chunks(path)


def test_ds64_table_longer_than_its_chunk(tmp_path):
    path = write_master(tmp_path / "m.wav", audio=AUDIO, chna=None, axml=None, container="BW64")
    raw = bytearray(path.read_bytes())
    raw[20 + 24 : 20 + 28] = struct.pack("<I", 1000)
    path.write_bytes(bytes(raw))
    with pytest.raises(AdmError, match="ds64 table lists 1000 chunk sizes"):
        read_wav_chunks(path)


def test_a_chunk_deferring_to_ds64_without_an_entry(tmp_path):
    path = write_master(tmp_path / "m.wav", audio=AUDIO, chna=None, axml=XML, container="RF64")
    raw = bytearray(path.read_bytes())
    at = raw.index(b"axml")
    raw[at + 4 : at + 8] = struct.pack("<I", 0xFFFFFFFF)
    path.write_bytes(bytes(raw))
    with pytest.raises(AdmError, match="'axml' defers its size to ds64, which does not list it"):
        read_wav_chunks(path)


# -- chna ---------------------------------------------------------------------------------


def test_chna_entries_and_spare_slots():
    entries = parse_chna(chna_body(ENTRIES, spare=5), channels=3)
    assert [(e.track, e.uid, e.track_ref, e.pack_ref) for e in entries] == [
        (0, "ATU_00000001", "AT_00010001_01", "AP_00010002"),
        (1, "ATU_00000002", "AT_00010002_01", "AP_00010002"),
        (2, "ATU_00000003", "AT_00031001_01", "AP_00031001"),
    ]


def test_chna_may_refer_to_a_channel_format_directly():
    (entry,) = parse_chna(chna_body([(1, "ATU_00000001", "AC_00031001", "AP_00031001")]), 1)
    assert entry.track_ref == "AC_00031001"


def test_two_uids_on_one_track_count_as_one_track():
    body = chna_body(
        [(1, "ATU_00000001", "AT_00031001_01", "AP_00031001"),
         (1, "ATU_00000002", "AT_00031002_01", "AP_00031002")]
    )  # fmt: skip
    assert len(parse_chna(body, 1)) == 2


@pytest.mark.parametrize(
    ("body", "channels", "message"),
    [
        (b"\x01", 1, "at least 4 are needed"),
        (chna_body(ENTRIES, num_uids=9), 3, "declares 9 track UIDs but has room for 3"),
        (chna_body(ENTRIES, num_uids=2, spare=1), 3, "declares 2 track UIDs but holds 3"),
        (chna_body(ENTRIES, num_tracks=2), 3, "declares 2 tracks but its entries use 3"),
        (chna_body(ENTRIES), 2, "track index 3 is past the file's 2 channels"),
        (chna_body([(1, "ATU_0000001", "AT_00031001_01", "AP_00031001")]), 1, "ATU_xxxxxxxx"),
        (chna_body([(1, "ATU_00000001", "AT_0003100_01", "AP_00031001")]), 1, "AT_yyyyxxxx_zz"),
        (chna_body([(1, "ATU_00000001", "AT_00031001_01", "AO_1001")]), 1, "AP_yyyyxxxx"),
        (
            chna_body([(1, "ATU_00000001", "AT_00031001_01", "AP_00031001")] * 2),
            1,
            "ATU_00000001 appears more than once",
        ),
        (struct.pack("<HH", 1, 1), 1, "declares 1 track UIDs but has room for 0"),
    ],
)
def test_chna_is_parsed_strictly(body, channels, message):
    with pytest.raises(AdmError, match=message):
        parse_chna(body, channels)


def test_chna_text_that_is_not_ascii():
    body = struct.pack("<HH", 1, 1) + struct.pack(
        "<H12s14s11sx", 1, "ATU_0000000é".encode("latin-1"), b"AT_00031001_01", b"AP_00031001"
    )
    with pytest.raises(AdmError, match="is not ASCII text"):
        parse_chna(body, 1)
