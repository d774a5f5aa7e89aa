"""ADM broadcast WAVs written byte by byte: the chunks of a master and its ``axml`` text.

The chunk layouts follow Microsoft's RIFF/WAVE, EBU Tech 3306 (RF64: ``ds64`` with the
64-bit RIFF size, data size, sample count and a table of other chunk sizes; 32-bit sizes
of 0xFFFFFFFF) and ITU-R BS.2088 (BW64, the same with ``BW64``; ``chna``: uint16
numTracks, uint16 numUIDs, 40-byte entries of uint16 trackIndex, 12-char UID, 14-char
trackRef, 11-char packRef, a pad byte). The XML follows the structure and examples of
ITU-R BS.2076-2.

:func:`write_master` writes a whole master (the benchmark's synthetic master, the tests'
hand-written ones), the audio from an array or in blocks. It can also write what no
careful encoder would (wrong counts, chunks past the end, no ``ds64``), so that the
reader's refusals can be tested with the same writer. The element builders
(:func:`programme`, :func:`audio_object`, :func:`object_block`, ...) return XML text; names
and attribute values are escaped, IDs are written as given.
"""

from __future__ import annotations

import os
import struct
from collections.abc import Iterable, Iterator, Sequence
from pathlib import Path
from xml.sax.saxutils import escape, quoteattr

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import AdmError

__all__ = [
    "SUBTYPES",
    "audio_object",
    "channel",
    "chna_body",
    "content",
    "document",
    "fmt_body",
    "object_block",
    "pack",
    "programme",
    "seconds",
    "speaker_block",
    "stream_and_track",
    "write_master",
]

#: Sample formats :func:`write_master` writes: name -> (wFormatTag, bits per sample).
SUBTYPES: dict[str, tuple[int, int]] = {"FLOAT": (0x0003, 32), "PCM_24": (0x0001, 24)}

Entry = tuple[int, str, str, str]  # 1-based track index, UID, trackRef, packRef


def chna_body(
    entries: Sequence[Entry],
    *,
    num_tracks: int | None = None,
    num_uids: int | None = None,
    spare: int = 0,
) -> bytes:
    """A ``chna`` body (BS.2088 section 4); counts from the entries unless given;
    ``spare`` zeroed entries after them."""
    tracks = len({e[0] for e in entries}) if num_tracks is None else num_tracks
    uids = len(entries) if num_uids is None else num_uids
    out = [struct.pack("<HH", tracks, uids)]
    for index, uid, track_ref, pack_ref in entries:
        out.append(
            struct.pack("<H12s14s11sx", index, uid.encode(), track_ref.encode(), pack_ref.encode())
        )
    out.append(bytes(40 * spare))
    return b"".join(out)


def fmt_body(channels: int, rate: int, subtype: str = "FLOAT") -> bytes:
    """A plain ``fmt `` body (WAVE_FORMAT_PCM or WAVE_FORMAT_IEEE_FLOAT) for ``subtype``."""
    tag, bits = _subtype(subtype)
    width = bits // 8
    return struct.pack(
        "<HHIIHH", tag, channels, rate, rate * channels * width, channels * width, bits
    )


def _subtype(subtype: str) -> tuple[int, int]:
    if subtype not in SUBTYPES:
        raise AdmError(f"unknown subtype {subtype!r}; choose one of {', '.join(SUBTYPES)}")
    return SUBTYPES[subtype]


def _chunk_header(ck_id: bytes, size: int) -> bytes:
    return ck_id + struct.pack("<I", size)


def _chunk(ck_id: bytes, body: bytes, size: int | None = None) -> bytes:
    declared = len(body) if size is None else size
    return _chunk_header(ck_id, declared) + body + (b"\x00" if len(body) & 1 else b"")


