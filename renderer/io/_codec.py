"""libsndfile, through soundfile: the renderer's one door to it.

Everything the renderer asks of the audio library goes through these few functions, so
that the rest of :mod:`earfold.renderer.io` is typed against the small protocols below
and a change of library touches this module only.
"""

from __future__ import annotations

from typing import Any, Protocol

import numpy as np
import numpy.typing as npt
import soundfile as sf

from .bw64 import audio_source

__all__ = [
    "CodecError",
    "FileFacts",
    "SoundFileHandle",
    "failure_reason",
    "file_info",
    "known_formats",
    "open_for_reading",
    "open_for_writing",
]

#: What libsndfile raises when it cannot decode or encode a file.
CodecError: type[Exception] = sf.SoundFileError


class FileFacts(Protocol):
    """What the library reports about a file without decoding it."""

    format: str
    format_info: str
    subtype: str
    samplerate: int
    channels: int
    frames: int
    extra_info: str


class SoundFileHandle(Protocol):
    """An open audio file, for reading or for writing."""

    @property
    def channels(self) -> int: ...

    @property
    def samplerate(self) -> int: ...

    @property
    def frames(self) -> int: ...

    def seek(self, frames: int) -> int: ...

    def read(
        self, frames: int, dtype: str, always_2d: bool, out: npt.NDArray[np.float32]
    ) -> npt.NDArray[np.float32]: ...

    def write(self, data: npt.NDArray[Any]) -> None: ...

    def close(self) -> None: ...


def failure_reason(exc: BaseException) -> str:
    """The library's own words for a failure (its exception's text repeats the path)."""
    return str(getattr(exc, "error_string", None) or exc)


def file_info(path: str) -> FileFacts:
    """Format, subtype, rate, channels and frames of ``path``, from its header (an RF64
    or BW64 file through :class:`~earfold.renderer.io.bw64.Rf64View`).

    Raises the library's :data:`CodecError`, :class:`OSError`, or
    :class:`~earfold.renderer.errors.AudioError` for an RF64/BW64 header we cannot use.
    """
    source = audio_source(path)
    if isinstance(source, str):
        facts: FileFacts = sf.info(source)
        return facts
    with source:
        viewed: FileFacts = sf.info(source)
        return viewed


class _ViewedFile(sf.SoundFile):  # type: ignore[misc]
    """A file read through a view of ours, which closing the handle closes too."""

    def close(self) -> None:
        """Close the handle, then the view."""
        try:
            super().close()
        finally:
            self.name.close()


def open_for_reading(path: str) -> SoundFileHandle:
    """Open ``path`` for reading (an RF64 or BW64 file through
    :class:`~earfold.renderer.io.bw64.Rf64View`; raises :data:`CodecError`,
    :class:`OSError` or :class:`~earfold.renderer.errors.AudioError`)."""
    source = audio_source(path)
    if isinstance(source, str):
        handle: SoundFileHandle = sf.SoundFile(source)
        return handle
    try:
        viewed: SoundFileHandle = _ViewedFile(source)
    except BaseException:
        source.close()
        raise
    return viewed


class _UnsyncedFile(sf.SoundFile):  # type: ignore[misc]
    """A file written without the library's fsync when it is closed.

    soundfile's ``close`` first calls ``flush``, which asks libsndfile to fsync the
    whole file. Our writer decides itself what must reach the disk
    (:class:`earfold.renderer.files.AtomicPath` fsyncs the finished file, header
    included, before renaming it): a scratch render read back at once need not be
    synced at all, and a delivered file need not be synced twice. Measured on a 230 MB
    scratch render: the library's fsync took 0.07-0.09 s of the writer's close.
    """

    def flush(self) -> None:
        """Check the file is open; write nothing to disk (see the class)."""
        self._check_if_closed()


def open_for_writing(
    path: str, *, samplerate: int, channels: int, format: str, subtype: str
) -> SoundFileHandle:
    """Open ``path`` for writing, truncating it (raises :data:`CodecError` or :class:`OSError`).

    Closing the handle does not fsync the file: the caller syncs what must be durable.
    """
    handle: SoundFileHandle = _UnsyncedFile(
        path, mode="w", samplerate=samplerate, channels=channels, format=format, subtype=subtype
    )
    return handle


def known_formats() -> dict[str, str]:
    """Every major format the library knows, name -> description."""
    formats: dict[str, str] = sf.available_formats()
    return formats
