"""Walking the chunks of a RIFF/WAVE file and its relatives, with plain, bounded reads.

One walker for every reader of a WAV header in the renderer: the channel mask
(:func:`~earfold.renderer.io.read_channel_mask`) and the ADM reader's header walk
(:func:`earfold.renderer.objects.read_wav_chunks`). The layouts it knows:

- RIFF/WAVE: ``RIFF`` size ``WAVE``, then chunks of a 4-byte id and a 32-bit little-endian
  size, each body padded to an even length (the pad byte is not counted in the size).
- RIFX/WAVE: the same with big-endian sizes and fields.
- RF64 and BW64: RIFF's, with ``RF64``/``BW64`` in place of ``RIFF`` and a ``ds64``
  chunk first, holding the 64-bit RIFF size, ``data`` size and sample count and a table of
  other 64-bit chunk sizes; a 32-bit size of 0xFFFFFFFF defers to it (EBU Tech 3306,
  ITU-R BS.2088 section 3).

Nothing is read but chunk headers and the bodies a caller asks for; a chunk count, the
``ds64`` and the ``fmt `` chunk have bounds, and each read of a body checks the file holds
it. Errors are of the class the caller names (an audio reader's, the ADM reader's), so a
message names the file and what in it is wrong whoever asked.
"""

from __future__ import annotations

import struct
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from typing import BinaryIO

__all__ = [
    "RIFF_IDS",
    "WAVE_FORMAT_EXTENSIBLE",
    "RiffChunk",
    "RiffWalk",
    "WaveFormat",
    "parse_wave_format",
    "read_exact",
]

#: The first four bytes of the RIFF family of WAVE files this walker knows.
RIFF_IDS = (b"RIFF", b"RIFX", b"RF64", b"BW64")

WAVE_FORMAT_EXTENSIBLE = 0xFFFE
"""``wFormatTag`` of the extensible format chunk, the one that carries a mask."""

#: Makes an error from its message: the caller's error class.
ErrorType = Callable[[str], Exception]

_SIZE_IN_DS64 = 0xFFFFFFFF  # a 32-bit size of -1 means "see the ds64 chunk"
_MAX_DS64 = 28 + 12 * 1024  # the fixed part and a generous table
_MAX_FMT = 1024  # WAVEFORMATEXTENSIBLE takes 40 bytes; far more is no format chunk


@dataclass(frozen=True)
class RiffChunk:
    """One chunk of a RIFF-family file: its id, where its body starts, the body's size.

    ``size`` is the 64-bit one from ``ds64`` where the 32-bit size defers to it.
    """

    id: bytes
    body_at: int
    size: int

    @property
    def name(self) -> str:
        """The id as text (Latin-1 maps every byte to a character)."""
        return self.id.decode("latin-1")


def _quoted(ck_id: bytes) -> str:
    return repr(ck_id.decode("latin-1"))


def read_exact(f: BinaryIO, pos: int, n: int, name: str, what: str, error: ErrorType) -> bytes:
    """``n`` bytes of ``f`` from ``pos``; ``error`` if the file holds fewer.

    ``name`` is the file's name and ``what`` the part being read, for the message.
    """
    f.seek(pos)
    data = f.read(n)
    if len(data) != n:
        raise error(
            f"{name!r}: the file is cut short: the {what} needs {n} bytes at offset {pos}, "
            f"the file holds {len(data)}"
        )
    return data