def _encoded(block: NDArray[np.floating], subtype: str) -> bytes:
    """Little-endian sample bytes of ``block`` (frames x channels), interleaved."""
    if subtype == "FLOAT":
        return np.ascontiguousarray(block, dtype="<f4").tobytes()
    # PCM_24: full scale 2**23, clipped to the integers' range (common practice).
    q = np.clip(np.round(np.asarray(block, dtype=np.float64) * 8388608.0), -8388608, 8388607)
    as_int = np.ascontiguousarray(q, dtype="<i4").reshape(-1)
    return as_int.view(np.uint8).reshape(-1, 4)[:, :3].tobytes()


def write_master(
    path: str | os.PathLike[str],
    *,
    audio: ArrayLike | Iterable[NDArray[np.floating]],
    rate: int = 48000,
    chna: bytes | None,
    axml: bytes | str | None,
    container: str = "RIFF",
    subtype: str = "FLOAT",
    frames: int | None = None,
    channels: int | None = None,
    axml_after_data: bool = False,
    extra: Iterable[tuple[bytes, bytes]] = (),
    axml_in_ds64: bool = False,
) -> Path:
    """Write a broadcast WAV with ADM chunks: ``fmt``, ``chna``, ``axml``, ``data``.

    Parameters
    ----------
    path : path
        The file to write.
    audio : array_like or iterable of arrays
        The samples, frames x channels, as one array or as blocks (then ``frames`` and
        ``channels`` are required: the header is written first). Written as ``subtype``.
    rate : int
        Sample rate in Hz.
    chna, axml : bytes, str or None
        The chunks' bodies (:func:`chna_body`, :func:`document`); None leaves one out.
    container : {"RIFF", "RF64", "BW64"}
        For RF64 (EBU Tech 3306) and BW64 (BS.2088) the ``data`` chunk's 32-bit size is
        0xFFFFFFFF and its size is in ``ds64`` (and the ``axml`` chunk's too when
        ``axml_in_ds64``).
    subtype : {"FLOAT", "PCM_24"}
        32-bit float or 24-bit integer samples.
    axml_after_data, extra
        Put ``axml`` after the audio; add chunks ``(id, body)`` after ``fmt``.

    Returns
    -------
    Path
        ``path``.
    """
    if container not in ("RIFF", "RF64", "BW64"):
        raise AdmError(f"unknown container {container!r}; choose one of RIFF, RF64, BW64")
    _, bits = _subtype(subtype)
    blocks: Iterator[NDArray[np.floating]]
    if isinstance(audio, np.ndarray) or frames is None:
        whole = np.asarray(audio, dtype=np.float32)
        if whole.ndim != 2:
            raise AdmError(f"audio must be frames x channels, got shape {whole.shape!r}")
        frames, channels = whole.shape
        blocks = iter([whole])
    else:
        if channels is None:
            raise AdmError("audio given in blocks needs frames and channels")
        blocks = iter(audio)  # type: ignore[arg-type]
    data_size = frames * channels * bits // 8
    xml = axml.encode() if isinstance(axml, str) else axml
    sixty_four = container in ("RF64", "BW64")
    parts = [_chunk(b"fmt ", fmt_body(channels, rate, subtype))]
    parts.extend(_chunk(k, v) for k, v in extra)
    if chna is not None:
        parts.append(_chunk(b"chna", chna))
    axml_chunk = b""
    if xml is not None:
        axml_chunk = _chunk(b"axml", xml, 0xFFFFFFFF if (sixty_four and axml_in_ds64) else None)
    if not axml_after_data:
        parts.append(axml_chunk)
    before = b"".join(parts)
    data_head = _chunk_header(b"data", 0xFFFFFFFF if sixty_four else data_size)
    pad = b"\x00" if data_size & 1 else b""
    after = axml_chunk if axml_after_data else b""
    body_size = len(before) + len(data_head) + data_size + len(pad) + len(after)
    if sixty_four:
        table = [(b"axml", len(xml or b""))] if axml_in_ds64 else []
        riff_size = 4 + 8 + 28 + 12 * len(table) + body_size
        ds64 = struct.pack("<QQQI", riff_size, data_size, frames, len(table))
        ds64 += b"".join(struct.pack("<4sQ", k, v) for k, v in table)
        head = container.encode() + struct.pack("<I", 0xFFFFFFFF) + b"WAVE" + _chunk(b"ds64", ds64)
    else:
        head = b"RIFF" + struct.pack("<I", 4 + body_size) + b"WAVE"
    path = Path(path)
    written = 0
    with open(path, "wb") as fh:
        fh.write(head + before + data_head)
        for block in blocks:
            b = np.asarray(block)
            if b.ndim != 2 or b.shape[1] != channels:
                raise AdmError(f"audio blocks must be (frames, {channels}), got {b.shape!r}")
            fh.write(_encoded(b, subtype))
            written += len(b)
        if written != frames:
            raise AdmError(f"audio blocks held {written} frames, {frames} were announced")
        fh.write(pad + after)
    return path


