"""Reading ``dwChannelMask`` from WAV headers, with plain file reads (no audio library).

A ``WAVE_FORMAT_EXTENSIBLE`` format chunk carries ``dwChannelMask``, one bit per speaker
position (Microsoft, "Multiple channel audio data and WAVE files"); the file's channels
are the set bits in ascending bit order. :func:`read_channel_mask` reads it from:

- RIFF/WAVE (little-endian) and RIFX/WAVE (the big-endian variant),
- RF64 and BW64 (64-bit sizes in a ``ds64`` chunk; EBU Tech 3306, ITU-R BS.2088),
- Sony Wave64 (chunks named by GUIDs, 64-bit sizes, 8-byte alignment).

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

__all__ = ["WAVE_FORMAT_EXTENSIBLE", "read_channel_mask"]

WAVE_FORMAT_EXTENSIBLE = 0xFFFE
"""``wFormatTag`` of the extensible format chunk, the one that carries a mask."""

_W64_TAIL = bytes.fromhex("f3acd3118cd100c04f8edb8a")
_W64_RIFF = b"riff" + bytes.fromhex("2e91cf11a5d628db04c10000")
_W64_WAVE = b"wave" + _W64_TAIL
_W64_FMT = b"fmt " + _W64_TAIL

_RIFF_IDS = (b"RIFF", b"RIFX", b"RF64", b"BW64")
_SIZE_IN_DS64 = 0xFFFFFFFF  # a 32-bit size of -1 means "see the ds64 chunk"


def _chunk_name(ck_id: bytes) -> str:
    """A chunk identifier for a message, as text (Latin-1 maps every byte to a character)."""
    return repr(ck_id.decode("latin-1"))


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
            if head[:4] in _RIFF_IDS:
                if len(head) < 12:
                    raise AudioError(f"{name!r}: the WAV header is cut short ({size} bytes)")
                if head[8:12] != b"WAVE":
                    return None  # a RIFF file of another kind (e.g. AVI)
                return _riff_mask(f, name, size, head[:4])
            if head[:16] == _W64_RIFF:
                if len(head) < 40:
                    raise AudioError(f"{name!r}: the Wave64 header is cut short ({size} bytes)")
                if head[24:40] != _W64_WAVE:
                    return None
                return _w64_mask(f, name, size)
            return None
    except OSError as exc:
        raise AudioError(f"cannot read the header of {name!r}: {exc.strerror or exc}") from exc


def _read_exact(f: BinaryIO, pos: int, n: int, name: str, what: str) -> bytes:
    f.seek(pos)
    data = f.read(n)
    if len(data) != n:
        raise AudioError(
            f"{name!r}: the header is cut short: the {what} needs {n} bytes at offset {pos}, "
            f"the file holds {len(data)}"
        )
    return data


def _riff_mask(f: BinaryIO, name: str, size: int, riff_id: bytes) -> int | None:
    big = riff_id == b"RIFX"
    fmt32 = ">4sI" if big else "<4sI"
    sizes64: dict[bytes, int] = {}
    pos = 12
    if riff_id in (b"RF64", b"BW64"):
        ck_id, ck_size = struct.unpack("<4sI", _read_exact(f, pos, 8, name, "ds64 chunk"))
        if ck_id != b"ds64" or ck_size < 28:
            raise AudioError(
                f"{name!r}: an {riff_id.decode()} file must start with a ds64 chunk of at "
                f"least 28 bytes, found {_chunk_name(ck_id)} of {ck_size}"
            )
        body = _read_exact(f, pos + 8, ck_size, name, "ds64 chunk")
        _riff_size, data_size, _frames, table_len = struct.unpack_from("<QQQI", body)
        sizes64[b"data"] = data_size
        for k in range(min(table_len, (ck_size - 28) // 12)):
            entry_id, entry_size = struct.unpack_from("<4sQ", body, 28 + 12 * k)
            sizes64[entry_id] = entry_size
        pos += 8 + ck_size + (ck_size & 1)
    while pos + 8 <= size:
        ck_id, ck_size = struct.unpack(fmt32, _read_exact(f, pos, 8, name, "chunk header"))
        if ck_size == _SIZE_IN_DS64 and sizes64:
            if ck_id not in sizes64:
                raise AudioError(
                    f"{name!r}: chunk {_chunk_name(ck_id)} defers its size to ds64, "
                    "which does not list it"
                )
            ck_size = sizes64[ck_id]
        if ck_id == b"fmt ":
            body = _read_exact(f, pos + 8, ck_size, name, "fmt chunk")
            return _mask_from_fmt(body, name, ">" if big else "<")
        # RIFF chunks are padded to an even size.
        pos += 8 + ck_size + (ck_size & 1)
    raise AudioError(f"{name!r}: the WAV file has no fmt chunk")


def _w64_mask(f: BinaryIO, name: str, size: int) -> int | None:
    pos = 40
    while pos + 24 <= size:
        head = _read_exact(f, pos, 24, name, "Wave64 chunk header")
        guid, ck_size = head[:16], struct.unpack_from("<Q", head, 16)[0]
        if ck_size < 24:
            raise AudioError(
                f"{name!r}: Wave64 chunk at offset {pos} declares {ck_size} bytes, less than "
                "its own 24-byte header"
            )
        if guid == _W64_FMT:
            body = _read_exact(f, pos + 24, ck_size - 24, name, "fmt chunk")
            return _mask_from_fmt(body, name, "<")
        # Wave64 sizes include the header; chunks start on 8-byte boundaries.
        pos += (ck_size + 7) & ~7
    raise AudioError(f"{name!r}: the Wave64 file has no fmt chunk")


def _mask_from_fmt(body: bytes, name: str, endian: str) -> int | None:
    if len(body) < 16:
        raise AudioError(f"{name!r}: the fmt chunk is {len(body)} bytes, at least 16 are needed")
    tag = struct.unpack_from(endian + "H", body)[0]
    if tag != WAVE_FORMAT_EXTENSIBLE:
        return None
    # WAVEFORMATEXTENSIBLE: 16 bytes of WAVEFORMAT, cbSize, then 22 extension bytes
    # (valid bits, channel mask, sub-format GUID).
    if len(body) < 40:
        raise AudioError(
            f"{name!r}: the WAVE_FORMAT_EXTENSIBLE fmt chunk is {len(body)} bytes, 40 are needed"
        )
    cb_size, _valid_bits, mask = struct.unpack_from(endian + "HHI", body, 16)
    if cb_size < 22:
        raise AudioError(
            f"{name!r}: the WAVE_FORMAT_EXTENSIBLE extension size is {cb_size}, 22 are needed"
        )
    return mask or None
