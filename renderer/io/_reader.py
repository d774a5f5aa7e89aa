"""Reading a probed stem in blocks, and a whole small file at once."""

from __future__ import annotations

import os
from collections.abc import Iterator
from types import TracebackType

import numpy as np
import numpy.typing as npt

from ..errors import AudioError, shown
from ._codec import CodecError, SoundFileHandle, failure_reason, open_for_reading
from ._probe import StemInfo, probe_stem

__all__ = ["StemReader", "read_audio"]


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

    def blocks(self, blocksize: int, *, reuse: bool = False) -> Iterator[npt.NDArray[np.float32]]:
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
            raise AudioError(f"blocksize must be a positive integer, not {shown(blocksize)}")
        if not self._files:
            raise AudioError(f"the reader of {self.info.paths[0]!r} is closed")
        blocksize = int(blocksize)
        channels = self.info.channels
        for f in self._files:
            # A mono file shorter than the window's start contributes silence.
            f.seek(min(self.info.start, f.frames))
        self.frames_read = 0
        return self._iterate(blocksize, channels, reuse)

    def _iterate(
        self, blocksize: int, channels: int, reuse: bool
    ) -> Iterator[npt.NDArray[np.float32]]:
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
