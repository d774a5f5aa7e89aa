"""Probing a stem: what its files hold, checked, without reading the audio."""

from __future__ import annotations

import dataclasses
import os
import re
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from ..errors import AudioError
from ._codec import CodecError, failure_reason, file_info
from .wav_header import read_channel_mask

__all__ = [
    "INPUT_FORMATS",
    "MAX_CHANNELS",
    "MAX_SAMPLERATE",
    "MIN_SAMPLERATE",
    "StemInfo",
    "probe_stem",
]

MAX_CHANNELS = 128
"""Most channels a stem may have (9.1.6 is 16 and 22.2 is 24; 128 leaves room for
object beds and guards against a corrupt header that claims thousands)."""

MIN_SAMPLERATE = 8000
"""Lowest sample rate accepted, in Hz (below it an HRIR's useful band is cut away)."""

MAX_SAMPLERATE = 384000
"""Highest sample rate accepted, in Hz (the top rate of professional converters)."""

INPUT_FORMATS = ("WAV", "WAVEX", "RF64", "W64", "FLAC", "AIFF", "CAF")
"""soundfile major formats accepted as stems: the lossless containers used to deliver
multichannel stems. Others that libsndfile can decode are refused by name."""

# libsndfile's WAV header log, e.g. "data : 2000 (should be 1200)", when the data chunk
# declares more bytes than the file holds.
_SHORT_DATA = re.compile(r"^data\s*:\s*(\d+)\s*\(should be (\d+)\)", re.MULTILINE)


@dataclass(frozen=True)
class StemInfo:
    """What :func:`probe_stem` found out about a stem.

    Attributes
    ----------
    paths : tuple of str
        One interleaved file, or several mono files (one channel each, in order).
    format, subtype : str
        soundfile major format and subtype of the (first) file, e.g. ``"WAV"``,
        ``"PCM_24"``.
    samplerate : int
        Sample rate in Hz, common to all files.
    channels : int
        Total channels of the stem.
    frames : int
        Length of the stem in frames (the longest file for several mono files).
    channel_mask : int or None
        WAVE_FORMAT_EXTENSIBLE channel mask of a single interleaved file, if it has one.
    frames_per_file : tuple of int
        Frames of each file; they differ when shorter mono files are padded.
    warnings : tuple of str
        Things a report should mention (padding, a file cut short).
    start : int
        First frame that :class:`StemReader` reads (0: the start of the files). With
        :meth:`window`, ``frames`` counts from here.
    """

    paths: tuple[str, ...]
    format: str
    subtype: str
    samplerate: int
    channels: int
    frames: int
    channel_mask: int | None = None
    frames_per_file: tuple[int, ...] = ()
    warnings: tuple[str, ...] = ()
    start: int = 0

    @property
    def duration(self) -> float:
        """Length of the stem in seconds."""
        return self.frames / self.samplerate

    def window(self, start: int, frames: int) -> StemInfo:
        """The same stem limited to ``frames`` frames from frame ``start`` (clamped to the
        stem), for rendering an excerpt without reading the rest.

        Raises
        ------
        AudioError
            If ``start`` is negative or not before the end, or ``frames`` is not positive.
        """
        start, frames = int(start), int(frames)
        if start < 0 or start >= self.start + self.frames or frames < 1:
            raise AudioError(
                f"an excerpt from frame {start} of {frames} frame(s) does not fit a stem of "
                f"{self.frames} frames ({self.duration:.3f} s)"
            )
        frames = min(frames, self.start + self.frames - start)
        return dataclasses.replace(self, start=start, frames=frames)


@dataclass(frozen=True)
class _FileInfo:
    path: str
    format: str
    subtype: str
    samplerate: int
    channels: int
    frames: int
    note: str | None


