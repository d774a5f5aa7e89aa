"""BW64 files (ITU-R BS.2088) presented to the audio library as RF64 (EBU Tech 3306).

BS.2088's BW64 header is RF64's with ``BW64`` in place of ``RF64`` in the first four
bytes: the same ``ds64`` chunk of 64-bit sizes, the same chunk layout. libsndfile (1.2.2,
the version measured) refuses the ``BW64`` id ("Format not recognised") and reads the
same bytes as RF64. :class:`Rf64View` is a read-only file object over a BW64 file whose
first four bytes read as ``RF64`` and whose other bytes are the file's; a file object is
what the audio library takes in place of a path. :func:`audio_source` returns the path
itself for every other file.
"""

from __future__ import annotations

import io
import os
from typing import Any

from ..errors import AudioError

__all__ = ["Rf64View", "audio_source"]

_BW64 = b"BW64"
_RF64 = b"RF64"


class Rf64View(io.RawIOBase):
    """A BW64 file, read-only, whose first four bytes read as ``RF64``.

    Raises
    ------
    AudioError
        If the file cannot be opened or does not start with ``BW64``.
    """

    def __init__(self, path: str | os.PathLike[str]) -> None:
        super().__init__()
        self.name = os.fspath(path)
        try:
            self._file = open(self.name, "rb")  # noqa: SIM115 - closed by close()
        except OSError as exc:
            raise AudioError(f"cannot open {self.name!r}: {exc.strerror or exc}") from exc
        if self._file.read(4) != _BW64:
            self._file.close()
            raise AudioError(f"{self.name!r} is not a BW64 file (it does not start with BW64)")
        self._file.seek(0)

    def readable(self) -> bool:
        """True: the view is for reading."""
        return True

    def seekable(self) -> bool:
        """True: the view seeks like the file."""
        return True

    def readinto(self, buffer: Any) -> int:
        """Read into ``buffer``, with the first four bytes of the file shown as ``RF64``."""
        start = self._file.tell()
        count = self._file.readinto(buffer)
        if count and start < 4:
            view = memoryview(buffer).cast("B")
            stop = min(4, start + count)
            view[: stop - start] = _RF64[start:stop]
        return count

    def seek(self, offset: int, whence: int = io.SEEK_SET) -> int:
        """Move as the file moves."""
        return self._file.seek(offset, whence)

    def tell(self) -> int:
        """Where the next read starts."""
        return self._file.tell()

    def close(self) -> None:
        """Close the file."""
        if not self.closed:
            self._file.close()
        super().close()


def audio_source(path: str | os.PathLike[str]) -> str | Rf64View:
    """What to hand the audio library for ``path``: a :class:`Rf64View` for BW64, else the path.

    The caller closes a view it is given (it is a context manager).
    """
    name = os.fspath(path)
    try:
        with open(name, "rb") as f:
            head = f.read(4)
    except OSError as exc:
        raise AudioError(f"cannot open {name!r}: {exc.strerror or exc}") from exc
    return Rf64View(name) if head == _BW64 else name
