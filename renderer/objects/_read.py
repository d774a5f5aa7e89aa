"""Reading an ADM master: the chosen audioProgramme resolved to the file's tracks.

The chain (ITU-R BS.2076-2, the model's overview figure): audioProgramme -> audioContent
-> audioObject (nested through audioObjectIDRef) -> audioTrackUID -> (via ``chna``, BS.2088)
the file track, and audioTrackUID -> audioTrackFormat -> audioStreamFormat ->
audioChannelFormat (or, BS.2076-2, audioTrackUID -> audioChannelFormat directly); the
audioObject's audioPackFormat (nested through audioPackFormatIDRef) must hold that channel.
Formats referenced but not defined in the file come from the common definitions
(:mod:`._common_data`, ITU-R BS.2094, from memory).
"""

from __future__ import annotations

import os
from collections import Counter
from dataclasses import dataclass
from fractions import Fraction

from ..errors import AdmError
from ._chna import ChnaEntry, parse_chna
from ._chunks import WavChunks, read_wav_chunks
from ._common import common_channel, common_pack, common_track_channel
from ._common_data import LFE_LOW_PASS_HZ
from ._definitions import Definitions, RawObject, read_definitions
from ._ids import TYPE_NAMES, type_code
from ._limits import MAX_DEPTH, MAX_NOTES
from ._model import (
    AdmMaster,
    BedChannel,
    ChannelFormat,
    HoaBlock,
    HoaPack,
    ObjectChannel,
    PackFormat,
    SpeakerBlock,
)
from ._xml import parse_axml

__all__ = ["read_adm"]

_SILENT_UID = "ATU_00000000"  # BS.2076: a reference to this UID is a silent track
_UNSUPPORTED_TYPES = ("Matrix", "Binaural")


def read_adm(
    path: str | os.PathLike[str],
    *,
    programme: str | None = None,
    chunks: WavChunks | None = None,
) -> AdmMaster:
    """Read an ADM broadcast WAV (RIFF, RF64 or BW64) and resolve one programme.

    Parameters
    ----------
    path
        The file: a WAV with ``axml`` (BS.2076 XML) and ``chna`` (BS.2088) chunks.
    programme
        The audioProgramme to play, by ID (``APR_1001``) or name; None for the first in
        the file.
    chunks
        The file's header walk (:func:`read_wav_chunks`) when the caller has it already.

    Returns
    -------
    AdmMaster
        The programme's objects, beds and HOA packs with their file tracks, gains, mutes
        and time spans; what is not supported is listed in ``ignored``.

    Raises
    ------
    AdmError
        If the header, ``chna`` or ``axml`` is broken or past a limit, a reference is
        missing or circular, or ``programme`` names none of the file's programmes.
    """
    if chunks is None:
        chunks = read_wav_chunks(path)
    if chunks.axml is None:
        raise AdmError(f"{chunks.path!r} has no axml chunk: it is not an ADM master")
    if chunks.chna is None:
        raise AdmError(
            f"{chunks.path!r} has an axml chunk but no chna chunk, so its tracks cannot be "
            "matched to the ADM description (BS.2088)"
        )
    entries = parse_chna(chunks.chna, chunks.channels)
    definitions = read_definitions(parse_axml(chunks.axml))
    return _Resolver(chunks, entries, definitions).master(programme)


@dataclass(frozen=True)
class _Span:
    path: tuple[str, ...]
    gain: float
    mute: bool
    start: Fraction
    end: Fraction | None