def _probe_file(path: str) -> _FileInfo:
    p = Path(path)
    if p.is_dir():
        raise AudioError(f"{path!r} is a directory, not an audio file")
    if not p.exists():
        raise AudioError(f"audio file {path!r} does not exist")
    try:
        info = file_info(path)
    except CodecError as exc:
        raise AudioError(f"{path!r} is not a readable audio file: {failure_reason(exc)}") from exc
    except OSError as exc:
        raise AudioError(f"cannot read audio file {path!r}: {exc.strerror or exc}") from exc
    if info.format not in INPUT_FORMATS:
        raise AudioError(
            f"{path!r} is {info.format_info or info.format!s}, which is not accepted as a "
            f"stem; accepted formats: {', '.join(INPUT_FORMATS)}"
        )
    if info.channels < 1:
        raise AudioError(f"{path!r} has no channels")
    if info.frames < 1:
        raise AudioError(f"{path!r} has no audio frames (0 frames)")
    if not MIN_SAMPLERATE <= info.samplerate <= MAX_SAMPLERATE:
        raise AudioError(
            f"{path!r} has an unsupported sample rate of {info.samplerate} Hz; supported: "
            f"{MIN_SAMPLERATE} to {MAX_SAMPLERATE} Hz"
        )
    note = None
    short = _SHORT_DATA.search(info.extra_info or "")
    if short is not None:
        declared, present = int(short.group(1)), int(short.group(2))
        note = (
            f"{p.name!r} is cut short: its header declares {declared} bytes of audio but "
            f"the file holds {present}; read the {info.frames} frames present"
        )
    return _FileInfo(
        path,
        info.format,
        info.subtype,
        int(info.samplerate),
        int(info.channels),
        int(info.frames),
        note,
    )


def probe_stem(paths: Sequence[str | os.PathLike[str]] | str | os.PathLike[str]) -> StemInfo:
    """Check a stem and describe it, without reading its audio.

    Parameters
    ----------
    paths : sequence of path-like
        One file with any number of channels, or several mono files that together form
        the stem, channels in the order given. A single path is accepted as well.

    Returns
    -------
    StemInfo

    Raises
    ------
    AudioError
        Naming the file: missing, a directory, not decodable (with libsndfile's reason),
        a format not in :data:`INPUT_FORMATS`, no channels, no frames, a sample rate
        outside ``MIN_SAMPLERATE..MAX_SAMPLERATE``, more than :data:`MAX_CHANNELS`
        channels; for several files also a multichannel file among them, differing
        sample rates (listed), or the same file given twice.

    Notes
    -----
    Several mono files may differ in length: the stem takes the longest, the others are
    padded with silence when read, and ``warnings`` says so.

    Examples
    --------
    >>> import tempfile
    >>> import numpy as np
    >>> from earfold.renderer.io import write_audio
    >>> folder = tempfile.TemporaryDirectory()
    >>> path = os.path.join(folder.name, "quiet.wav")
    >>> write_audio(path, np.zeros((4800, 6)), 48000)
    >>> info = probe_stem(path)
    >>> info.format, info.subtype, info.channels, info.frames, info.duration
    ('WAV', 'PCM_24', 6, 4800, 0.1)
    >>> folder.cleanup()
    """
    if isinstance(paths, (str, os.PathLike)):
        paths = [paths]
    names = [os.fspath(p) for p in paths]
    if not names:
        raise AudioError("no audio files given: pass one multichannel file or several mono files")
    files = [_probe_file(name) for name in names]
    warnings = [f.note for f in files if f.note]

    if len(files) > 1:
        seen: dict[str, str] = {}
        for f in files:
            key = os.path.realpath(f.path)
            if key in seen:
                raise AudioError(f"{f.path!r} is given twice (also as {seen[key]!r})")
            seen[key] = f.path
        for f in files:
            if f.channels != 1:
                raise AudioError(
                    f"{f.path!r} has {f.channels} channels; when several files form a stem "
                    "each must be mono (or pass one multichannel file alone)"
                )
        rates = sorted({f.samplerate for f in files})
        if len(rates) > 1:
            listing = ", ".join(f"{Path(f.path).name!r}: {f.samplerate} Hz" for f in files)
            raise AudioError(
                f"the mono files differ in sample rate ({listing}); resample them to one rate"
            )
        lengths = [f.frames for f in files]
        if len(set(lengths)) > 1:
            longest = max(lengths)
            short = [f"{Path(f.path).name!r} ({f.frames})" for f in files if f.frames < longest]
            warnings.append(
                f"the mono files differ in length; padded with silence to {longest} frames: "
                + ", ".join(short)
            )

    channels = sum(f.channels for f in files)
    if channels > MAX_CHANNELS:
        what = repr(files[0].path) if len(files) == 1 else f"the {len(files)} files together"
        raise AudioError(f"{what} hold {channels} channels; at most {MAX_CHANNELS} are supported")
    first = files[0]
    return StemInfo(
        paths=tuple(names),
        format=first.format,
        subtype=first.subtype,
        samplerate=first.samplerate,
        channels=channels,
        frames=max(f.frames for f in files),
        channel_mask=read_channel_mask(first.path) if len(files) == 1 else None,
        frames_per_file=tuple(f.frames for f in files),
        warnings=tuple(warnings),
    )
