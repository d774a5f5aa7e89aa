"""RF64 and BW64 files presented to the audio library with a header it reads.

EBU Tech 3306's RF64 and ITU-R BS.2088's BW64 carry the audio of long or object-based
masters (BW64's header is RF64's with ``BW64`` in place of ``RF64``: the same ``ds64``
chunk of 64-bit sizes, the same chunk layout). libsndfile (1.2.2, the version measured)
reads neither as the standards allow: it refuses the ``BW64`` id ("Format not
recognised"), and in an RF64 file it loses the ``data`` chunk after a chunk of odd size
and its pad byte ("No 'data' chunk marker") -- an ``axml`` chunk of odd length, which
BS.2088 allows, is enough.

:class:`Rf64View` is a read-only file object (which the audio library takes in place of a
path) that holds a header of our own making -- ``RF64``, a ``ds64`` chunk, the file's
``fmt `` chunk, a ``data`` chunk header -- followed by the file's audio bytes, located by
our own chunk walk (:class:`~earfold.renderer.io.RiffWalk`). The other chunks (``axml``,
``chna``, ``bext`` ...) are not the library's business. :func:`audio_source` returns such
a view for an RF64 or BW64 file and the path itself for every other file.
"""

from __future__ import annotations

import io
import os
import struct
from typing import Any

from ..errors import AudioError
from ._chunks import RiffWalk

__all__ = ["Rf64View", "audio_source"]

_WIDE = (b"RF64", b"BW64")


class Rf64View(io.RawIOBase):
    """An RF64 or BW64 file, read-only, as a plain RF64 file: a fresh header, then the
    file's audio bytes (see the module's notes).

    Raises
    ------
    AudioError
        If the file cannot be opened, is not RF64 or BW64, or its header has no usable
        ``fmt `` or ``data`` chunk.
    """

    def __init__(self, path: str | os.PathLike[str]) -> None:
        super().__init__()
        self.name = os.fspath(path)
        try:
            self._file = open(self.name, "rb")  # noqa: SIM115 - closed by close()
        except OSError as exc:
            raise AudioError(f"cannot open {self.name!r}: {exc.strerror or exc}") from exc
        try:
            self._header, self._data_at, self._data_size = _layout(self._file, self.name)
        except BaseException:
            self._file.close()
            raise
        self._size = len(self._header) + self._data_size
        self._pos = 0

    def readable(self) -> bool:
        """True: the view is for reading."""
        return True

    def seekable(self) -> bool:
        """True: the view seeks."""
        return True

    def readinto(self, buffer: Any) -> int:
        """Read into ``buffer`` from the header, then from the file's audio bytes."""
        view = memoryview(buffer).cast("B")
        want = min(len(view), max(0, self._size - self._pos))
        done = 0
        head = len(self._header)
        if self._pos < head and want:
            n = min(want, head - self._pos)
            view[:n] = self._header[self._pos : self._pos + n]
            done = n
        if done < want:
            self._file.seek(self._data_at + self._pos + done - head)
            got = self._file.readinto(view[done:want])
            done += got or 0
        self._pos += done
        return done

    def seek(self, offset: int, whence: int = io.SEEK_SET) -> int:
        """Move within the view (before its start is an error, past its end allowed)."""
        base = {io.SEEK_SET: 0, io.SEEK_CUR: self._pos, io.SEEK_END: self._size}[whence]
        if base + offset < 0:
            raise OSError(f"cannot seek to {base + offset} in {self.name!r}")
        self._pos = base + offset
        return self._pos

    def tell(self) -> int:
        """Where the next read starts."""
        return self._pos

    def close(self) -> None:
        """Close the file."""
        if not self.closed:
            self._file.close()
        super().close()


def _layout(f: Any, name: str) -> tuple[bytes, int, int]:
    """The view's header, and where the file's audio bytes start and how many there are."""
    f.seek(0, io.SEEK_END)
    size = f.tell()
    f.seek(0)
    head = f.read(12)
    if len(head) < 12 or head[:4] not in _WIDE or head[8:12] != b"WAVE":
        raise AudioError(f"{name!r} is not an RF64 or BW64 file")
    walk = RiffWalk(f, name, size, head, error=AudioError)
    fmt = data = None
    for chunk in walk.chunks(to_file_end=True, limit=4096):
        if chunk.id == b"fmt " and fmt is None:
            fmt = walk.format_body(chunk)
        elif chunk.id == b"data":
            data = chunk
            break
    if fmt is None or data is None:
        missing = "fmt " if fmt is None else "data"
        raise AudioError(f"{name!r}: no {missing.strip()} chunk before the audio")
    block = struct.unpack_from("<H", fmt, 12)[0] if len(fmt) >= 14 else 0
    available = max(0, min(data.size, size - data.body_at))
    if block > 0:
        available -= available % block  # whole frames only (a cut file's last bytes)
    samples = available // max(block, 1)
    fmt_chunk = b"fmt " + struct.pack("<I", len(fmt)) + fmt + (b"\0" if len(fmt) & 1 else b"")
    rest = fmt_chunk + b"data" + struct.pack("<I", 0xFFFFFFFF)
    riff_size = 4 + 36 + len(rest) + available  # "WAVE", ds64, fmt, data and the audio
    ds64 = b"ds64" + struct.pack("<IQQQI", 28, riff_size, available, samples, 0)
    header = b"RF64" + struct.pack("<I", 0xFFFFFFFF) + b"WAVE" + ds64 + rest
    return header, data.body_at, available


def audio_source(path: str | os.PathLike[str]) -> str | Rf64View:
    """What to hand the audio library for ``path``: a :class:`Rf64View` for an RF64 or
    BW64 file, else the path. The caller closes a view it is given."""
    name = os.fspath(path)
    try:
        with open(name, "rb") as f:
            head = f.read(4)
    except OSError as exc:
        raise AudioError(f"cannot open {name!r}: {exc.strerror or exc}") from exc
    return Rf64View(name) if head in _WIDE else name