# -- XML ---------------------------------------------------------------------------------


def _attr(value: str) -> str:
    return quoteattr(value)


def document(*elements: str, wrapped: bool = True) -> str:
    """An ``axml`` document holding ``elements`` in audioFormatExtended (EBU Core wrapper)."""
    inner = "\n".join(elements)
    body = f'<audioFormatExtended version="ITU-R_BS.2076-2">\n{inner}\n</audioFormatExtended>'
    if not wrapped:
        return '<?xml version="1.0" encoding="UTF-8"?>\n' + body
    return (
        '<?xml version="1.0" encoding="UTF-8"?>\n'
        '<ebuCoreMain xmlns="urn:ebu:metadata-schema:ebuCore_2016" '
        'xmlns:dc="http://purl.org/dc/elements/1.1/">'
        f"<coreMetadata><format>{body}</format></coreMetadata></ebuCoreMain>"
    )


def programme(ident: str, name: str, contents: Sequence[str]) -> str:
    """An audioProgramme referring to ``contents``."""
    refs = "".join(f"<audioContentIDRef>{c}</audioContentIDRef>" for c in contents)
    return (
        f'<audioProgramme audioProgrammeID="{ident}" audioProgrammeName={_attr(name)} '
        f'start="00:00:00.00000">{refs}</audioProgramme>'
    )


def content(ident: str, name: str, objects: Sequence[str]) -> str:
    """An audioContent referring to ``objects``."""
    refs = "".join(f"<audioObjectIDRef>{o}</audioObjectIDRef>" for o in objects)
    return (
        f'<audioContent audioContentID="{ident}" audioContentName={_attr(name)}>'
        f"{refs}</audioContent>"
    )


def audio_object(
    ident: str,
    name: str,
    *,
    packs: Sequence[str] = (),
    uids: Sequence[str] = (),
    objects: Sequence[str] = (),
    start: str | None = None,
    duration: str | None = None,
    gain: str | None = None,
    mute: str | None = None,
) -> str:
    """An audioObject; ``gain`` is a number's text or a whole ``<gain>`` element."""
    attrs = f'audioObjectID="{ident}" audioObjectName={_attr(name)}'
    if start is not None:
        attrs += f" start={_attr(start)}"
    if duration is not None:
        attrs += f" duration={_attr(duration)}"
    body = "".join(f"<audioPackFormatIDRef>{p}</audioPackFormatIDRef>" for p in packs)
    body += "".join(f"<audioObjectIDRef>{o}</audioObjectIDRef>" for o in objects)
    body += "".join(f"<audioTrackUIDRef>{u}</audioTrackUIDRef>" for u in uids)
    if gain is not None:
        body += gain if gain.startswith("<") else f"<gain>{escape(gain)}</gain>"
    if mute is not None:
        body += f"<mute>{escape(mute)}</mute>"
    return f"<audioObject {attrs}>{body}</audioObject>"


def pack(
    ident: str,
    type_definition: str,
    channels: Sequence[str],
    packs: Sequence[str] = (),
    extra: str = "",
) -> str:
    """An audioPackFormat of ``channels`` (and nested ``packs``); ``extra`` is XML text."""
    body = "".join(f"<audioChannelFormatIDRef>{c}</audioChannelFormatIDRef>" for c in channels)
    body += "".join(f"<audioPackFormatIDRef>{p}</audioPackFormatIDRef>" for p in packs)
    return (
        f'<audioPackFormat audioPackFormatID="{ident}" audioPackFormatName="{ident}" '
        f"typeDefinition={_attr(type_definition)}>{body}{extra}</audioPackFormat>"
    )


