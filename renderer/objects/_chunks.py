"""Walking the chunks of a RIFF/WAVE, RF64 (EBU Tech 3306) or BW64 (ITU-R BS.2088) file.

The audio library reads the samples but does not expose ``chna`` or ``axml``, so the
header is walked here with plain, bounded reads:

- RIFF/WAVE: ``RIFF`` size ``WAVE``, then chunks of a 4-byte id and a 32-bit little-endian
  size, each body padded to an even length (the pad byte is not counted in the size).
- RF64 and BW64: the same, with ``RF64``/``BW64`` in place of ``RIFF`` and a ``ds64``
  chunk first, holding the 64-bit RIFF size, ``data`` size and sample count and a table of
  other 64-bit chunk sizes; a 32-bit size of 0xFFFFFFFF defers to it (EBU Tech 3306,
  BS.2088 section 3).

Only ``fmt ``, ``chna`` and ``axml`` bodies are read (``chna`` up to the size its entry
count needs, ``axml`` up to :data:`MAX_AXML_BYTES`); the ``data`` chunk is located, never
read. A chunk that reaches past the end of the file is an error naming it, except the pad
byte of the last chunk, which writers often leave out.
"""

from __future__ import annotations

import os
import struct
from dataclasses import dataclass
from typing import BinaryIO

from ..errors import AdmError
from ._limits import MAX_AXML_BYTES, MAX_CHUNKS

__all__ = ["WavChunks", "read_wav_chunks"]

_SIZE_IN_DS64 = 0xFFFFFFFF
_MAX_DS64 = 28 + 12 * 1024  # the fixed part and a generous table
_MAX_CHNA = 4 + 40 * 0xFFFF  # the counts and 65535 entries of 40 bytes
_FORMAT_EXTENSIBLE = 0xFFFE
_FORMAT_NAMES = {1: "PCM", 3: "IEEE float"}


@dataclass(frozen=True)
class WavChunks:
    """What the header of a broadcast WAV says, and the ADM chunks' bodies.

    Attributes
    ----------
    container
        ``"RIFF"``, ``"RF64"`` or ``"BW64"``.
    format_tag
        ``wFormatTag`` (1 PCM, 3 float), the sub-format's for ``WAVE_FORMAT_EXTENSIBLE``.
    channels, sample_rate, bits_per_sample, block_align
        From the ``fmt `` chunk.
    data_offset, data_size
        Where the samples start in the file and how many bytes they take.
    frames
        Sample frames in ``data`` (``data_size // block_align``).
    chna, axml
        The bodies of those chunks, or None where the file has none.
    chunks
        Every chunk walked, as (id, body offset, body size), in file order.
    """

    path: str
    container: str
    format_tag: int
    channels: int
    sample_rate: int
    bits_per_sample: int
    block_align: int
    data_offset: int
    data_size: int
    frames: int
    chna: bytes | None
    axml: bytes | None
    chunks: tuple[tuple[str, int, int], ...]


def _name(ck_id: bytes) -> str:
    return repr(ck_id.decode("latin-1"))


def _read(f: BinaryIO, pos: int, n: int, path: str, what: str) -> bytes:
    f.seek(pos)
    data = f.read(n)
    if len(data) != n:
        raise AdmError(
            f"{path!r}: the file is cut short: the {what} needs {n} bytes at offset {pos}, "
            f"the file holds {len(data)}"
        )
    return data


def read_wav_chunks(
    path: str | os.PathLike[str], *, max_axml_bytes: int = MAX_AXML_BYTES
) -> WavChunks:
    """Walk the header of a WAV, RF64 or BW64 file; read its ``fmt ``, ``chna``, ``axml``.

    Parameters
    ----------
    path
        The file.
    max_axml_bytes
        Largest ``axml`` body read; a larger one is an error (default 64 MiB).

    Raises
    ------
    AdmError
        If the file is not one of these containers, its header is cut short or
        inconsistent (a chunk past the end, a missing or short ``ds64``, no ``fmt `` or
        ``data``), or ``axml`` is larger than ``max_axml_bytes``.
    """
    name = os.fspath(path)
    try:
        with open(name, "rb") as f:
            return _walk(f, name, os.fstat(f.fileno()).st_size, max_axml_bytes)
    except OSError as exc:
        raise AdmError(f"cannot read {name!r}: {exc.strerror or exc}") from exc


