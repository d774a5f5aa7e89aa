"""WAV channel masks (io/wav_header.py reads them, layouts/_channel_mask.py names them), on
headers written byte by byte here."""

from __future__ import annotations

import struct
from pathlib import Path

import numpy as np
import pytest

from earfold.renderer.errors import AudioError, LayoutError
from earfold.renderer.io import read_channel_mask, write_audio
from earfold.renderer.layouts import (
    LAYOUTS,
    SPEAKER_BITS,
    labels_from_mask,
    layout_from_dict,
    mask_for_labels,
    mask_to_speakers,
    resolve_channel_order,
)

# KSDATAFORMAT_SUBTYPE_PCM {00000001-0000-0010-8000-00aa00389b71}, as stored (Microsoft
# WAVEFORMATEXTENSIBLE documentation).
PCM_GUID = bytes.fromhex("0100000000001000800000aa00389b71")
# Sony Wave64 chunk GUIDs (the Wave64 specification, as used by libsndfile).
W64_TAIL = bytes.fromhex("f3acd3118cd100c04f8edb8a")
W64_RIFF = b"riff" + bytes.fromhex("2e91cf11a5d628db04c10000")
FRAMES = 4


def fmt_body(channels: int, mask: int | None, endian: str = "<", rate: int = 48000) -> bytes:
    """WAVEFORMATEXTENSIBLE (or plain PCM when ``mask`` is None), 16-bit samples."""
    block = 2 * channels
    tag = 1 if mask is None else 0xFFFE
    base = struct.pack(endian + "HHIIHH", tag, channels, rate, rate * block, block, 16)
    if mask is None:
        return base
    return base + struct.pack(endian + "HHI", 22, 16, mask) + PCM_GUID


def riff_chunk(ck_id: bytes, body: bytes, endian: str = "<", size: int | None = None) -> bytes:
    pad = b"\0" if len(body) % 2 else b""
    return struct.pack(endian + "4sI", ck_id, len(body) if size is None else size) + body + pad


def wav_bytes(
    channels: int, mask: int | None, *, riff_id: bytes = b"RIFF", before_fmt: bytes = b""
) -> bytes:
    endian = ">" if riff_id == b"RIFX" else "<"
    data = bytes(2 * channels * FRAMES)
    chunks = (
        before_fmt
        + riff_chunk(b"fmt ", fmt_body(channels, mask, endian), endian)
        + riff_chunk(b"data", data, endian)
    )
    return struct.pack(endian + "4sI", riff_id, 4 + len(chunks)) + b"WAVE" + chunks


def rf64_bytes(channels: int, mask: int, riff_id: bytes = b"RF64") -> bytes:
    """RF64 (EBU Tech 3306): ds64 first, then a JUNK chunk whose size is in the ds64
    table, fmt, and a data chunk whose 32-bit size is 0xFFFFFFFF."""
    data = bytes(2 * channels * FRAMES)
    junk = bytes(7)
    table = struct.pack("<4sQ", b"JUNK", len(junk))
    ds64 = struct.pack("<QQQI", 0, len(data), FRAMES, 1) + table
    body = (
        riff_chunk(b"ds64", ds64)
        + riff_chunk(b"JUNK", junk, size=0xFFFFFFFF)
        + riff_chunk(b"fmt ", fmt_body(channels, mask))
        + riff_chunk(b"data", data, size=0xFFFFFFFF)
    )
    return riff_id + struct.pack("<I", 0xFFFFFFFF) + b"WAVE" + body


def w64_chunk(name: bytes, body: bytes) -> bytes:
    size = 24 + len(body)
    return name + W64_TAIL + struct.pack("<Q", size) + body + bytes(-size % 8)


def w64_bytes(channels: int, mask: int | None) -> bytes:
    """Sony Wave64: GUID chunk ids, 64-bit sizes that include the 24-byte header,
    chunks aligned to 8 bytes. A 3-byte 'junk' chunk forces padding before fmt."""
    chunks = (
        w64_chunk(b"junk", b"abc")
        + w64_chunk(b"fmt ", fmt_body(channels, mask))
        + w64_chunk(b"data", bytes(2 * channels * FRAMES))
    )
    return W64_RIFF + struct.pack("<Q", 40 + len(chunks)) + b"wave" + W64_TAIL + chunks


def _file(tmp_path: Path, data: bytes, name: str = "stem.wav") -> Path:
    path = tmp_path / name
    path.write_bytes(data)
    return path


# Masks from the Microsoft channel-mask documentation (REFERENCES.md): 5.1 = 0x3F,
# 5.1 with side surrounds = 0x60F (recalled), 7.1 = 0x63F; 7.1.4 = 0x2D63F (computed).
MASKS = [(0x3F, 6), (0x60F, 6), (0x63F, 8), (0x2D63F, 12)]


