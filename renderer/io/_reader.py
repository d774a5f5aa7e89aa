"""Reading a probed stem in blocks, and a whole small file at once."""

from __future__ import annotations

import os
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from types import TracebackType

import numpy as np
import numpy.typing as npt

from ..errors import AudioError, shown
from ._codec import CodecError, SoundFileHandle, failure_reason, open_for_reading
from ._probe import StemInfo, probe_stem

__all__ = ["SCAN_BLOCK_FRAMES", "NonFiniteSample", "StemReader", "read_audio", "scan_stem"]

SCAN_BLOCK_FRAMES = 65536
"""Frames per block when :func:`scan_stem` reads a stem (a few MB whatever its length)."""


@dataclass(frozen=True)
class NonFiniteSample:
    """The first sample of a stem that is NaN or infinite, as :func:`scan_stem` finds it.

    Attributes
    ----------
    path : str
        The file that holds it (for several mono files, that channel's file).
    channel : int
        Channel of the stem, counted from 1.
    label : str or None
        The channel's label, where the caller knew it.
    frame : int
        Frame in the file, counted from 0.
    seconds : float
        The frame's time in the file.
    kind : str
        ``"NaN"`` or ``"infinity"``.
    message : str
        What is wrong and what to do, in words; the file is shown by name only.
    """

    path: str
    channel: int
    label: str | None
    frame: int
    seconds: float
    kind: str
    message: str