def _walk(f: BinaryIO, path: str, size: int, max_axml: int) -> WavChunks:
    head = f.read(12)
    if len(head) < 12 or head[:4] not in (b"RIFF", b"RF64", b"BW64") or head[8:12] != b"WAVE":
        raise AdmError(
            f"{path!r} is not a RIFF/WAVE, RF64 or BW64 file (it starts {head[:12]!r}); "
            "an ADM master is a broadcast WAV with axml and chna chunks"
        )
    container = head[:4].decode()
    sizes64: dict[bytes, int] = {}
    pos = 12
    end = size
    chunks: list[tuple[str, int, int]] = []
    if container in ("RF64", "BW64"):
        ck_id, ck_size = struct.unpack("<4sI", _read(f, pos, 8, path, "ds64 chunk header"))
        if ck_id != b"ds64":
            raise AdmError(
                f"{path!r}: an {container} file must start with a ds64 chunk (EBU Tech 3306), "
                f"found {_name(ck_id)}"
            )
        if not 28 <= ck_size <= _MAX_DS64:
            raise AdmError(
                f"{path!r}: the ds64 chunk declares {ck_size} bytes; 28 to {_MAX_DS64} are valid"
            )
        body = _read(f, pos + 8, ck_size, path, "ds64 chunk")
        riff_size, data_size, _samples, table_len = struct.unpack_from("<QQQI", body)
        if table_len > (ck_size - 28) // 12:
            raise AdmError(
                f"{path!r}: the ds64 table lists {table_len} chunk sizes, its chunk has room "
                f"for {(ck_size - 28) // 12}"
            )
        sizes64[b"data"] = data_size
        for k in range(table_len):
            entry_id, entry_size = struct.unpack_from("<4sQ", body, 28 + 12 * k)
            sizes64[entry_id] = entry_size
        chunks.append(("ds64", pos + 8, ck_size))
        pos += 8 + ck_size + (ck_size & 1)
        end = min(size, riff_size + 8)
    else:
        end = min(size, struct.unpack_from("<I", head, 4)[0] + 8)
    fmt: bytes | None = None
    chna: bytes | None = None
    axml: bytes | None = None
    data: tuple[int, int] | None = None
    while pos + 8 <= end:
        if len(chunks) >= MAX_CHUNKS:
            raise AdmError(f"{path!r}: more than {MAX_CHUNKS} chunks; the header is not usable")
        ck_id, ck_size = struct.unpack("<4sI", _read(f, pos, 8, path, "chunk header"))
        if ck_size == _SIZE_IN_DS64 and sizes64:
            if ck_id not in sizes64:
                raise AdmError(
                    f"{path!r}: chunk {_name(ck_id)} defers its size to ds64, which does not "
                    "list it"
                )
            ck_size = sizes64[ck_id]
        body_at = pos + 8
        if body_at + ck_size > size:
            raise AdmError(
                f"{path!r}: chunk {_name(ck_id)} at offset {pos} declares {ck_size} bytes, "
                f"past the end of the file ({size - body_at} remain): the file is cut short "
                "or its header is wrong"
            )
        chunks.append((ck_id.decode("latin-1"), body_at, ck_size))
        if ck_id == b"fmt ":
            if ck_size > 1024:
                raise AdmError(f"{path!r}: the fmt chunk declares {ck_size} bytes (at most 1024)")
            fmt = _read(f, body_at, ck_size, path, "fmt chunk")
        elif ck_id == b"chna":
            if ck_size > _MAX_CHNA:
                raise AdmError(
                    f"{path!r}: the chna chunk declares {ck_size} bytes, more than 65535 "
                    f"entries need ({_MAX_CHNA})"
                )
            chna = _read(f, body_at, ck_size, path, "chna chunk")
        elif ck_id == b"axml":
            if ck_size > max_axml:
                raise AdmError(
                    f"{path!r}: the axml chunk declares {ck_size} bytes, more than the "
                    f"{max_axml} this reader accepts"
                )
            axml = _read(f, body_at, ck_size, path, "axml chunk")
        elif ck_id == b"data":
            data = (body_at, ck_size)
        pos = body_at + ck_size + (ck_size & 1)
    if fmt is None:
        raise AdmError(f"{path!r}: the file has no fmt chunk")
    if data is None:
        raise AdmError(f"{path!r}: the file has no data chunk")
    tag, channels, rate, bits, align = _parse_fmt(fmt, path)
    return WavChunks(
        path=path,
        container=container,
        format_tag=tag,
        channels=channels,
        sample_rate=rate,
        bits_per_sample=bits,
        block_align=align,
        data_offset=data[0],
        data_size=data[1],
        frames=data[1] // align,
        chna=chna,
        axml=axml,
        chunks=tuple(chunks),
    )


def _parse_fmt(body: bytes, path: str) -> tuple[int, int, int, int, int]:
    if len(body) < 16:
        raise AdmError(f"{path!r}: the fmt chunk is {len(body)} bytes, at least 16 are needed")
    tag, channels, rate, _byte_rate, align, bits = struct.unpack_from("<HHIIHH", body)
    if tag == _FORMAT_EXTENSIBLE:
        if len(body) < 40:
            raise AdmError(
                f"{path!r}: the WAVE_FORMAT_EXTENSIBLE fmt chunk is {len(body)} bytes, "
                "40 are needed"
            )
        tag = struct.unpack_from("<H", body, 24)[0]  # first two bytes of the sub-format GUID
    if tag not in _FORMAT_NAMES:
        raise AdmError(
            f"{path!r}: sample format tag {tag:#06x} is neither PCM (0x0001) nor IEEE float "
            "(0x0003)"
        )
    if channels == 0 or rate == 0 or align == 0 or align % channels:
        raise AdmError(
            f"{path!r}: the fmt chunk gives {channels} channels at {rate} Hz with {align}-byte "
            "frames, which is not a usable format"
        )
    return tag, channels, rate, bits, align