@pytest.mark.parametrize("mask,channels", MASKS)
def test_reads_the_mask_of_a_riff_wave(tmp_path, mask, channels):
    # A LIST chunk of odd size before fmt checks the RIFF pad byte is skipped.
    before = riff_chunk(b"LIST", b"INFOabc")
    path = _file(tmp_path, wav_bytes(channels, mask, before_fmt=before))
    assert read_channel_mask(path) == mask


@pytest.mark.parametrize("mask,channels", MASKS)
def test_reads_the_mask_of_rifx_rf64_bw64_and_wave64(tmp_path, mask, channels):
    assert (
        read_channel_mask(_file(tmp_path, wav_bytes(channels, mask, riff_id=b"RIFX"), "a.wav"))
        == mask
    )
    assert read_channel_mask(_file(tmp_path, rf64_bytes(channels, mask), "b.wav")) == mask
    assert read_channel_mask(_file(tmp_path, rf64_bytes(channels, mask, b"BW64"), "c.wav")) == mask
    assert read_channel_mask(_file(tmp_path, w64_bytes(channels, mask), "d.w64")) == mask


def test_plain_pcm_and_zero_mask_give_none(tmp_path):
    assert read_channel_mask(_file(tmp_path, wav_bytes(6, None), "pcm.wav")) is None
    assert read_channel_mask(_file(tmp_path, wav_bytes(6, 0), "zero.wav")) is None
    assert read_channel_mask(_file(tmp_path, w64_bytes(6, None), "pcm.w64")) is None


def test_non_wav_files_give_none(tmp_path):
    # "fLaC" marker and a STREAMINFO block header (RFC 9639), then filler.
    flac = b"fLaC" + bytes([0x80, 0, 0, 34]) + bytes(34)
    assert read_channel_mask(_file(tmp_path, flac, "x.flac")) is None
    assert read_channel_mask(_file(tmp_path, b"FORM\0\0\0\x04AIFF", "x.aiff")) is None
    assert read_channel_mask(_file(tmp_path, b"RIFF\x04\0\0\0AVI ", "x.avi")) is None
    assert read_channel_mask(_file(tmp_path, b"", "empty.wav")) is None


def test_files_written_by_libsndfile(tmp_path):
    # Reference library: libsndfile (through earfold.renderer.io.audio) writes 6-channel RF64 as
    # WAVE_FORMAT_EXTENSIBLE with the 5.1 mask 0x3F, FLAC with no RIFF header at all
    # (observed with libsndfile 1.2).
    x = np.zeros((16, 6), dtype=np.float32)
    write_audio(tmp_path / "s.rf64", x, 48000, subtype="PCM_24")
    write_audio(tmp_path / "s.flac", x, 48000, subtype="PCM_24")
    assert read_channel_mask(tmp_path / "s.rf64") == 0x3F
    assert read_channel_mask(tmp_path / "s.flac") is None


def test_truncated_header_raises(tmp_path):
    whole = wav_bytes(6, 0x3F)
    path = _file(tmp_path, whole[:30])  # cut inside the 40-byte fmt chunk
    with pytest.raises(
        AudioError,
        match=r"stem\.wav'.*cut short: the fmt chunk needs 40 "
        r"bytes at offset 20, the file holds 10",
    ):
        read_channel_mask(path)
    with pytest.raises(AudioError, match=r"WAV header is cut short \(6 bytes\)"):
        read_channel_mask(_file(tmp_path, whole[:6], "six.wav"))
    with pytest.raises(AudioError, match=r"Wave64 header is cut short"):
        read_channel_mask(_file(tmp_path, w64_bytes(6, 0x3F)[:30], "short.w64"))


def test_broken_headers_raise(tmp_path):
    short_ext = fmt_body(6, 0x3F)[:18]
    bad = b"RIFF" + struct.pack("<I", 4 + 8 + 18) + b"WAVE" + riff_chunk(b"fmt ", short_ext)
    with pytest.raises(AudioError, match=r"EXTENSIBLE fmt chunk is 18 bytes, 40 are needed"):
        read_channel_mask(_file(tmp_path, bad, "ext.wav"))
    no_fmt = b"RIFF" + struct.pack("<I", 16) + b"WAVE" + riff_chunk(b"data", bytes(4))
    with pytest.raises(AudioError, match=r"'.*nofmt\.wav': the WAV file has no fmt chunk"):
        read_channel_mask(_file(tmp_path, no_fmt, "nofmt.wav"))
    not_ds64 = (
        b"RF64" + struct.pack("<I", 0xFFFFFFFF) + b"WAVE" + riff_chunk(b"fmt ", fmt_body(6, 0x3F))
    )
    with pytest.raises(AudioError, match=r"must start with a ds64 chunk"):
        read_channel_mask(_file(tmp_path, not_ds64, "rf.wav"))
    w64 = bytearray(w64_bytes(6, 0x3F))
    w64[56:64] = struct.pack("<Q", 8)  # first chunk claims less than its own header
    with pytest.raises(AudioError, match=r"declares 8 bytes, less than its own 24-byte"):
        read_channel_mask(_file(tmp_path, bytes(w64), "bad.w64"))