def channel(ident: str, type_definition: str, blocks: Sequence[str], extra: str = "") -> str:
    """An audioChannelFormat holding ``blocks`` (XML text of audioBlockFormats)."""
    return (
        f'<audioChannelFormat audioChannelFormatID="{ident}" audioChannelFormatName="{ident}" '
        f"typeDefinition={_attr(type_definition)}>{''.join(blocks)}{extra}</audioChannelFormat>"
    )


def object_block(
    channel_id: str,
    k: int,
    *,
    rtime: str | None = None,
    duration: str | None = None,
    az: float | None = None,
    el: float | None = None,
    dist: float | None = None,
    xyz: tuple[float, float, float] | None = None,
    jump: str | None = None,
    interpolation: str | None = None,
    extra: str = "",
) -> str:
    """An Objects audioBlockFormat: polar ``az``/``el``/``dist`` or cartesian ``xyz``."""
    attrs = f'audioBlockFormatID="AB_{channel_id[3:]}_{k:08X}"'
    if rtime is not None:
        attrs += f" rtime={_attr(rtime)}"
    if duration is not None:
        attrs += f" duration={_attr(duration)}"
    body = ""
    if xyz is not None:
        body += "<cartesian>1</cartesian>"
        body += "".join(f'<position coordinate="{c}">{v}</position>' for c, v in zip("XYZ", xyz))
    else:
        body += f'<position coordinate="azimuth">{az}</position>'
        body += f'<position coordinate="elevation">{el if el is not None else 0.0}</position>'
        if dist is not None:
            body += f'<position coordinate="distance">{dist}</position>'
    if jump is not None:
        ilen = f" interpolationLength={_attr(interpolation)}" if interpolation is not None else ""
        body += f"<jumpPosition{ilen}>{escape(jump)}</jumpPosition>"
    return f"<audioBlockFormat {attrs}>{body}{extra}</audioBlockFormat>"


def speaker_block(channel_id: str, label: str, az: float, el: float) -> str:
    """A DirectSpeakers audioBlockFormat: a BS.2051 speaker label and its position."""
    return (
        f'<audioBlockFormat audioBlockFormatID="AB_{channel_id[3:]}_00000001">'
        f"<speakerLabel>{escape(label)}</speakerLabel>"
        f'<position coordinate="azimuth">{az}</position>'
        f'<position coordinate="elevation">{el}</position>'
        f'<position coordinate="distance">1.0</position></audioBlockFormat>'
    )


def stream_and_track(channel_id: str, pack_id: str) -> str:
    """An audioStreamFormat and audioTrackFormat for a PCM channel (AS/AT share yyyyxxxx)."""
    code = channel_id[3:]
    return (
        f'<audioStreamFormat audioStreamFormatID="AS_{code}" audioStreamFormatName="s" '
        'formatLabel="0001" formatDefinition="PCM">'
        f"<audioChannelFormatIDRef>{channel_id}</audioChannelFormatIDRef>"
        f"<audioPackFormatIDRef>{pack_id}</audioPackFormatIDRef>"
        f"<audioTrackFormatIDRef>AT_{code}_01</audioTrackFormatIDRef></audioStreamFormat>"
        f'<audioTrackFormat audioTrackFormatID="AT_{code}_01" audioTrackFormatName="t" '
        'formatLabel="0001" formatDefinition="PCM">'
        f"<audioStreamFormatIDRef>AS_{code}</audioStreamFormatIDRef></audioTrackFormat>"
    )


def seconds(t: float) -> str:
    """``t`` seconds as BS.2076's hh:mm:ss.zzzzz."""
    whole = int(t)
    frac = round((t - whole) * 100_000)
    if frac == 100_000:
        whole, frac = whole + 1, 0
    return f"{whole // 3600:02d}:{whole // 60 % 60:02d}:{whole % 60:02d}.{frac:05d}"
