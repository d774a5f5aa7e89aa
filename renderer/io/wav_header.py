"""Reading ``dwChannelMask`` from WAV headers, with plain file reads (no audio library).

A ``WAVE_FORMAT_EXTENSIBLE`` format chunk carries ``dwChannelMask``, one bit per speaker
position (Microsoft, "Multiple channel audio data and WAVE files"); the file's channels
are the set bits in ascending bit order. :func:`read_channel_mask` reads it from:

- RIFF/WAVE (little-endian) and RIFX/WAVE (the big-endian variant),
- RF64 and BW64 (64-bit sizes in a ``ds64`` chunk; EBU Tech 3306, ITU-R BS.2088),
- Sony Wave64 (chunks named by GUIDs, 64-bit sizes, 8-byte alignment).

The first three are walked by the renderer's one RIFF chunk walker (:mod:`._chunks`, which
the ADM reader's header walk uses too), Wave64 by its own loop here.

What it returns, by design: None for a file that is no WAV at all (FLAC, AIFF, ...),
for a WAV whose format is not ``WAVE_FORMAT_EXTENSIBLE`` (plain PCM or float), and for
a mask of 0 (no positions assigned). :class:`~earfold.renderer.errors.AudioError` for a file
that claims to be a WAV but whose header is broken (cut short, format chunk too small,
no format chunk), since such a file cannot be trusted for anything else either.
What the bits mean in labels is :mod:`earfold.renderer.layouts.channel_mask`.
"""

from __future__ import annotations

import os
import struct
from typing import BinaryIO

from ..errors import AudioError
from ._chunks import RIFF_IDS, WAVE_FORMAT_EXTENSIBLE, RiffWalk, parse_wave_format, read_exact

__all__ = ["WAVE_FORMAT_EXTENSIBLE", "read_channel_mask"]

_W64_TAIL = bytes.fromhex("f3acd3118cd100c04f8edb8a")
_W64_RIFF = b"riff" + bytes.fromhex("2e91cf11a5d628db04c10000")
_W64_WAVE = b"wave" + _W64_TAIL
_W64_FMT = b"fmt " + _W64_TAIL


# -- reading ---------------------------------------------------------------------------


def read_channel_mask(path: str | os.PathLike[str]) -> int | None:
    """``dwChannelMask`` of a WAV, RF64/BW64 or Wave64 file, from its header.

    Returns
    -------
    int or None
        The mask, or None if the file is no WAV, is not ``WAVE_FORMAT_EXTENSIBLE`` or
        has a mask of 0. The mask may describe more or fewer channels than the file has;
        :func:`earfold.renderer.layouts.labels_from_mask` checks that.

    Raises
    ------
    AudioError
        If the file cannot be opened, or is a WAV whose header is broken.
    """
    name = os.fspath(path)
    try:
        with open(name, "rb") as f:
            size = os.fstat(f.fileno()).st_size
            head = f.read(40)
            if head[:4] in RIFF_IDS:
                if len(head) < 12:
                    raise AudioError(f"{name!r}: the WAV header is cut short ({size} bytes)")
                if head[8:12] != b"WAVE":
                    return None  # a RIFF file of another kind (e.g. AVI)
                return _riff_mask(RiffWalk(f, name, size, head[:12], error=AudioError))
            if head[:16] == _W64_RIFF:
                if len(head) < 40:
                    raise AudioError(f"{name!r}: the Wave64 header is cut short ({size} bytes)")
                if head[24:40] != _W64_WAVE:
                    return None
                return _w64_mask(f, name, size)
            return None
    except OSError as exc:
        raise AudioError(f"cannot read the header of {name!r}: {exc.strerror or exc}") from exc


def _riff_mask(walk: RiffWalk) -> int | None:
    # To the file's end, not the RIFF size's: the mask is worth reading from a file whose
    # writer never filled the RIFF size in, which the audio library reads too.
    for chunk in walk.chunks(to_file_end=True):
        if chunk.id == b"fmt ":
            return _mask_from_fmt(walk.format_body(chunk), walk.name, walk.endian)
    raise AudioError(f"{walk.name!r}: the WAV file has no fmt chunk")


def _w64_mask(f: BinaryIO, name: str, size: int) -> int | None:
    pos = 40
    while pos + 24 <= size:
        head = read_exact(f, pos, 24, name, "Wave64 chunk header", AudioError)
        guid, ck_size = head[:16], struct.unpack_from("<Q", head, 16)[0]
        if ck_size < 24:
            raise AudioError(
                f"{name!r}: Wave64 chunk at offset {pos} declares {ck_size} bytes, less than "
                "its own 24-byte header"
            )
        if guid == _W64_FMT:
            body = read_exact(f, pos + 24, ck_size - 24, name, "fmt chunk", AudioError)
            return _mask_from_fmt(body, name, "<")
        # Wave64 sizes include the header; chunks start on 8-byte boundaries.
        pos += (ck_size + 7) & ~7
    raise AudioError(f"{name!r}: the Wave64 file has no fmt chunk")


def _mask_from_fmt(body: bytes, name: str, endian: str) -> int | None:
    fmt = parse_wave_format(body, name, error=AudioError, endian=endian)
    if fmt.tag != WAVE_FORMAT_EXTENSIBLE:
        return None
    assert fmt.extension_size is not None
    if fmt.extension_size < 22:
        raise AudioError(
            f"{name!r}: the WAVE_FORMAT_EXTENSIBLE extension size is {fmt.extension_size}, "
            "22 are needed"
        )
    return fmt.channel_mask or None