def test_unreadable_file_raises(tmp_path):
    with pytest.raises(AudioError, match=r"cannot read the header of '.*missing\.wav'"):
        read_channel_mask(tmp_path / "missing.wav")


# -- masks and labels ------------------------------------------------------------------


def test_speaker_bits_match_the_microsoft_table():
    # Microsoft dwChannelMask documentation (REFERENCES.md): FL 0x1 ... TBR 0x20000,
    # one bit each, in this order.
    names = [
        "FL",
        "FR",
        "FC",
        "LFE",
        "BL",
        "BR",
        "FLC",
        "FRC",
        "BC",
        "SL",
        "SR",
        "TC",
        "TFL",
        "TFC",
        "TFR",
        "TBL",
        "TBC",
        "TBR",
    ]
    assert list(SPEAKER_BITS) == names
    assert [SPEAKER_BITS[n] for n in names] == [1 << k for k in range(18)]


def test_7_1_4_mask_is_7_1_plus_four_tops():
    # 0x2D63F is computed in REFERENCES.md as 7.1 (0x63F) + TFL TFR TBL TBR.
    b = SPEAKER_BITS
    assert 0x63F | b["TFL"] | b["TFR"] | b["TBL"] | b["TBR"] == 0x2D63F


def test_mask_to_speakers_in_channel_order():
    # Channels are interleaved in ascending bit order (Microsoft documentation).
    assert mask_to_speakers(0x3F) == ["FL", "FR", "FC", "LFE", "BL", "BR"]
    assert mask_to_speakers(0x63F) == ["FL", "FR", "FC", "LFE", "BL", "BR", "SL", "SR"]
    assert mask_to_speakers(0x80000003) == ["FL", "FR", "bit31"]
    assert mask_to_speakers(0) == []
    for bad in (-1, 1 << 32, 1.5, True):
        with pytest.raises(LayoutError, match=r"32-bit unsigned integer, got"):
            mask_to_speakers(bad)


@pytest.mark.parametrize(
    "mask,channels,layout",
    [(0x3F, 6, "5.1"), (0x60F, 6, "5.1"), (0x63F, 8, "7.1"), (0x2D63F, 12, "7.1.4")],
)
def test_mask_labels_are_the_layout_default_order(mask, channels, layout):
    lay = LAYOUTS[layout]
    labels = labels_from_mask(mask, channels)
    assert labels == list(lay.labels)
    assert resolve_channel_order(lay, labels) == tuple(range(channels))
    assert labels_from_mask(mask, channels, lay) == list(lay.labels)


def test_back_pair_is_the_surround_only_without_sides():
    assert labels_from_mask(0x3F, 6)[4:] == ["Ls", "Rs"]
    assert labels_from_mask(0x63F, 8)[4:] == ["Lrs", "Rrs", "Ls", "Rs"]


def test_mask_that_does_not_describe_the_channels_gives_none():
    assert labels_from_mask(0x3F, 8) is None  # fewer bits than channels
    assert labels_from_mask(0x63F, 6) is None  # more bits than channels
    assert labels_from_mask(0x4000F, 5) is None  # bit 18 has no defined position


def test_other_positions_and_layout_labels():
    b = SPEAKER_BITS
    mask = b["FL"] | b["FR"] | b["FLC"] | b["FRC"] | b["BC"] | b["TC"] | b["TFC"] | b["TBC"]
    assert labels_from_mask(mask, 8) == ["L", "R", "Lc", "Rc", "Bc", "Tc", "Tfc", "Trc"]
    # With a layout, its own labels replace ours where it has the channel.
    custom = layout_from_dict(
        {
            "speakers": [
                {"label": n, "azimuth": a, "elevation": 0}
                for n, a in [("FL", 30), ("FR", -30), ("FC", 0), ("SL", 90), ("SR", -90)]
            ]
        }
    )
    assert labels_from_mask(0x607, 5, custom) == ["FL", "FR", "FC", "SL", "SR"]
    assert labels_from_mask(0x607, 5) == ["L", "R", "C", "Ls", "Rs"]


@pytest.mark.parametrize("mask,channels", MASKS[:1] + MASKS[2:])
def test_mask_for_labels_inverts_labels_from_mask(mask, channels):
    assert mask_for_labels(labels_from_mask(mask, channels)) == mask


def test_mask_for_labels_edge_cases():
    # 5.1 with side bits reads as the same labels; the inverse writes the common 0x3F.
    assert mask_for_labels(labels_from_mask(0x60F, 6)) == 0x3F
    assert mask_for_labels(["FL", "FR", "TFL", "TFR"]) == 0x5003
    assert mask_for_labels(["R", "L"]) is None  # not ascending bit order
    assert mask_for_labels(["L", "R", "Lw", "Rw"]) is None  # wides have no bit
    assert mask_for_labels(["L", "L"]) is None  # one bit twice
    assert mask_for_labels(["Stage", "Gallery"]) is None  # free text
    assert mask_for_labels([]) is None
