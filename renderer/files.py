"""Files the renderer reads and writes whole: small JSON descriptions, atomic writes.

Every file the renderer writes for others to read (renders, SOFA sets, reports) appears
under its name only when complete: it is written under a temporary name in the same
folder and then renamed with :func:`os.replace`, which on one volume is atomic, so a
reader sees the old file or the new one, never half of one. :class:`AtomicPath` is that
write-then-rename, for code that hands a path to a library (libsndfile, netCDF);
:func:`atomic_write` wraps it round an open file, and :func:`write_text_atomic`,
:func:`write_bytes_atomic` and :func:`write_json_atomic` write a whole value at once.
"""

from __future__ import annotations

import json
import os
import secrets
import stat
from collections.abc import Iterator
from contextlib import AbstractContextManager, contextmanager
from pathlib import Path
from types import TracebackType
from typing import IO, Any, BinaryIO, Literal, TextIO, overload

__all__ = [
    "AtomicPath",
    "atomic_write",
    "fsync_folder",
    "read_bytes_bounded",
    "read_json_file",
    "write_bytes_atomic",
    "write_json_atomic",
    "write_text_atomic",
]

#: Random names tried before giving up on finding a free temporary name (each has 32
#: random bits, so a second try is already rare).
_NAME_TRIES = 16