class RiffWalk:
    """The chunks of one RIFF, RIFX, RF64 or BW64 WAVE file (see the module's description).

    Parameters
    ----------
    f
        The file, open for binary reading.
    name
        Its name, for messages.
    size
        Its size in bytes.
    head
        Its first 12 bytes, which the caller has recognised: one of :data:`RIFF_IDS`,
        a size, ``WAVE``.
    error
        The error class (or any callable taking a message) raised on a broken header.

    Attributes
    ----------
    container
        ``"RIFF"``, ``"RIFX"``, ``"RF64"`` or ``"BW64"``.
    endian
        ``"<"``, or ``">"`` for RIFX: the byte order of sizes and format fields.
    riff_end
        Where the RIFF size says the file ends (at most the file's size).

    Raises
    ------
    error
        If an RF64 or BW64 file has no usable ``ds64`` chunk first.
    """

    def __init__(self, f: BinaryIO, name: str, size: int, head: bytes, *, error: ErrorType) -> None:
        self.file = f
        self.name = name
        self.size = size
        self.error = error
        self.container = head[:4].decode("latin-1")
        self.endian = ">" if self.container == "RIFX" else "<"
        self._sizes64: dict[bytes, int] = {}
        self._ds64: RiffChunk | None = None
        if self.container in ("RF64", "BW64"):
            self._ds64 = self._read_ds64()
            self._first = self._ds64.body_at + self._ds64.size + (self._ds64.size & 1)
        else:
            self._first = 12
            self.riff_end = min(size, struct.unpack_from(self.endian + "I", head, 4)[0] + 8)

    def read(self, pos: int, n: int, what: str) -> bytes:
        """``n`` bytes from ``pos`` (:func:`read_exact` with this file's name and error)."""
        return read_exact(self.file, pos, n, self.name, what, self.error)

    def body(self, chunk: RiffChunk, most: int, beyond: str) -> bytes:
        """The body of ``chunk``, refused unread if it declares more than ``most`` bytes.

        ``beyond`` ends the refusal's message, after "the <id> chunk declares N bytes".
        """
        what = f"{chunk.name.strip()} chunk"
        if chunk.size > most:
            raise self.error(f"{self.name!r}: the {what} declares {chunk.size} bytes{beyond}")
        return self.read(chunk.body_at, chunk.size, what)

    def format_body(self, chunk: RiffChunk) -> bytes:
        """The body of a ``fmt `` chunk, refused unread past :data:`_MAX_FMT` bytes."""
        return self.body(chunk, _MAX_FMT, f" (at most {_MAX_FMT})")

    def _read_ds64(self) -> RiffChunk:
        pos = 12
        ck_id, ck_size = struct.unpack("<4sI", self.read(pos, 8, "ds64 chunk header"))
        if ck_id != b"ds64":
            raise self.error(
                f"{self.name!r}: an {self.container} file must start with a ds64 chunk "
                f"(EBU Tech 3306), found {_quoted(ck_id)}"
            )
        if not 28 <= ck_size <= _MAX_DS64:
            raise self.error(
                f"{self.name!r}: the ds64 chunk declares {ck_size} bytes; 28 to {_MAX_DS64} "
                "are valid"
            )
        body = self.read(pos + 8, ck_size, "ds64 chunk")
        riff_size, data_size, _samples, table_len = struct.unpack_from("<QQQI", body)
        if table_len > (ck_size - 28) // 12:
            raise self.error(
                f"{self.name!r}: the ds64 table lists {table_len} chunk sizes, its chunk has "
                f"room for {(ck_size - 28) // 12}"
            )
        self._sizes64[b"data"] = data_size
        for k in range(table_len):
            entry_id, entry_size = struct.unpack_from("<4sQ", body, 28 + 12 * k)
            self._sizes64[entry_id] = entry_size
        self.riff_end = min(self.size, riff_size + 8)
        return RiffChunk(b"ds64", pos + 8, ck_size)

    def chunks(
        self, *, to_file_end: bool = False, whole: bool = False, limit: int | None = None
    ) -> Iterator[RiffChunk]:
        """The chunks in file order, ``ds64`` first where there is one; lazily, so a
        reader that has what it needs stops early.

        Parameters
        ----------
        to_file_end
            Walk to the end of the file rather than to where the RIFF size says (a
            lenient reader of headers whose RIFF size was never filled in).
        whole
            Refuse a chunk whose body reaches past the end of the file as soon as its
            header is read (for a reader that locates chunks it does not read, such as
            ``data``); otherwise only reading such a body fails. The pad byte of the last
            chunk may be missing either way: writers often leave it out.
        limit
            Most chunks walked before the header is refused as unusable.

        Raises
        ------
        error
            If a size defers to ``ds64`` and ``ds64`` does not list the chunk, or on the
            ``whole`` and ``limit`` conditions.
        """
        end = self.size if to_file_end else self.riff_end
        count = 0
        if self._ds64 is not None:
            count += 1
            yield self._ds64
        pos = self._first
        while pos + 8 <= end:
            if limit is not None and count >= limit:
                raise self.error(
                    f"{self.name!r}: more than {limit} chunks; the header is not usable"
                )
            ck_id, ck_size = struct.unpack(self.endian + "4sI", self.read(pos, 8, "chunk header"))
            if ck_size == _SIZE_IN_DS64 and self._sizes64:
                if ck_id not in self._sizes64:
                    raise self.error(
                        f"{self.name!r}: chunk {_quoted(ck_id)} defers its size to ds64, "
                        "which does not list it"
                    )
                ck_size = self._sizes64[ck_id]
            body_at = pos + 8
            if whole and body_at + ck_size > self.size:
                raise self.error(
                    f"{self.name!r}: chunk {_quoted(ck_id)} at offset {pos} declares {ck_size} "
                    f"bytes, past the end of the file ({self.size - body_at} remain): the file "
                    "is cut short or its header is wrong"
                )
            count += 1
            yield RiffChunk(ck_id, body_at, ck_size)
            pos = body_at + ck_size + (ck_size & 1)


