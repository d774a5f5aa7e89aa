"""Generators of ADM broadcast WAVs for the tests, written byte by byte.

Only ``struct`` and numpy, not the module under test: the chunk layouts follow
Microsoft's RIFF/WAVE, EBU Tech 3306 (RF64: ``ds64`` with the 64-bit RIFF size, data
size, sample count and a table of other chunk sizes; 32-bit sizes of 0xFFFFFFFF) and
ITU-R BS.2088 (BW64, the same with ``BW64``; ``chna``: uint16 numTracks, uint16 numUIDs,
40-byte entries of uint16 trackIndex, 12-char UID, 14-char trackRef, 11-char packRef, a
pad byte). The XML follows the structure and examples of ITU-R BS.2076-2. The writers can
also write what no careful encoder would: wrong counts, chunks past the end, no ds64.
"""

from __future__ import annotations

import struct
from collections.abc import Iterable, Sequence
from pathlib import Path

import numpy as np

FLOAT = 0x0003

Entry = tuple[int, str, str, str]  # 1-based track index, UID, trackRef, packRef


def chna_body(
    entries: Sequence[Entry],
    *,
    num_tracks: int | None = None,
    num_uids: int | None = None,
    spare: int = 0,
) -> bytes:
    """A ``chna`` body; counts from the entries unless given; ``spare`` zeroed entries."""
    tracks = len({e[0] for e in entries}) if num_tracks is None else num_tracks
    uids = len(entries) if num_uids is None else num_uids
    out = [struct.pack("<HH", tracks, uids)]
    for index, uid, track_ref, pack_ref in entries:
        out.append(
            struct.pack("<H12s14s11sx", index, uid.encode(), track_ref.encode(), pack_ref.encode())
        )
    out.append(bytes(40 * spare))
    return b"".join(out)


def fmt_body(channels: int, rate: int) -> bytes:
    """A plain 32-bit float ``fmt `` body."""
    return struct.pack("<HHIIHH", FLOAT, channels, rate, rate * channels * 4, channels * 4, 32)


def _chunk(ck_id: bytes, body: bytes, size: int | None = None) -> bytes:
    declared = len(body) if size is None else size
    return ck_id + struct.pack("<I", declared) + body + (b"\x00" if len(body) & 1 else b"")


def write_master(
    path: Path,
    *,
    audio: np.ndarray,
    rate: int = 48000,
    chna: bytes | None,
    axml: bytes | str | None,
    container: str = "RIFF",
    axml_after_data: bool = False,
    extra: Iterable[tuple[bytes, bytes]] = (),
    axml_in_ds64: bool = False,
) -> Path:
    """Write a broadcast WAV of 32-bit float ``audio`` (frames x channels) with ADM chunks.

    ``container`` is ``RIFF``, ``RF64`` or ``BW64``; for the latter two, the ``data``
    chunk's 32-bit size is 0xFFFFFFFF and its size is in ``ds64`` (and the ``axml``
    chunk's too when ``axml_in_ds64``).
    """
    audio = np.asarray(audio, dtype="<f4")
    frames, channels = audio.shape
    data = audio.tobytes()
    xml = axml.encode() if isinstance(axml, str) else axml
    sixty_four = container in ("RF64", "BW64")
    parts = [_chunk(b"fmt ", fmt_body(channels, rate))]
    parts.extend(_chunk(k, v) for k, v in extra)
    if chna is not None:
        parts.append(_chunk(b"chna", chna))
    axml_chunk = b""
    if xml is not None:
        axml_chunk = _chunk(b"axml", xml, 0xFFFFFFFF if (sixty_four and axml_in_ds64) else None)
    if not axml_after_data:
        parts.append(axml_chunk)
    parts.append(_chunk(b"data", data, 0xFFFFFFFF if sixty_four else None))
    if axml_after_data:
        parts.append(axml_chunk)
    body = b"".join(parts)
    if sixty_four:
        table = [(b"axml", len(xml or b""))] if axml_in_ds64 else []
        riff_size = 4 + 8 + 28 + 12 * len(table) + len(body)
        ds64 = struct.pack("<QQQI", riff_size, len(data), frames, len(table))
        ds64 += b"".join(struct.pack("<4sQ", k, v) for k, v in table)
        blob = container.encode() + struct.pack("<I", 0xFFFFFFFF) + b"WAVE"
        blob += _chunk(b"ds64", ds64) + body
    else:
        blob = b"RIFF" + struct.pack("<I", 4 + len(body)) + b"WAVE" + body
    path.write_bytes(blob)
    return path


# -- XML ---------------------------------------------------------------------------------


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
    refs = "".join(f"<audioContentIDRef>{c}</audioContentIDRef>" for c in contents)
    return (
        f'<audioProgramme audioProgrammeID="{ident}" audioProgrammeName="{name}" '
        f'start="00:00:00.00000">{refs}</audioProgramme>'
    )


def content(ident: str, name: str, objects: Sequence[str]) -> str:
    refs = "".join(f"<audioObjectIDRef>{o}</audioObjectIDRef>" for o in objects)
    return f'<audioContent audioContentID="{ident}" audioContentName="{name}">{refs}</audioContent>'


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
    attrs = f'audioObjectID="{ident}" audioObjectName="{name}"'
    if start is not None:
        attrs += f' start="{start}"'
    if duration is not None:
        attrs += f' duration="{duration}"'
    body = "".join(f"<audioPackFormatIDRef>{p}</audioPackFormatIDRef>" for p in packs)
    body += "".join(f"<audioObjectIDRef>{o}</audioObjectIDRef>" for o in objects)
    body += "".join(f"<audioTrackUIDRef>{u}</audioTrackUIDRef>" for u in uids)
    if gain is not None:
        body += gain if gain.startswith("<") else f"<gain>{gain}</gain>"
    if mute is not None:
        body += f"<mute>{mute}</mute>"
    return f"<audioObject {attrs}>{body}</audioObject>"


def pack(
    ident: str,
    type_definition: str,
    channels: Sequence[str],
    packs: Sequence[str] = (),
    extra: str = "",
) -> str:
    body = "".join(f"<audioChannelFormatIDRef>{c}</audioChannelFormatIDRef>" for c in channels)
    body += "".join(f"<audioPackFormatIDRef>{p}</audioPackFormatIDRef>" for p in packs)
    return (
        f'<audioPackFormat audioPackFormatID="{ident}" audioPackFormatName="{ident}" '
        f'typeDefinition="{type_definition}">{body}{extra}</audioPackFormat>'
    )


def channel(ident: str, type_definition: str, blocks: Sequence[str], extra: str = "") -> str:
    return (
        f'<audioChannelFormat audioChannelFormatID="{ident}" audioChannelFormatName="{ident}" '
        f'typeDefinition="{type_definition}">{"".join(blocks)}{extra}</audioChannelFormat>'
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
    attrs = f'audioBlockFormatID="AB_{channel_id[3:]}_{k:08X}"'
    if rtime is not None:
        attrs += f' rtime="{rtime}"'
    if duration is not None:
        attrs += f' duration="{duration}"'
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
        ilen = f' interpolationLength="{interpolation}"' if interpolation is not None else ""
        body += f"<jumpPosition{ilen}>{jump}</jumpPosition>"
    return f"<audioBlockFormat {attrs}>{body}{extra}</audioBlockFormat>"


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
    """``t`` seconds as hh:mm:ss.zzzzz."""
    whole = int(t)
    frac = round((t - whole) * 100_000)
    return f"{whole // 3600:02d}:{whole // 60 % 60:02d}:{whole % 60:02d}.{frac:05d}"
