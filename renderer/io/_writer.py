"""Writing renders: output formats and subtypes, and the atomic, dithering writer."""

from __future__ import annotations

import os
import threading
from pathlib import Path
from types import TracebackType
from typing import Any

import numpy as np
import numpy.typing as npt

from ..blocks import check_block
from ..errors import AudioError, shown
from ..files import AtomicPath
from ._codec import CodecError, SoundFileHandle, failure_reason, known_formats, open_for_writing
from ._probe import INPUT_FORMATS, MAX_CHANNELS, MAX_SAMPLERATE, MIN_SAMPLERATE

__all__ = [
    "OUTPUT_FORMATS",
    "OUTPUT_SUBTYPES",
    "RIFF_LIMIT_BYTES",
    "OutputWriter",
    "audio_formats",
    "subtype_for",
    "write_audio",
]

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

_SYNC_BYTES = 32 << 20
"""Bytes a durable writer lets pile up before a thread of its own starts flushing them
to disk (:class:`_EarlySync`), so that the fsync before the rename has little left to
do. Measured on 600 s of stereo PCM_24 (173 MB): that fsync took 0.05-0.15 s of the
delivery pass, which ran on while the pages went out."""

_FLAC_SUBTYPES = ("PCM_16", "PCM_24")
_FLAC_MAX_CHANNELS = 8  # the FLAC format's own limit (RFC 9639; common practice)
_BYTES_PER_SAMPLE = {"PCM_16": 2, "PCM_24": 3, "FLOAT": 4}
_PCM_BITS = {"PCM_16": 16, "PCM_24": 24}


