"""Generators of ADM broadcast WAVs for the tests: the renderer's own master writer
(:mod:`earfold.renderer.objects.writer`), one writer for the tests and the benchmark.

The chunk layouts follow Microsoft's RIFF/WAVE, EBU Tech 3306 and ITU-R BS.2088; the XML
the structure and examples of ITU-R BS.2076-2. The writer can also write what no careful
encoder would: wrong counts, chunks past the end, no ds64.
"""

from __future__ import annotations

from earfold.renderer.objects.writer import (
    audio_object,
    channel,
    chna_body,
    content,
    document,
    fmt_body,
    object_block,
    pack,
    programme,
    seconds,
    speaker_block,
    stream_and_track,
    write_master,
)

__all__ = [
    "BED_51",
    "audio_object",
    "channel",
    "chna_body",
    "content",
    "document",
    "fmt_body",
    "object_block",
    "pack",
    "programme",
    "seconds",
    "speaker_block",
    "stream_and_track",
    "uid",
    "write_master",
]


def uid(track: int) -> str:
    """The audioTrackUID the tests give file track ``track`` (1-based)."""
    return f"ATU_{track:08X}"


#: A 5.1 bed on tracks 1-6 as chna entries (track, UID, track format, the BS.2094 common
#: 5.1 pack AP_00010003).
BED_51 = [(k, uid(k), f"AT_0001000{k}_01", "AP_00010003") for k in range(1, 7)]
