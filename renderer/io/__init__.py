"""Audio in and out: probing stems, streaming reads, the output writer, WAV headers.

WAV headers are walked by one chunk walker (:class:`RiffWalk`) for every reader of them:
the channel mask here, the ADM reader's ``chna``/``axml`` in ``objects``.

soundfile is imported in :mod:`._codec` and nowhere else in the renderer.
"""

from __future__ import annotations

from ._chunks import RiffChunk, RiffWalk, WaveFormat, parse_wave_format
from ._levels import (
    LOW_SHARE_HZ,
    OVERVIEW_POINTS,
    ChannelLevels,
    StemLevels,
    measure_levels,
)
from .audio import (
    INPUT_FORMATS,
    NonFiniteSample,
    OutputWriter,
    StemInfo,
    StemReader,
    audio_formats,
    probe_stem,
    read_audio,
    scan_stem,
    subtype_for,
    write_audio,
)
from .bw64 import Rf64View, audio_source
from .wav_header import WAVE_FORMAT_EXTENSIBLE, read_channel_mask

__all__ = [
    "INPUT_FORMATS",
    "LOW_SHARE_HZ",
    "OVERVIEW_POINTS",
    "WAVE_FORMAT_EXTENSIBLE",
    "ChannelLevels",
    "NonFiniteSample",
    "OutputWriter",
    "RiffChunk",
    "RiffWalk",
    "Rf64View",
    "StemInfo",
    "StemLevels",
    "StemReader",
    "WaveFormat",
    "audio_formats",
    "audio_source",
    "measure_levels",
    "parse_wave_format",
    "probe_stem",
    "read_audio",
    "read_channel_mask",
    "scan_stem",
    "subtype_for",
    "write_audio",
]