class _Resolver:
    def __init__(self, chunks: WavChunks, entries: tuple[ChnaEntry, ...], defs: Definitions):
        self.chunks = chunks
        self.chna = {e.uid: e for e in entries}
        self.defs = defs
        self.ignored: list[str] = list(defs.ignored)
        self.notes: list[str] = []
        self.packs_used: dict[str, PackFormat] = {}
        self.objects: list[ObjectChannel] = []
        self.beds: list[BedChannel] = []
        self.hoa: list[HoaPack] = []

    # -- formats ------------------------------------------------------------------------

    def channel(self, channel_id: str, by: str) -> ChannelFormat:
        found = self.defs.channels.get(channel_id) or common_channel(channel_id)
        if found is None:
            raise AdmError(
                f"audioChannelFormat {channel_id} (referenced by {by}) is neither defined in "
                "the file nor a common definition this reader knows"
            )
        return found

    def pack(self, pack_id: str, by: str) -> PackFormat:
        found = self.defs.packs.get(pack_id) or common_pack(pack_id)
        if found is None:
            raise AdmError(
                f"audioPackFormat {pack_id} (referenced by {by}) is neither defined in the "
                "file nor a common definition this reader knows"
            )
        return found

    def pack_channels(self, pack_id: str, by: str, stack: tuple[str, ...] = ()) -> list[str]:
        """Channel format IDs of a pack and its nested packs, depth first; cycles refused."""
        if pack_id in stack:
            raise AdmError("audioPackFormats nest in a circle: " + " -> ".join((*stack, pack_id)))
        if len(stack) >= MAX_DEPTH:
            raise AdmError(f"audioPackFormats nest more than {MAX_DEPTH} deep under {stack[0]}")
        pack = self.pack(pack_id, by)
        self.packs_used[pack_id] = pack
        out = list(pack.channel_ids)
        for inner in pack.pack_ids:
            out.extend(self.pack_channels(inner, pack_id, (*stack, pack_id)))
        return out

    def pack_closure(self, pack_id: str, by: str, stack: tuple[str, ...] = ()) -> list[str]:
        """The pack and every pack nested in it."""
        self.pack_channels(pack_id, by)  # checks cycles and existence
        out = [pack_id]
        for inner in self.pack(pack_id, by).pack_ids:
            out.extend(self.pack_closure(inner, pack_id))
        return out

    def track_channel(self, ref: str, uid: str) -> str:
        """The channel format a chna/axml track reference leads to."""
        if ref.startswith("AC_"):
            return ref
        if ref in self.defs.tracks:
            stream = self.defs.tracks[ref]
            if stream is None:
                raise AdmError(f"audioTrackFormat {ref} (of {uid}) refers to no audioStreamFormat")
        else:
            common = common_track_channel(ref)
            if common is None or common_channel(common) is None:
                raise AdmError(
                    f"audioTrackFormat {ref} (of {uid}) is neither defined in the file nor a "
                    "common definition this reader knows"
                )
            return common
        if stream not in self.defs.streams:
            raise AdmError(
                f"audioStreamFormat {stream} (referenced by audioTrackFormat {ref}) is not "
                "defined in the file"
            )
        channel = self.defs.streams[stream]
        if channel is None:
            raise AdmError(
                f"audioStreamFormat {stream} (of {uid}) refers to no audioChannelFormat: a "
                "coded stream, which is not supported (PCM tracks only)"
            )
        return channel

    def uid_target(self, uid: str, by: str) -> tuple[int, str, str]:
        """(file track, channel format ID, pack format ID) of a track UID."""
        entry = self.chna.get(uid)
        if entry is None:
            raise AdmError(
                f"audioTrackUID {uid} (referenced by {by}) is not in the chna chunk, so no "
                "file track carries it"
            )
        channel_id = self.track_channel(entry.track_ref, uid)
        if uid in self.defs.uids:
            ref, pack = self.defs.uids[uid]
            if ref is not None and self.track_channel(ref, uid) != channel_id:
                raise AdmError(
                    f"audioTrackUID {uid}: axml refers it to {ref}, chna to {entry.track_ref}, "
                    "and the two lead to different channel formats"
                )
            if pack is not None and pack != entry.pack_ref:
                raise AdmError(
                    f"audioTrackUID {uid}: axml gives pack {pack}, chna {entry.pack_ref}"
                )
        return entry.track, channel_id, entry.pack_ref

    # -- the programme ------------------------------------------------------------------

    def master(self, programme: str | None) -> AdmMaster:
        defs = self.defs
        programmes = tuple((k, v[0], v[1]) for k, v in defs.programmes.items())
        chosen: str | None = None
        if programme is not None:
            matches = [
                k for k, name, _ in programmes if programme.upper() == k or programme == name
            ]
            if not matches:
                choices = ", ".join(f"{k} ({n!r})" for k, n, _ in programmes) or "none"
                raise AdmError(
                    f"no audioProgramme {programme!r} in the file; its programmes: {choices}"
                )
            chosen = matches[0]
        elif programmes:
            chosen = programmes[0][0]
        if chosen is not None:
            content_ids = defs.programmes[chosen][1]
        elif defs.contents:
            content_ids = tuple(defs.contents)
            self.notes.append(
                "the file has no audioProgramme: every audioContent is played, in file order"
            )
        else:
            content_ids = ()
            self.notes.append(
                "the file has no audioProgramme or audioContent: every audioObject that no "
                "other object nests is played"
            )
        contents = []
        top_objects: list[str] = []
        for content_id in content_ids:
            if content_id not in defs.contents:
                raise AdmError(f"audioContent {content_id} (referenced by {chosen}) is not defined")
            name, object_ids = defs.contents[content_id]
            contents.append((content_id, name, object_ids))
            top_objects.extend(object_ids)
        if chosen is None and not content_ids:
            nested = {o for obj in defs.objects.values() for o in obj.object_ids}
            top_objects = [k for k in defs.objects if k not in nested]
        visited: set[str] = set()
        root = _Span((), 1.0, False, Fraction(0), None)
        for object_id in top_objects:
            self.visit(object_id, root, visited, f"{chosen or 'the file'}")
        return AdmMaster(
            path=self.chunks.path,
            container=self.chunks.container,
            sample_rate=self.chunks.sample_rate,
            channels=self.chunks.channels,
            frames=self.chunks.frames,
            programme_id=chosen,
            programme_name=defs.programmes[chosen][0] if chosen else None,
            programmes=programmes,
            contents=tuple(contents),
            objects=tuple(self.objects),
            beds=tuple(self.beds),
            hoa=tuple(self.hoa),
            packs=dict(self.packs_used),
            ignored=_summarise(self.ignored),
            notes=_summarise(self.notes),
        )

    def visit(self, object_id: str, parent: _Span, visited: set[str], by: str) -> None:
        if object_id in parent.path:
            raise AdmError(
                "audioObjects nest in a circle: " + " -> ".join((*parent.path, object_id))
            )
        if len(parent.path) >= MAX_DEPTH:
            raise AdmError(f"audioObjects nest more than {MAX_DEPTH} deep under {parent.path[0]}")
        obj = self.defs.objects.get(object_id)
        if obj is None:
            raise AdmError(f"audioObject {object_id} (referenced by {by}) is not defined")
        if object_id in visited:
            self.notes.append(
                f"audioObject {object_id} is referenced more than once in the programme; "
                "it is played once"
            )
            return
        visited.add(object_id)
        own_end = None if obj.duration is None else obj.start + obj.duration
        ends = [e for e in (parent.end, own_end) if e is not None]
        span = _Span(
            path=(*parent.path, object_id),
            gain=parent.gain * obj.gain,
            mute=parent.mute or obj.mute,
            start=max(parent.start, obj.start),
            end=min(ends) if ends else None,
        )
        if span.end is not None and span.end < span.start:
            self.notes.append(
                f"audioObject {object_id} starts after its enclosing object ends; it is silent"
            )
        self.place_tracks(obj, span)
        for inner in obj.object_ids:
            self.visit(inner, span, visited, object_id)

    def place_tracks(self, obj: RawObject, span: _Span) -> None:
        object_id = obj.object_id
        allowed: dict[str, str] = {}  # pack ID -> the object's pack it is in
        unsupported: dict[str, str] = {}  # pack ID -> its type, for Matrix and Binaural packs
        for pack_id in obj.pack_ids:
            kind = TYPE_NAMES[type_code(pack_id)]
            if kind in _UNSUPPORTED_TYPES:
                # Not resolved at all: their definitions (common or not) are not needed.
                unsupported[pack_id] = kind
                continue
            for inner in self.pack_closure(pack_id, object_id):
                allowed.setdefault(inner, pack_id)
        if obj.uids and not obj.pack_ids:
            raise AdmError(f"audioObject {object_id} has track UIDs but no audioPackFormatIDRef")
        hoa_groups: dict[str, list[tuple[int, ChannelFormat]]] = {}
        for uid in obj.uids:
            if uid == _SILENT_UID:
                continue
            entry = self.chna.get(uid)
            if entry is not None and entry.pack_ref in unsupported:
                self.ignored.append(
                    f"audioObject {object_id} ({obj.name!r}): pack {entry.pack_ref} is of type "
                    f"{unsupported[entry.pack_ref]}, which is not supported; chna track "
                    f"{entry.track + 1} is not rendered"
                )
                continue
            track, channel_id, pack_id = self.uid_target(uid, object_id)
            if pack_id not in allowed:
                raise AdmError(
                    f"audioTrackUID {uid} of audioObject {object_id} belongs to pack {pack_id} "
                    f"(chna), which is not the object's pack {', '.join(obj.pack_ids)} nor "
                    "nested in it"
                )
            top_pack = allowed[pack_id]
            if channel_id not in self.pack_channels(pack_id, uid):
                raise AdmError(
                    f"audioTrackUID {uid}: its channel format {channel_id} is not in its pack "
                    f"{pack_id}"
                )
            channel = self.channel(channel_id, uid)
            kind = channel.type_definition
            if kind == "Objects":
                self.objects.append(
                    ObjectChannel(
                        object_id,
                        obj.name,
                        span.path,
                        channel,
                        track,
                        uid,
                        span.gain,
                        span.mute,
                        span.start,
                        span.end,
                    )
                )
            elif kind == "DirectSpeakers":
                self.beds.append(self.bed(obj, span, pack_id, channel, track, uid))
            elif kind == "HOA":
                hoa_groups.setdefault(top_pack, []).append((track, channel))
            else:
                self.ignored.append(
                    f"audioObject {object_id} ({obj.name!r}): pack {pack_id} is of type {kind}, "
                    f"which is not supported; chna track {track + 1} is not rendered"
                )
        for pack_id, members in hoa_groups.items():
            self.hoa.append(self.hoa_pack(obj, span, pack_id, members))

    def bed(
        self,
        obj: RawObject,
        span: _Span,
        pack_id: str,
        channel: ChannelFormat,
        track: int,
        uid: str,
    ) -> BedChannel:
        blocks = [b for b in channel.blocks if isinstance(b, SpeakerBlock)]
        first = blocks[0]
        if len(blocks) > 1:
            self.ignored.append(
                f"audioChannelFormat {channel.channel_id}: a loudspeaker that moves "
                f"({len(blocks)} blocks) is placed at its first block's position"
            )
        label = first.labels[0] if first.labels else None
        by_label = label is not None and label.upper().startswith("LFE")
        by_frequency = channel.low_pass_hz is not None and channel.low_pass_hz <= LFE_LOW_PASS_HZ
        return BedChannel(
            obj.object_id,
            obj.name,
            span.path,
            pack_id,
            channel,
            track,
            uid,
            label,
            first.cartesian,
            first.position,
            by_label or by_frequency,
            span.gain,
            span.mute,
            span.start,
            span.end,
        )

    def hoa_pack(
        self, obj: RawObject, span: _Span, pack_id: str, members: list[tuple[int, ChannelFormat]]
    ) -> HoaPack:
        pack = self.pack(pack_id, obj.object_id)
        norms: set[str] = set()
        nfcs: set[float] = set()
        rows: list[tuple[int, int]] = []
        order = 0
        for track, channel in members:
            block = next(iter(channel.blocks), None)
            assert isinstance(block, HoaBlock)
            acn = block.order * block.order + block.order + block.degree
            rows.append((acn, track))
            order = max(order, block.order)
            norms.add(block.normalization or pack.normalization or "SN3D")
            if block.nfc_ref_dist or pack.nfc_ref_dist:
                nfcs.add(float(block.nfc_ref_dist or pack.nfc_ref_dist or 0.0))
        acns = [a for a, _ in rows]
        repeated = sorted(a for a, n in Counter(acns).items() if n > 1)
        if repeated:
            raise AdmError(f"HOA pack {pack_id} of {obj.object_id} carries ACN {repeated} twice")
        if len(norms) > 1:
            raise AdmError(
                f"HOA pack {pack_id} of {obj.object_id} mixes normalisations {sorted(norms)}"
            )
        norm = norms.pop()
        if norm not in ("SN3D", "N3D", "FuMa"):
            raise AdmError(f"HOA pack {pack_id}: normalization {norm!r} is none of SN3D, N3D, FuMa")
        rows.sort()
        if len(rows) != (order + 1) ** 2:
            self.notes.append(
                f"HOA pack {pack_id} of {obj.object_id} carries {len(rows)} of the "
                f"{(order + 1) ** 2} channels of order {order}; the missing ones are silent"
            )
        return HoaPack(
            obj.object_id,
            obj.name,
            span.path,
            pack_id,
            order,
            norm,
            tuple(t for _, t in rows),
            tuple(a for a, _ in rows),
            nfcs.pop() if len(nfcs) == 1 else None,
            span.gain,
            span.mute,
            span.start,
            span.end,
        )


def _summarise(messages: list[str]) -> tuple[str, ...]:
    """Identical messages once, with their count; at most :data:`MAX_NOTES` kept."""
    counts = Counter(messages)
    out = [m if counts[m] == 1 else f"{m} ({counts[m]} times)" for m in dict.fromkeys(messages)]
    if len(out) > MAX_NOTES:
        out = out[:MAX_NOTES] + [f"... and {len(out) - MAX_NOTES} more"]
    return tuple(out)
