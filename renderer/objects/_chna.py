"""The ``chna`` chunk (ITU-R BS.2088 section 4): which audioTrackUID each file track carries.

Layout (little-endian): ``numTracks`` (uint16), ``numUIDs`` (uint16), then entries of
40 bytes: ``trackIndex`` (uint16, 1-based; 0 marks a spare, unused entry), ``UID``
(12 characters, ``ATU_xxxxxxxx``), ``trackRef`` (14 characters, ``AT_yyyyxxxx_zz``),
``packRef`` (11 characters, ``AP_yyyyxxxx``) and one pad byte. Writers often reserve
spare entries for later edits, so the chunk may be longer than ``numUIDs`` entries.

BS.2076-2 lets a track UID refer to an audioChannelFormat directly, without stream and
track formats; such files write ``AC_yyyyxxxx`` in ``trackRef``, padded with NULs, and
that form is accepted too.
"""

from __future__ import annotations

import re
import struct
from dataclasses import dataclass

from ..errors import AdmError

__all__ = ["ChnaEntry", "parse_chna"]

_ENTRY = struct.Struct("<H12s14s11sx")
_UID = re.compile("ATU_[0-9a-fA-F]{8}")
_TRACK_REF = re.compile("AT_[0-9a-fA-F]{8}_[0-9a-fA-F]{2}|AC_[0-9a-fA-F]{8}")
_PACK_REF = re.compile("AP_[0-9a-fA-F]{8}")


@dataclass(frozen=True)
class ChnaEntry:
    """One ``chna`` entry: a track UID on a file track (``track`` is 0-based here)."""

    track: int
    uid: str
    track_ref: str
    pack_ref: str


def _text(raw: bytes, field: str, k: int) -> str:
    try:
        return raw.rstrip(b"\x00 ").decode("ascii")
    except UnicodeDecodeError:
        raise AdmError(f"chna entry {k + 1}: {field} {raw!r} is not ASCII text") from None


def parse_chna(body: bytes, channels: int) -> tuple[ChnaEntry, ...]:
    """The entries of a ``chna`` body, checked against a file of ``channels`` tracks.

    Raises
    ------
    AdmError
        If the chunk is shorter than its counts say, an ID has the wrong form, a track
        index is 0-based or past the file's channels, a UID appears twice, or the counts
        disagree with the entries.
    """
    if len(body) < 4:
        raise AdmError(f"the chna chunk is {len(body)} bytes; at least 4 are needed")
    num_tracks, num_uids = struct.unpack_from("<HH", body)
    slots = (len(body) - 4) // _ENTRY.size
    if num_uids > slots:
        raise AdmError(
            f"the chna chunk declares {num_uids} track UIDs but has room for {slots} entries "
            f"({len(body)} bytes)"
        )
    entries: list[ChnaEntry] = []
    seen: set[str] = set()
    for k in range(slots):
        index, uid_raw, track_raw, pack_raw = _ENTRY.unpack_from(body, 4 + k * _ENTRY.size)
        if index == 0:
            continue  # a spare entry
        uid = _text(uid_raw, "UID", k)
        track_ref = _text(track_raw, "trackRef", k)
        pack_ref = _text(pack_raw, "packRef", k)
        if not _UID.fullmatch(uid):
            raise AdmError(f"chna entry {k + 1}: UID {uid!r} is not of the form ATU_xxxxxxxx")
        if not _TRACK_REF.fullmatch(track_ref):
            raise AdmError(
                f"chna entry {k + 1} ({uid}): trackRef {track_ref!r} is not of the form "
                "AT_yyyyxxxx_zz (or AC_yyyyxxxx)"
            )
        if not _PACK_REF.fullmatch(pack_ref):
            raise AdmError(
                f"chna entry {k + 1} ({uid}): packRef {pack_ref!r} is not of the form AP_yyyyxxxx"
            )
        if index > channels:
            raise AdmError(
                f"chna entry {k + 1} ({uid}): track index {index} is past the file's "
                f"{channels} channels (indices are 1-based)"
            )
        if uid.upper() in seen:
            raise AdmError(f"chna entry {k + 1}: UID {uid} appears more than once")
        seen.add(uid.upper())
        entries.append(ChnaEntry(index - 1, uid.upper(), track_ref.upper(), pack_ref.upper()))
    if len(entries) != num_uids:
        raise AdmError(
            f"the chna chunk declares {num_uids} track UIDs but holds {len(entries)} entries "
            "with a track index"
        )
    tracks = len({e.track for e in entries})
    if tracks != num_tracks:
        raise AdmError(f"the chna chunk declares {num_tracks} tracks but its entries use {tracks}")
    return tuple(entries)
