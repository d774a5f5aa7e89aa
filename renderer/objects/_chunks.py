"""The header of an ADM master: a RIFF/WAVE, RF64 (EBU Tech 3306) or BW64 (ITU-R BS.2088) file.

The audio library reads the samples but does not expose ``chna`` or ``axml``, so the
header is walked with plain, bounded reads by the renderer's one chunk walker
(:class:`earfold.renderer.io.RiffWalk`, where the three layouts are described).

Only ``fmt ``, ``chna`` and ``axml`` bodies are read (``chna`` up to the size its entry
count needs, ``axml`` up to :data:`MAX_AXML_BYTES`); the ``data`` chunk is located, never
read. A chunk that reaches past the end of the file is an error naming it, except the pad
byte of the last chunk, which writers often leave out.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from typing import BinaryIO

from ..errors import AdmError
from ..io import RiffWalk, parse_wave_format
from ._limits import MAX_AXML_BYTES, MAX_CHUNKS

__all__ = ["WavChunks", "read_wav_chunks"]

_MAX_CHNA = 4 + 40 * 0xFFFF  # the counts and 65535 entries of 40 bytes
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
    walk = RiffWalk(f, path, size, head, error=AdmError)
    fmt: bytes | None = None
    chna: bytes | None = None
    axml: bytes | None = None
    data: tuple[int, int] | None = None
    chunks: list[tuple[str, int, int]] = []
    for chunk in walk.chunks(whole=True, limit=MAX_CHUNKS):
        chunks.append((chunk.name, chunk.body_at, chunk.size))
        if chunk.id == b"fmt ":
            fmt = walk.format_body(chunk)
        elif chunk.id == b"chna":
            chna = walk.body(chunk, _MAX_CHNA, f", more than 65535 entries need ({_MAX_CHNA})")
        elif chunk.id == b"axml":
            axml = walk.body(chunk, max_axml, f", more than the {max_axml} this reader accepts")
        elif chunk.id == b"data":
            data = (chunk.body_at, chunk.size)
    if fmt is None:
        raise AdmError(f"{path!r}: the file has no fmt chunk")
    if data is None:
        raise AdmError(f"{path!r}: the file has no data chunk")
    tag, channels, rate, bits, align = _parse_fmt(fmt, path)
    return WavChunks(
        path=path,
        container=walk.container,
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
    fmt = parse_wave_format(body, path, error=AdmError)
    tag = fmt.tag if fmt.sub_format_tag is None else fmt.sub_format_tag
    if tag not in _FORMAT_NAMES:
        raise AdmError(
            f"{path!r}: sample format tag {tag:#06x} is neither PCM (0x0001) nor IEEE float "
            "(0x0003)"
        )
    channels, rate, align = fmt.channels, fmt.sample_rate, fmt.block_align
    if channels == 0 or rate == 0 or align == 0 or align % channels:
        raise AdmError(
            f"{path!r}: the fmt chunk gives {channels} channels at {rate} Hz with {align}-byte "
            "frames, which is not a usable format"
        )
    return tag, channels, rate, fmt.bits_per_sample, align