class StemReader:
    """Read a probed stem in blocks, as a context manager.

    Parameters
    ----------
    info : StemInfo
        From :func:`probe_stem`. Files are opened here and checked still to match it.
    labels : sequence of str, optional
        The label of each channel in file order, used to name a channel in messages.
    check_finite : bool
        Refuse a block that holds NaN or infinity (:class:`AudioError` naming the file,
        the channel and the frame; see :func:`scan_stem`). On by default: such a sample
        would spread through every filter it meets and ruin the whole render.

    Attributes
    ----------
    frames_read : int
        Frames yielded so far by the current :meth:`blocks` iteration.
    """

    def __init__(
        self,
        info: StemInfo,
        *,
        labels: Sequence[str] | None = None,
        check_finite: bool = True,
    ) -> None:
        self.info = info
        self.frames_read = 0
        self._labels = None if labels is None else [str(x) for x in labels]
        self._check_finite = check_finite
        self._files: list[SoundFileHandle] = []
        try:
            for path in info.paths:
                try:
                    f = open_for_reading(path)
                except (CodecError, OSError) as exc:
                    raise AudioError(
                        f"cannot open {path!r} for reading: {failure_reason(exc)}"
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

    def blocks(
        self,
        blocksize: int,
        *,
        reuse: bool = False,
        buffers: int = 1,
        wanted: Callable[[int, int], bool] | None = None,
    ) -> Iterator[npt.NDArray[np.float32]]:
        """Yield the stem from its start as ``(n, channels)`` float32 blocks.

        Parameters
        ----------
        blocksize : int
            Most frames per block; every block but the last has exactly this many.
        reuse : bool, optional
            If True, every block is a view of one of ``buffers`` buffers, used in turn: a
            block is overwritten ``buffers`` blocks later (no allocation per block; copy
            what you keep longer). By default each block is a new array. Either way
            memory depends on ``blocksize``, not on file length.
        buffers : int, optional
            Buffers a reused block cycles through: one more than the blocks a consumer
            may hold at once, such as a queue's depth plus the block each side holds
            (:func:`earfold.renderer.pipeline.prefetch`).
        wanted : callable, optional
            ``wanted(first, stop)`` says whether the caller needs the block of frames
            ``first`` to ``stop`` (counted from the stem's start). A block it does not
            want is not read (nor decoded): the files are moved past it and it comes as
            silence, of the same length. By default every block is read.

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
            raise AudioError(f"blocksize must be a positive integer, not {shown(blocksize)}")
        if not self._files:
            raise AudioError(f"the reader of {self.info.paths[0]!r} is closed")
        if isinstance(buffers, bool) or not isinstance(buffers, (int, np.integer)) or buffers < 1:
            raise AudioError(f"buffers must be a positive integer, not {shown(buffers)}")
        blocksize = int(blocksize)
        channels = self.info.channels
        for f in self._files:
            # A mono file shorter than the window's start contributes silence.
            f.seek(min(self.info.start, f.frames))
        self.frames_read = 0
        return self._iterate(blocksize, channels, int(buffers) if reuse else 0, wanted)

    def _iterate(
        self,
        blocksize: int,
        channels: int,
        buffers: int,
        wanted: Callable[[int, int], bool] | None,
    ) -> Iterator[npt.NDArray[np.float32]]:
        total = self.info.frames
        single = len(self._files) == 1
        # One (blocksize, 1) column buffer for the mono files: soundfile reads only into
        # contiguous memory, and a column of the stacked block is not contiguous.
        column = None if single else np.empty((blocksize, 1), dtype=np.float32)
        # Reused buffers also spare the pages of a new array: a fresh block of a few MB is
        # new memory the kernel maps and zeroes, page by page, at every read.
        ring = [np.empty((blocksize, channels), dtype=np.float32) for _ in range(buffers)]
        turn = 0
        while self.frames_read < total:
            n = min(blocksize, total - self.frames_read)
            if ring:
                out = ring[turn][:n]
                turn = (turn + 1) % len(ring)
            else:
                out = np.empty((n, channels), np.float32)
            if wanted is not None and not wanted(self.frames_read, self.frames_read + n):
                for f in self._files:
                    f.seek(min(self.info.start + self.frames_read + n, f.frames))
                out[...] = 0.0
                self.frames_read += n
                yield out
                continue
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
            if self._check_finite and not np.all(np.isfinite(out)):
                raise AudioError(self._non_finite(out, self.frames_read).message)
            self.frames_read += got
            yield out

    def _non_finite(self, block: npt.NDArray[np.float32], first: int) -> NonFiniteSample:
        """Where the first NaN or infinity of ``block`` (stem frames from ``first``) is."""
        bad = ~np.isfinite(block)
        row = int(np.argmax(bad.any(axis=1)))
        col = int(np.argmax(bad[row]))
        value = float(block[row, col])
        info = self.info
        path = info.paths[col] if len(info.paths) > 1 else info.paths[0]
        frame = info.start + first + row
        seconds = frame / info.samplerate
        label = None
        if self._labels is not None and col < len(self._labels):
            label = self._labels[col]
        channel = f"channel {col + 1}" + (f" ({label})" if label else "")
        if np.isnan(value):
            kind, what = "NaN", "NaN (not a number)"
        else:
            kind, what = "infinity", "an infinite value"
            if info.subtype == "DOUBLE":
                what = (
                    "an infinite value, or one beyond the float32 range (about 3.4e38) "
                    "the renderer works in"
                )
        where = (
            f"{Path(path).name!r} ({channel})"
            if len(info.paths) > 1
            else f"{Path(path).name!r}, {channel},"
        )
        message = (
            f"{where} holds {what} at frame {frame} ({seconds:.3f} s); it would spread "
            "through every filter and measurement it reached, so the file cannot be used. "
            "Repair or re-export the file (or replace those samples with silence) and try "
            "again"
        )
        return NonFiniteSample(path, col + 1, label, frame, seconds, kind, message)


def read_audio(path: str | os.PathLike[str]) -> tuple[npt.NDArray[np.float32], int]:
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


def scan_stem(
    info: StemInfo,
    *,
    labels: Sequence[str] | None = None,
    blocksize: int = SCAN_BLOCK_FRAMES,
) -> NonFiniteSample | None:
    """Read a probed stem once, in blocks, and find its first NaN or infinite sample.

    Meant for a caller that wants to refuse such a stem before any render (when it is
    uploaded, say); a render refuses it anyway as it reads it (:class:`StemReader`).
    Memory depends on ``blocksize``, not on the length of the stem.

    Parameters
    ----------
    info : StemInfo
        From :func:`probe_stem`.
    labels : sequence of str, optional
        Channel labels in file order, to name the channel in the message.
    blocksize : int
        Frames per read.

    Returns
    -------
    NonFiniteSample or None
        The first bad sample (earliest frame, then lowest channel), or None if every
        sample is finite.

    Raises
    ------
    AudioError
        If a file cannot be opened or has changed since it was probed.
    """
    with StemReader(info, labels=labels, check_finite=False) as reader:
        done = 0
        for block in reader.blocks(blocksize, reuse=True):
            if not np.all(np.isfinite(block)):
                return reader._non_finite(block, done)
            done += len(block)
    return None
