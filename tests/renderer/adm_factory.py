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
    "write_master",
]