def read_bytes_bounded(
    path: str | os.PathLike[str], *, kind: str, max_bytes: int, error: type[Exception]
) -> bytes:
    """The whole of a small file a user names, checked before it is read.

    The file must be a regular file (not a device such as ``/dev/zero``, a pipe or a
    folder, which could be read forever or block) of at most ``max_bytes`` bytes. It is
    opened without blocking (a pipe would otherwise wait for a writer), checked on the
    open descriptor, and read only up to ``max_bytes + 1`` bytes, so a file that grows
    meanwhile is refused too.

    Parameters
    ----------
    path : path-like
        The file.
    kind : str
        What the file is ("layout file", "headphone EQ"), for the messages.
    max_bytes : int
        Largest size accepted.
    error : exception type
        The error to raise (a RendererError subclass).

    Raises
    ------
    error
        The file is missing, unreadable, not a regular file or too big; the message names
        the file and the limit.
    """
    origin = os.fsdecode(os.fspath(path))
    try:
        fd = os.open(origin, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    except OSError as exc:
        raise error(f"cannot read {kind} {origin!r}: {exc.strerror or exc}") from None
    try:
        st = os.fstat(fd)
        if not stat.S_ISREG(st.st_mode):
            raise error(
                f"{kind} {origin!r} is not a regular file (a device, pipe or folder); give a file"
            )
        if st.st_size > max_bytes:
            raise error(
                f"{kind} {origin!r} is {st.st_size} bytes; a {kind} may be at most "
                f"{max_bytes} bytes"
            )
        chunks = []
        left = max_bytes + 1
        while left > 0:
            chunk = os.read(fd, min(left, 1 << 20))
            if not chunk:
                break
            chunks.append(chunk)
            left -= len(chunk)
    except OSError as exc:
        raise error(f"cannot read {kind} {origin!r}: {exc.strerror or exc}") from None
    finally:
        os.close(fd)
    data = b"".join(chunks)
    if len(data) > max_bytes:
        raise error(f"{kind} {origin!r} grew beyond {max_bytes} bytes while it was read")
    return data


def read_json_file(
    path: str | os.PathLike[str], *, kind: str, max_bytes: int, error: type[Exception]
) -> Any:
    """Parse a JSON file, raising ``error`` with a message a person can act on.

    Parameters
    ----------
    path : path-like
        The file: a regular file of at most ``max_bytes`` bytes (see
        :func:`read_bytes_bounded`).
    kind : str
        What the file describes ("layout", "room"), for the messages.
    max_bytes : int
        Largest file accepted (such files are small; a huge one is a mistake).
    error : exception type
        The error to raise (a RendererError subclass).
    """
    origin = str(path)
    if not os.path.exists(path):
        raise error(f"{kind} file {origin!r} does not exist")
    raw = read_bytes_bounded(path, kind=f"{kind} file", max_bytes=max_bytes, error=error)
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise error(
            f"cannot read {kind} file {origin!r}: it is not UTF-8 text ({exc.reason} at "
            f"byte {exc.start})"
        ) from None
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        raise error(
            f"{origin!r} is not valid JSON: {exc.msg} at line {exc.lineno}, column {exc.colno}"
        ) from None


def fsync_folder(folder: str | os.PathLike[str]) -> None:
    """Flush a folder's entries to disk, which makes a rename inside it durable.

    Does nothing where folders cannot be opened (Windows) or synced.
    """
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


def _fsync_file(path: str) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


class AtomicPath:
    """A temporary file beside ``path`` that replaces ``path`` when committed.

    The temporary file is created at once, empty, under a random name in the folder of
    ``path`` (``.NAME.XXXXXXXX`` plus ``suffix``), with ``O_EXCL``, so no other writer's
    file is ever clobbered; mode 0o666 lets the umask decide the permissions, as for any
    new file. Write it by its name (:attr:`tmp`), opening it for writing (which
    truncates), then call :meth:`commit`, or :meth:`discard` to give up. As a context
    manager it commits when the block ends normally and discards when it raises.

    Parameters
    ----------
    path : path-like
        The destination. Its folder must exist.
    suffix : str, optional
        End of the temporary name (``".part"``: what the service's sweeps clear).
    durable : bool, optional
        On commit, flush the file to disk (fsync) before the rename and the folder after
        it (the default). False for scratch files that are read back and removed at once,
        where an fsync only costs time.

    Attributes
    ----------
    path : str
        The destination.
    tmp : str
        The temporary file.

    Raises
    ------
    FileExistsError
        If no free temporary name was found (only after many tries).
    OSError
        If the temporary file cannot be created (no such folder, no permission, ...).

    Examples
    --------
    >>> import os, tempfile
    >>> folder = tempfile.TemporaryDirectory()
    >>> target = Path(folder.name, "set.txt")
    >>> with AtomicPath(target) as spot:
    ...     _ = Path(spot.tmp).write_text("done")
    >>> target.read_text(), sorted(os.listdir(folder.name))
    ('done', ['set.txt'])
    >>> folder.cleanup()
    """

    def __init__(
        self, path: str | os.PathLike[str], *, suffix: str = ".part", durable: bool = True
    ) -> None:
        dest = Path(os.fspath(path))
        self.path = str(dest)
        self.durable = bool(durable)
        self._state = "open"  # then "committed" or "discarded"
        for _ in range(_NAME_TRIES):
            tmp = dest.parent / f".{dest.name}.{secrets.token_hex(4)}{suffix}"
            try:
                fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
            except FileExistsError:
                continue
            os.close(fd)
            self.tmp = str(tmp)
            return
        raise FileExistsError(f"no free temporary name beside {self.path!r}")

    def commit(self) -> None:
        """Move the temporary file onto :attr:`path` (fsynced first if durable).

        On failure the temporary file is removed and the error raised; ``path`` is left
        as it was. Committing twice, or after :meth:`discard`, does nothing.
        """
        if self._state != "open":
            return
        try:
            if self.durable:
                _fsync_file(self.tmp)
            os.replace(self.tmp, self.path)
        except BaseException:
            self.discard()
            raise
        self._state = "committed"
        if self.durable:
            fsync_folder(os.path.dirname(self.path) or ".")

    def discard(self) -> None:
        """Remove the temporary file; leave :attr:`path` as it was.

        Does nothing once committed (the temporary name is then free for others).
        """
        if self._state == "committed":
            return
        self._state = "discarded"
        try:
            os.unlink(self.tmp)
        except FileNotFoundError:
            pass

    def __enter__(self) -> AtomicPath:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        if exc_type is None:
            self.commit()
        else:
            self.discard()


@overload
def atomic_write(
    path: str | os.PathLike[str],
    mode: Literal["w"] = ...,
    *,
    encoding: str = ...,
    durable: bool = ...,
) -> AbstractContextManager[TextIO]: ...


@overload
def atomic_write(
    path: str | os.PathLike[str],
    mode: Literal["wb"],
    *,
    encoding: str = ...,
    durable: bool = ...,
) -> AbstractContextManager[BinaryIO]: ...


def atomic_write(
    path: str | os.PathLike[str],
    mode: str = "w",
    *,
    encoding: str = "utf-8",
    durable: bool = True,
) -> AbstractContextManager[IO[Any]]:
    """Open a file that takes the place of ``path`` only once it is completely written.

    A context manager yielding the open temporary file (see :class:`AtomicPath`): text
    for ``mode="w"``, bytes for ``mode="wb"``. When the block ends normally the file is
    flushed, closed, fsynced (if ``durable``) and renamed onto ``path``; when it raises,
    the temporary file is removed and ``path`` is left as it was.

    Parameters
    ----------
    path : path-like
        The destination. Its folder must exist.
    mode : {"w", "wb"}
        Text or bytes.
    encoding : str
        Text encoding (text mode only).
    durable : bool
        As for :class:`AtomicPath`.

    Raises
    ------
    ValueError
        If ``mode`` is neither ``"w"`` nor ``"wb"``.
    OSError
        If the temporary file cannot be created, written or renamed.

    Examples
    --------
    >>> import tempfile
    >>> folder = tempfile.TemporaryDirectory()
    >>> target = Path(folder.name, "notes.txt")
    >>> with atomic_write(target) as fh:
    ...     _ = fh.write("line\\n")
    >>> target.read_text()
    'line\\n'
    >>> folder.cleanup()
    """
    if mode not in ("w", "wb"):
        raise ValueError(f"mode must be 'w' or 'wb', not {mode!r}")
    return _atomic_write(path, mode, encoding, durable)


@contextmanager
def _atomic_write(
    path: str | os.PathLike[str], mode: str, encoding: str, durable: bool
) -> Iterator[IO[Any]]:
    with AtomicPath(path, durable=durable) as spot:
        with open(spot.tmp, mode, encoding=None if "b" in mode else encoding) as fh:
            yield fh


def write_text_atomic(
    path: str | os.PathLike[str], text: str, *, encoding: str = "utf-8", durable: bool = True
) -> None:
    """Write ``text`` to ``path`` atomically (see :func:`atomic_write`)."""
    with atomic_write(path, "w", encoding=encoding, durable=durable) as fh:
        fh.write(text)


def write_bytes_atomic(path: str | os.PathLike[str], data: bytes, *, durable: bool = True) -> None:
    """Write ``data`` to ``path`` atomically (see :func:`atomic_write`)."""
    with atomic_write(path, "wb", durable=durable) as fh:
        fh.write(data)


def write_json_atomic(
    path: str | os.PathLike[str], data: object, *, indent: int | None = 2, durable: bool = True
) -> None:
    """Write ``data`` as JSON (``indent`` spaces, a final newline) to ``path`` atomically.

    Examples
    --------
    >>> import tempfile
    >>> folder = tempfile.TemporaryDirectory()
    >>> target = Path(folder.name, "report.json")
    >>> write_json_atomic(target, {"lufs": -23.0})
    >>> print(target.read_text(), end="")
    {
      "lufs": -23.0
    }
    >>> folder.cleanup()
    """
    write_text_atomic(path, json.dumps(data, indent=indent) + "\n", durable=durable)