@dataclass(frozen=True)
class WaveFormat:
    """What a ``fmt `` chunk says (Microsoft ``WAVEFORMATEX``/``WAVEFORMATEXTENSIBLE``).

    Attributes
    ----------
    tag
        ``wFormatTag`` as written (1 PCM, 3 IEEE float, :data:`WAVE_FORMAT_EXTENSIBLE`).
    channels, sample_rate, block_align, bits_per_sample
        The fixed 16 bytes' fields.
    extension_size, channel_mask, sub_format_tag
        For ``WAVE_FORMAT_EXTENSIBLE`` only (None otherwise): ``cbSize``,
        ``dwChannelMask`` and the first two bytes of the sub-format GUID, which are the
        format tag the extensible chunk stands for.
    """

    tag: int
    channels: int
    sample_rate: int
    block_align: int
    bits_per_sample: int
    extension_size: int | None = None
    channel_mask: int | None = None
    sub_format_tag: int | None = None


def parse_wave_format(body: bytes, name: str, *, error: ErrorType, endian: str = "<") -> WaveFormat:
    """The fields of a ``fmt `` chunk's body; ``error`` if it is too short for its tag.

    ``endian`` is ``"<"``, or ``">"`` for RIFX (:attr:`RiffWalk.endian`).
    """
    if len(body) < 16:
        raise error(f"{name!r}: the fmt chunk is {len(body)} bytes, at least 16 are needed")
    tag, channels, rate, _byte_rate, align, bits = struct.unpack_from(endian + "HHIIHH", body)
    if tag != WAVE_FORMAT_EXTENSIBLE:
        return WaveFormat(tag, channels, rate, align, bits)
    # WAVEFORMATEXTENSIBLE: 16 bytes of WAVEFORMAT, cbSize, then 22 extension bytes
    # (valid bits, channel mask, sub-format GUID).
    if len(body) < 40:
        raise error(
            f"{name!r}: the WAVE_FORMAT_EXTENSIBLE fmt chunk is {len(body)} bytes, 40 are needed"
        )
    cb_size, _valid_bits, mask, sub_tag = struct.unpack_from(endian + "HHIH", body, 16)
    return WaveFormat(tag, channels, rate, align, bits, cb_size, mask, sub_tag)
