"""Streaming audio input and output: the renderer's one door to soundfile.

Stems are probed once into a frozen :class:`StemInfo`, then read in blocks by
:class:`StemReader`, so memory does not grow with the length of a file. Renders are
written by :class:`OutputWriter`, which quantises (with TPDF dither at 16 bits), clips,
and only moves the finished file into place when everything went well.

Arrays are frames x channels, float32, at every edge of this module.

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

import dataclasses
import os
import re
import secrets
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from types import TracebackType

import numpy as np
import soundfile as sf

from ..blocks import check_block
from ..errors import AudioError
from .wav_header import read_channel_mask

__all__ = [
    "INPUT_FORMATS",
    "MAX_CHANNELS",
    "MAX_SAMPLERATE",
    "MIN_SAMPLERATE",
    "OUTPUT_FORMATS",
    "OUTPUT_SUBTYPES",
    "RIFF_LIMIT_BYTES",
    "OutputWriter",
    "StemInfo",
    "StemReader",
    "audio_formats",
    "probe_stem",
    "read_audio",
    "subtype_for",
    "write_audio",
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

OUTPUT_FORMATS = {"wav": "WAV", "flac": "FLAC", "w64": "W64", "rf64": "RF64"}
"""Output file extension (or ``format=`` name) -> soundfile major format."""

OUTPUT_SUBTYPES = ("PCM_16", "PCM_24", "FLOAT")
"""Sample formats a render can be written in."""

RIFF_LIMIT_BYTES = 2**32 - 1
"""Largest size a RIFF chunk can declare (a 32-bit field): a WAV file must stay below
this, larger data needs RF64 (EBU Tech 3306; from memory) or W64."""

_HEADER_ALLOWANCE = 1 << 16
"""Bytes set aside for WAV header chunks when deciding whether data fits the RIFF limit.
Generous on purpose: over-estimating only means a file just under 4 GiB is written as
RF64, under-estimating would write a WAV whose sizes overflow."""

_FLAC_SUBTYPES = ("PCM_16", "PCM_24")
_FLAC_MAX_CHANNELS = 8  # the FLAC format's own limit (RFC 9639; common practice)
_BYTES_PER_SAMPLE = {"PCM_16": 2, "PCM_24": 3, "FLOAT": 4}
_PCM_BITS = {"PCM_16": 16, "PCM_24": 24}

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


def _soundfile_reason(exc: Exception) -> str:
    # LibsndfileError carries libsndfile's own text; str(exc) repeats the path.
    return str(getattr(exc, "error_string", None) or exc)


def _probe_file(path: str) -> _FileInfo:
    p = Path(path)
    if p.is_dir():
        raise AudioError(f"{path!r} is a directory, not an audio file")
    if not p.exists():
        raise AudioError(f"audio file {path!r} does not exist")
    try:
        info = sf.info(path)
    except sf.SoundFileError as exc:
        raise AudioError(
            f"{path!r} is not a readable audio file: {_soundfile_reason(exc)}"
        ) from exc
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


class StemReader:
    """Read a probed stem in blocks, as a context manager.

    Parameters
    ----------
    info : StemInfo
        From :func:`probe_stem`. Files are opened here and checked still to match it.

    Attributes
    ----------
    frames_read : int
        Frames yielded so far by the current :meth:`blocks` iteration.
    """

    def __init__(self, info: StemInfo) -> None:
        self.info = info
        self.frames_read = 0
        self._files: list[sf.SoundFile] = []
        try:
            for path in info.paths:
                try:
                    f = sf.SoundFile(path)
                except (sf.SoundFileError, OSError) as exc:
                    raise AudioError(
                        f"cannot open {path!r} for reading: {_soundfile_reason(exc)}"
                    ) from exc
                self._files.append(f)
                expected = 1 if len(info.paths) > 1 else info.channels
                if f.channels != expected or f.samplerate != info.samplerate:
                    raise AudioError(
                        f"{path!r} changed since it was probed: now {f.channels} channel(s) at "
                        f"{f.samplerate} Hz, expected {expected} at {info.samplerate} Hz"
                    )
        except BaseException:
            self.close()
            raise

    def __enter__(self) -> StemReader:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()

    def close(self) -> None:
        """Close the files (also done on leaving the ``with`` block)."""
        for f in self._files:
            f.close()
        self._files = []

    def blocks(self, blocksize: int, *, reuse: bool = False) -> Iterator[np.ndarray]:
        """Yield the stem from its start as ``(n, channels)`` float32 blocks.

        Parameters
        ----------
        blocksize : int
            Most frames per block; every block but the last has exactly this many.
        reuse : bool, optional
            If True, every block is a view of one buffer that the next block overwrites
            (no allocation per block; copy what you keep). By default each block is a
            new array. Either way memory depends on ``blocksize``, not on file length.

        Notes
        -----
        Several mono files are read in lock-step and stacked as columns, in the order of
        ``info.paths``; a file that ends early contributes silence.
        """
        if (
            isinstance(blocksize, bool)
            or not isinstance(blocksize, (int, np.integer))
            or blocksize < 1
        ):
            raise AudioError(f"blocksize must be a positive integer, not {blocksize!r}")
        if not self._files:
            raise AudioError(f"the reader of {self.info.paths[0]!r} is closed")
        blocksize = int(blocksize)
        channels = self.info.channels
        for f in self._files:
            # A mono file shorter than the window's start contributes silence.
            f.seek(min(self.info.start, f.frames))
        self.frames_read = 0
        return self._iterate(blocksize, channels, reuse)

    def _iterate(self, blocksize: int, channels: int, reuse: bool) -> Iterator[np.ndarray]:
        total = self.info.frames
        single = len(self._files) == 1
        # One (blocksize, 1) column buffer for the mono files: soundfile reads only into
        # contiguous memory, and a column of the stacked block is not contiguous.
        column = None if single else np.empty((blocksize, 1), dtype=np.float32)
        shared = np.empty((blocksize, channels), dtype=np.float32) if reuse else None
        while self.frames_read < total:
            n = min(blocksize, total - self.frames_read)
            out = shared[:n] if shared is not None else np.empty((n, channels), np.float32)
            if single:
                got = len(self._files[0].read(n, dtype="float32", always_2d=True, out=out))
                if got == 0:
                    return  # the file holds less than it did when probed
                out = out[:got]
            else:
                assert column is not None
                got = 0
                for i, f in enumerate(self._files):
                    k = len(f.read(n, dtype="float32", always_2d=True, out=column[:n]))
                    out[:k, i] = column[:k, 0]
                    out[k:, i] = 0.0
                    got = max(got, k)
                if got == 0:
                    return
                # Within the stem's length a file that ended early is padded: yield n.
                got = n
            self.frames_read += got
            yield out


def subtype_for(name: str) -> str:
    """The canonical output subtype for ``name`` (case-insensitive).

    Raises
    ------
    AudioError
        If ``name`` is not one of :data:`OUTPUT_SUBTYPES`.
    """
    key = name.strip().upper() if isinstance(name, str) else None
    if key not in OUTPUT_SUBTYPES:
        raise AudioError(
            f"unsupported output subtype {name!r}; choose one of {', '.join(OUTPUT_SUBTYPES)}"
        )
    return key


def _output_format(path: Path, format: str | None) -> str:
    if format is None:
        ext = path.suffix.lower().lstrip(".")
        if ext not in OUTPUT_FORMATS:
            raise AudioError(
                f"cannot tell the output format from {str(path)!r}; use one of the extensions "
                f"{', '.join('.' + e for e in OUTPUT_FORMATS)} or pass format="
            )
        return OUTPUT_FORMATS[ext]
    key = format.strip().lower() if isinstance(format, str) else None
    if key not in OUTPUT_FORMATS:
        raise AudioError(
            f"unsupported output format {format!r}; choose one of {', '.join(OUTPUT_FORMATS)}"
        )
    return OUTPUT_FORMATS[key]


def _exceeds_riff(frames: int, channels: int, subtype: str) -> bool:
    data = frames * channels * _BYTES_PER_SAMPLE[subtype]
    # The module constant is read at call time, so tests may lower it.
    return data + _HEADER_ALLOWANCE > RIFF_LIMIT_BYTES


class OutputWriter:
    """Write a render block by block, atomically, as a context manager.

    Parameters
    ----------
    path : path-like
        Destination file. Its folder must exist.
    samplerate : int
        Sample rate in Hz.
    channels : int, optional
        Channels per frame (2 for a binaural render).
    format : str, optional
        ``"wav"``, ``"flac"``, ``"w64"`` or ``"rf64"`` (case-insensitive). By default
        taken from the extension of ``path``. WAV switches to RF64 when ``frames_hint``
        shows the data would exceed the 4 GiB RIFF limit (:attr:`format` tells which
        was written).
    subtype : str, optional
        ``"PCM_16"``, ``"PCM_24"`` (default) or ``"FLOAT"``. FLAC takes PCM only.
    frames_hint : int, optional
        Expected number of frames, used only to choose between WAV and RF64.
    seed : int, optional
        Seed of the dither noise (PCG64), so that a render is reproducible.
    durable : bool, optional
        Flush the file to disk (fsync) before renaming it, and the folder after (the
        default). False for scratch files that are read back and removed at once, such
        as the float render the delivery stage reads: an fsync there only costs time.

    Attributes
    ----------
    frames_written : int
        Frames written so far.
    clipped_samples : int
        Samples outside [-1, 1) that were clipped (PCM subtypes only).
    peak : float
        Largest absolute sample value written, before clipping and quantisation.

    Notes
    -----
    Data goes to a temporary file in the destination folder (``.NAME.XXXXXXXX.part``).
    Leaving the ``with`` block normally closes it, fsyncs it and ``os.replace``s it onto
    ``path``; leaving with an exception removes it and leaves any file at ``path`` as it
    was. Without ``with``, call :meth:`close` to commit or :meth:`abort` to discard.

    PCM_16 is dithered with TPDF noise, the sum of two independent uniform sources of
    +/-0.5 LSB each (triangular, +/-1 LSB peak), added before rounding (common
    practice: it makes the error independent of the signal, with variance LSB^2/4).
    PCM_24 and FLOAT are not dithered. FLOAT is never clipped.
    """

    def __init__(
        self,
        path: str | os.PathLike[str],
        samplerate: int,
        channels: int = 2,
        *,
        format: str | None = None,
        subtype: str = "PCM_24",
        frames_hint: int | None = None,
        seed: int = 0,
        durable: bool = True,
    ) -> None:
        dest = Path(os.fspath(path))
        fmt = _output_format(dest, format)
        subtype = subtype_for(subtype)
        if (
            isinstance(channels, bool)
            or not isinstance(channels, (int, np.integer))
            or not 1 <= channels <= MAX_CHANNELS
        ):
            raise AudioError(
                f"channels must be an integer from 1 to {MAX_CHANNELS}, not {channels!r}"
            )
        if (
            isinstance(samplerate, bool)
            or not isinstance(samplerate, (int, np.integer))
            or not MIN_SAMPLERATE <= samplerate <= MAX_SAMPLERATE
        ):
            raise AudioError(
                f"unsupported output sample rate {samplerate!r}; supported: "
                f"{MIN_SAMPLERATE} to {MAX_SAMPLERATE} Hz"
            )
        if fmt == "FLAC":
            if subtype not in _FLAC_SUBTYPES:
                raise AudioError(
                    f"FLAC cannot hold subtype {subtype!r}; valid combinations: "
                    + "; ".join(
                        f"{e}: {', '.join(_valid_subtypes(f))}" for e, f in OUTPUT_FORMATS.items()
                    )
                )
            if channels > _FLAC_MAX_CHANNELS:
                raise AudioError(
                    f"FLAC holds at most {_FLAC_MAX_CHANNELS} channels, not "
                    f"{channels}; write .wav, .w64 or .rf64"
                )
        if (
            fmt == "WAV"
            and frames_hint is not None
            and _exceeds_riff(int(frames_hint), int(channels), subtype)
        ):
            fmt = "RF64"
        if dest.is_dir():
            raise AudioError(f"output path {str(dest)!r} is a directory")
        if not dest.parent.is_dir():
            raise AudioError(f"the folder of output {str(dest)!r} does not exist")

        self.path = str(dest)
        self.format = fmt
        self.subtype = subtype
        self.samplerate = int(samplerate)
        self.channels = int(channels)
        self.frames_written = 0
        self.clipped_samples = 0
        self.peak = 0.0
        self.durable = bool(durable)
        self._rng = np.random.Generator(np.random.PCG64(seed))
        self._tmp = self._create_temp(dest)
        try:
            self._sf: sf.SoundFile | None = sf.SoundFile(
                self._tmp,
                mode="w",
                samplerate=self.samplerate,
                channels=self.channels,
                format=fmt,
                subtype=subtype,
            )
        except BaseException as exc:
            self._remove_temp()
            if isinstance(exc, (sf.SoundFileError, OSError)):
                raise AudioError(f"cannot write {str(dest)!r}: {_soundfile_reason(exc)}") from exc
            raise

    @staticmethod
    def _create_temp(dest: Path) -> str:
        # O_EXCL with a random name: never clobber another writer's temporary file; mode
        # 0o666 lets the umask decide the final permissions, as for any new file.
        for _ in range(16):
            tmp = dest.parent / f".{dest.name}.{secrets.token_hex(4)}.part"
            try:
                fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
            except FileExistsError:
                continue
            except OSError as exc:
                raise AudioError(
                    f"cannot create a file beside {str(dest)!r}: {exc.strerror or exc}"
                ) from exc
            os.close(fd)
            return str(tmp)
        raise AudioError(f"cannot find a free temporary name beside {str(dest)!r}")

    def __enter__(self) -> OutputWriter:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        if exc_type is None:
            self.close()
        else:
            self.abort()

    def write(self, block: np.ndarray) -> None:
        """Append a ``(n, channels)`` block of float samples (nominal range [-1, 1)).

        Raises
        ------
        AudioError
            If the block has the wrong shape, holds NaN or infinity, the writer is
            closed, or a WAV without ``frames_hint`` would grow past the RIFF limit.
        """
        if self._sf is None:
            raise AudioError(f"the writer of {self.path!r} is closed")
        x = check_block(block, self.channels)
        n = x.shape[0]
        if n == 0:
            return
        # Two reductions stand for the finiteness check, the peak and the clip test: min
        # and max propagate NaN and show infinities, and most blocks need nothing more.
        lo, hi = float(np.min(x)), float(np.max(x))
        if not (np.isfinite(lo) and np.isfinite(hi)):
            bad = int(np.argmax(~np.all(np.isfinite(x), axis=1)))
            raise AudioError(
                f"block holds NaN or infinity at frame {self.frames_written + bad} of {self.path!r}"
            )
        if self.format == "WAV" and _exceeds_riff(
            self.frames_written + n, self.channels, self.subtype
        ):
            raise AudioError(
                f"{self.path!r} would exceed the 4 GiB WAV limit; pass frames_hint so it is "
                "written as RF64, or write .rf64 or .w64"
            )
        self.peak = max(self.peak, -lo, hi)
        if self.subtype == "FLOAT":
            self._sf.write(x.astype(np.float32, copy=False))
        else:
            if hi >= 1.0 or lo < -1.0:
                self.clipped_samples += int(np.count_nonzero((x >= 1.0) | (x < -1.0)))
            self._sf.write(self._quantise(x))
        self.frames_written += n

    def _quantise(self, x: np.ndarray) -> np.ndarray:
        bits = _PCM_BITS[self.subtype]
        scale = float(2 ** (bits - 1))
        if bits == 16:
            y = x.astype(np.float64) * scale
            # Both sources of a sample drawn together, frame by frame: the noise sequence
            # is then the same whatever the block sizes.
            u = self._rng.random((x.shape[0], x.shape[1], 2))
            y += u[..., 0] + u[..., 1] - 1.0
            np.rint(y, out=y)
            np.clip(y, -scale, scale - 1.0, out=y)
            return y.astype(np.int16)
        # 24 bits fit float32's 24-bit significand: scaling by a power of two, rounding
        # and clipping are exact in float32, so for float32 input this equals the float64
        # computation at a quarter of the memory traffic (the final write counts against
        # the delivery stage's time budget).
        work = np.float32 if x.dtype == np.float32 else np.float64
        y = np.multiply(x, work(scale), dtype=work)
        np.rint(y, out=y)
        np.clip(y, work(-scale), work(scale - 1.0), out=y)
        q = y.astype(np.int32)
        # libsndfile writes the top 24 bits of int32 samples to PCM_24.
        q <<= 8
        return q

    def close(self) -> None:
        """Finish the file: flush, fsync and move it onto :attr:`path`."""
        if self._sf is None:
            return
        try:
            self._sf.close()
            self._sf = None
            if self.durable:
                fd = os.open(self._tmp, os.O_RDONLY)
                try:
                    os.fsync(fd)
                finally:
                    os.close(fd)
            os.replace(self._tmp, self.path)
        except BaseException:
            self.abort()
            raise
        if self.durable:
            _fsync_dir(os.path.dirname(self.path) or ".")

    def abort(self) -> None:
        """Discard the temporary file; leave :attr:`path` as it was."""
        if self._sf is not None:
            try:
                self._sf.close()
            except Exception:  # already failing; the file is removed next anyway
                pass
            self._sf = None
        self._remove_temp()

    def _remove_temp(self) -> None:
        try:
            os.unlink(self._tmp)
        except FileNotFoundError:
            pass


def _fsync_dir(folder: str) -> None:
    # Makes the rename itself durable. Not every platform can open a folder (Windows).
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _valid_subtypes(fmt: str) -> tuple[str, ...]:
    return _FLAC_SUBTYPES if fmt == "FLAC" else OUTPUT_SUBTYPES


def read_audio(path: str | os.PathLike[str]) -> tuple[np.ndarray, int]:
    """Read a whole (small) file: ``(frames x channels float32 array, sample rate)``.

    Checked like :func:`probe_stem`; meant for tests and tools, not for stems of
    unknown length.
    """
    info = probe_stem([path])
    data = np.empty((info.frames, info.channels), dtype=np.float32)
    done = 0
    with StemReader(info) as reader:
        for block in reader.blocks(1 << 16, reuse=True):
            data[done : done + len(block)] = block
            done += len(block)
    return data[:done], info.samplerate


def write_audio(
    path: str | os.PathLike[str], data: np.ndarray, samplerate: int, subtype: str = "PCM_24"
) -> None:
    """Write a whole (small) array atomically, format from the extension.

    ``data`` is frames x channels; a 1-D array is written as one channel. PCM_16 is
    dithered with seed 0.
    """
    x = np.asarray(data)
    if x.ndim == 1:
        x = x[:, None]
    if x.ndim != 2:
        raise AudioError(f"expected audio of shape (frames, channels), got {x.shape!r}")
    with OutputWriter(
        path, samplerate, x.shape[1], subtype=subtype, frames_hint=x.shape[0]
    ) as writer:
        writer.write(x)


def audio_formats() -> dict:
    """What can be read and written, for listings (CLI, HTTP).

    Returns
    -------
    dict
        ``{"input": {"formats": {NAME: description}, "channels": {...},
        "samplerate_hz": {...}}, "output": {EXT: {"format": NAME, "subtypes": [...]}}}``;
        JSON-serialisable.
    """
    known = sf.available_formats()
    return {
        "input": {
            "formats": {name: known.get(name, name) for name in INPUT_FORMATS},
            "channels": {"min": 1, "max": MAX_CHANNELS},
            "samplerate_hz": {"min": MIN_SAMPLERATE, "max": MAX_SAMPLERATE},
            "several_files": "mono files of one sample rate; shorter ones padded with silence",
        },
        "output": {
            ext: {
                "format": fmt,
                "subtypes": list(_valid_subtypes(fmt)),
                **(
                    {"note": "written as RF64 when the data would exceed 4 GiB"}
                    if fmt == "WAV"
                    else {}
                ),
            }
            for ext, fmt in OUTPUT_FORMATS.items()
        },
    }