class _EarlySync:
    """Flush a file being written to disk on a thread of its own, while it grows.

    Each :meth:`flush` (the writer calls it every :data:`_SYNC_BYTES`) has the thread
    run ``fdatasync`` on a descriptor of its own (the kernel waits for the disk, not
    Python). The final fsync before the rename stays the guarantee
    (:class:`earfold.renderer.files.AtomicPath`); a failure here is kept and raised by
    :meth:`stop`, so that it cannot be lost between the two.
    """

    def __init__(self, path: str) -> None:
        self._fd = os.open(path, os.O_WRONLY)
        self._wake = threading.Event()
        self._stopping = False
        self.error: OSError | None = None
        self._thread = threading.Thread(target=self._run, name="earfold-sync", daemon=True)
        self._thread.start()

    def _run(self) -> None:
        while True:
            self._wake.wait()
            self._wake.clear()
            if self._stopping:
                return
            try:
                os.fdatasync(self._fd)
            except OSError as exc:
                self.error = exc
                return

    def flush(self) -> None:
        """Wake the thread: it flushes what was written so far (or, when it is busy,
        flushes again once done)."""
        self._wake.set()

    def stop(self) -> None:
        """Stop the thread (after its flush in progress) and close its descriptor; raise
        the error a flush met, if any."""
        if self._fd < 0:
            return
        self._stopping = True
        self._wake.set()
        self._thread.join()
        os.close(self._fd)
        self._fd = -1
        if self.error is not None:
            raise self.error


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
            f"unsupported output subtype {shown(name)}; choose one of {', '.join(OUTPUT_SUBTYPES)}"
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
            f"unsupported output format {shown(format)}; choose one of {', '.join(OUTPUT_FORMATS)}"
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
                f"channels must be an integer from 1 to {MAX_CHANNELS}, not {shown(channels)}"
            )
        if (
            isinstance(samplerate, bool)
            or not isinstance(samplerate, (int, np.integer))
            or not MIN_SAMPLERATE <= samplerate <= MAX_SAMPLERATE
        ):
            raise AudioError(
                f"unsupported output sample rate {shown(samplerate)}; supported: "
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
        self._frames_encoded = 0
        self.clipped_samples = 0
        self.peak = 0.0
        self.durable = bool(durable)
        self._rng = np.random.Generator(np.random.PCG64(seed))
        try:
            self._spot = AtomicPath(dest, suffix=".part", durable=self.durable)
        except FileExistsError:
            raise AudioError(f"cannot find a free temporary name beside {str(dest)!r}") from None
        except OSError as exc:
            raise AudioError(
                f"cannot create a file beside {str(dest)!r}: {exc.strerror or exc}"
            ) from exc
        self._tmp = self._spot.tmp
        try:
            self._sf: SoundFileHandle | None = open_for_writing(
                self._tmp,
                samplerate=self.samplerate,
                channels=self.channels,
                format=fmt,
                subtype=subtype,
            )
        except BaseException as exc:
            self._spot.discard()
            if isinstance(exc, (CodecError, OSError)):
                raise AudioError(f"cannot write {str(dest)!r}: {failure_reason(exc)}") from exc
            raise
        # Started with the first _SYNC_BYTES written (a small file needs no thread).
        self._sync: _EarlySync | None = None
        self._unsynced = 0 if self.durable else None

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

    def write(self, block: npt.NDArray[np.floating[Any]]) -> None:
        """Append a ``(n, channels)`` block of float samples (nominal range [-1, 1)).

        The same as :meth:`write_encoded` of :meth:`encode`.

        Raises
        ------
        AudioError
            If the block has the wrong shape, holds NaN or infinity, the writer is
            closed, or a WAV without ``frames_hint`` would grow past the RIFF limit.
        """
        self.write_encoded(self.encode(block))

    def encode(self, block: npt.NDArray[np.floating[Any]]) -> npt.NDArray[Any]:
        """Check, count and convert a block for :meth:`write_encoded`, without writing it.

        Encoding (the checks, the peak, clipping, dither and quantisation) and writing
        may run on two threads, one block after another on each, in the same order:
        the file's encoder (libsndfile) then works beside the conversion. Blocks must
        be written in the order they were encoded (the dither noise follows it).
        :attr:`peak` and :attr:`clipped_samples` count the blocks encoded.

        Raises
        ------
        AudioError
            As :meth:`write`.
        """
        if self._sf is None:
            raise AudioError(f"the writer of {self.path!r} is closed")
        x = check_block(block, self.channels)
        n = x.shape[0]
        if n == 0:
            return np.zeros((0, self.channels), dtype=np.float32)
        # Two reductions stand for the finiteness check, the peak and the clip test: min
        # and max propagate NaN and show infinities, and most blocks need nothing more.
        lo, hi = float(np.min(x)), float(np.max(x))
        if not (np.isfinite(lo) and np.isfinite(hi)):
            bad = int(np.argmax(~np.all(np.isfinite(x), axis=1)))
            raise AudioError(
                f"block holds NaN or infinity at frame {self._frames_encoded + bad} of "
                f"{self.path!r}"
            )
        if self.format == "WAV" and _exceeds_riff(
            self._frames_encoded + n, self.channels, self.subtype
        ):
            raise AudioError(
                f"{self.path!r} would exceed the 4 GiB WAV limit; pass frames_hint so it is "
                "written as RF64, or write .rf64 or .w64"
            )
        self.peak = max(self.peak, -lo, hi)
        self._frames_encoded += n
        if self.subtype == "FLOAT":
            return x.astype(np.float32, copy=False)
        if hi >= 1.0 or lo < -1.0:
            self.clipped_samples += int(np.count_nonzero((x >= 1.0) | (x < -1.0)))
        return self._quantise(x)

    def decoded(self, data: npt.NDArray[Any]) -> npt.NDArray[np.float32]:
        """The float32 samples reading the file back gives for a block :meth:`encode`
        returned (as :class:`earfold.renderer.io.StemReader` reads them): the codes
        times the library's scale, 2**-15 at 16 bits and 2**-31 for the top 24 bits of
        an int32, exact in float32; FLOAT blocks as they are."""
        if data.dtype == np.float32:
            return data
        scale = np.float32(2.0**-15 if data.dtype == np.int16 else 2.0**-31)
        out: npt.NDArray[np.float32] = np.multiply(data, scale, dtype=np.float32)
        return out

    def write_encoded(self, data: npt.NDArray[Any]) -> None:
        """Append a block :meth:`encode` returned (the next in encoding order)."""
        if self._sf is None:
            raise AudioError(f"the writer of {self.path!r} is closed")
        if len(data):
            self._sf.write(data)
            self.frames_written += len(data)
            if self._unsynced is not None:
                self._unsynced += len(data) * self.channels * _BYTES_PER_SAMPLE[self.subtype]
                if self._unsynced >= _SYNC_BYTES:
                    self._unsynced = 0
                    self._flush_early()

    def _quantise(self, x: npt.NDArray[np.floating[Any]]) -> npt.NDArray[np.signedinteger[Any]]:
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
        quantised: npt.NDArray[np.signedinteger[Any]] = q
        return quantised

    def close(self) -> None:
        """Finish the file: flush, fsync and move it onto :attr:`path`."""
        if self._sf is None:
            return
        try:
            self._sf.close()
            self._sf = None
            self._stop_sync()
        except BaseException as exc:
            self.abort()
            if isinstance(exc, OSError):
                raise AudioError(f"cannot write {self.path!r}: {failure_reason(exc)}") from exc
            raise
        # Removes the temporary file itself if the fsync or the rename fails.
        self._spot.commit()

    def abort(self) -> None:
        """Discard the temporary file; leave :attr:`path` as it was."""
        if self._sf is not None:
            try:
                self._sf.close()
            except Exception:  # already failing; the file is removed next anyway
                pass
            self._sf = None
        try:
            self._stop_sync()
        except OSError:  # already failing; the file is removed next anyway
            pass
        self._spot.discard()

    def _flush_early(self) -> None:
        """Have the bytes written so far flushed to disk, on the sync thread."""
        if self._sync is None:
            try:
                self._sync = _EarlySync(self._tmp)
            except OSError:  # no early flushing; the fsync before the rename still runs
                self._unsynced = None
                return
        self._sync.flush()

    def _stop_sync(self) -> None:
        sync, self._sync = self._sync, None
        if sync is not None:
            sync.stop()


def _valid_subtypes(fmt: str) -> tuple[str, ...]:
    return _FLAC_SUBTYPES if fmt == "FLAC" else OUTPUT_SUBTYPES


def write_audio(
    path: str | os.PathLike[str], data: npt.ArrayLike, samplerate: int, subtype: str = "PCM_24"
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


def audio_formats() -> dict[str, Any]:
    """What can be read and written, for listings (CLI, HTTP).

    Returns
    -------
    dict
        ``{"input": {"formats": {NAME: description}, "channels": {...},
        "samplerate_hz": {...}}, "output": {EXT: {"format": NAME, "subtypes": [...]}}}``;
        JSON-serialisable.
    """
    known = known_formats()
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
