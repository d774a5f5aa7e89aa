"""Streaming audio input and output: the public surface of the audio modules.

Stems are probed once into a frozen :class:`StemInfo`, then read in blocks by
:class:`StemReader`, so memory does not grow with the length of a file. Renders are
written by :class:`OutputWriter`, which quantises (with TPDF dither at 16 bits), clips,
and only moves the finished file into place when everything went well.

Arrays are frames x channels, float32, at every edge of this module.

The work is done in private modules: :mod:`._probe` (:class:`StemInfo`,
:func:`probe_stem`), :mod:`._reader` (:class:`StemReader`, :func:`read_audio`),
:mod:`._writer` (:class:`OutputWriter`, :func:`write_audio`, formats and subtypes), all
reaching libsndfile through :mod:`._codec`, the one module that imports soundfile.

Decisions worth knowing
-----------------------
* Several mono files make one stem, channels in the order given. Files may differ in
  length: the stem is as long as the longest, shorter files are padded with silence,
  and :attr:`StemInfo.warnings` says so (:attr:`StemInfo.frames_per_file` has the
  lengths).
* A WAV file whose header promises more data than the file holds (a copy cut short) is
  read as far as it goes: :attr:`StemInfo.frames` is the number of frames actually
  present, and a warning names the shortfall. Refusing such files would lose a usable
  stem; pretending they are whole would misreport the length.
* Input formats are limited to the lossless containers stems are delivered in
  (:data:`INPUT_FORMATS`); the file's content decides, not its extension.
* PCM output is quantised here, not by libsndfile, so that the scale (2**(bits-1), the
  same one used when reading), the dither and the clip count do not depend on the
  libsndfile version (older versions scaled float to 16 bits by 0x7FFF on write but
  0x8000 on read).
"""

from __future__ import annotations

from ._probe import (
    INPUT_FORMATS,
    MAX_CHANNELS,
    MAX_SAMPLERATE,
    MIN_SAMPLERATE,
    StemInfo,
    probe_stem,
)
from ._reader import NonFiniteSample, StemReader, read_audio, scan_stem
from ._writer import (
    OUTPUT_FORMATS,
    OUTPUT_SUBTYPES,
    RIFF_LIMIT_BYTES,
    OutputWriter,
    audio_formats,
    subtype_for,
    write_audio,
)

__all__ = [
    "INPUT_FORMATS",
    "MAX_CHANNELS",
    "MAX_SAMPLERATE",
    "MIN_SAMPLERATE",
    "OUTPUT_FORMATS",
    "NonFiniteSample",
    "OUTPUT_SUBTYPES",
    "RIFF_LIMIT_BYTES",
    "OutputWriter",
    "StemInfo",
    "StemReader",
    "audio_formats",
    "probe_stem",
    "read_audio",
    "scan_stem",
    "subtype_for",
    "write_audio",
]
