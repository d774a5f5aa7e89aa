"""The ADM model as the reader returns it: frozen dataclasses, times as exact fractions.

Two levels. The *definitions* (:class:`ChannelFormat`, :class:`PackFormat` and their
blocks) are the file's audioChannelFormats and audioPackFormats, or the common ones it
references. The *master* (:class:`AdmMaster`) is one audioProgramme resolved down to the
file's tracks: every track the programme plays, as an object channel
(:class:`ObjectChannel`), a bed loudspeaker (:class:`BedChannel`) or a member of an HOA
pack (:class:`HoaPack`), with the gains, mutes and time spans of the audioObjects above it.

Conventions: track indices are 0-based file channels (``chna`` counts from 1); times are
seconds from the start of the file, as :class:`fractions.Fraction`; gains are linear;
polar positions are azimuth (degrees, counter-clockwise from the front, positive to the
left), elevation (degrees, up) and distance (1 = the reference distance); cartesian
positions are the ADM's X (right), Y (front), Z (up), each in -1..1 of the room's box.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from typing import Any

__all__ = [
    "AdmMaster",
    "BedChannel",
    "ChannelFormat",
    "HoaBlock",
    "HoaPack",
    "ObjectBlock",
    "ObjectChannel",
    "PackFormat",
    "SpeakerBlock",
]


def _seconds(value: Fraction | None) -> float | None:
    return None if value is None else float(value)


@dataclass(frozen=True)
class ObjectBlock:
    """One audioBlockFormat of an Objects channel (BS.2076-2, the Objects sub-elements).

    ``rtime`` and ``duration`` are relative to the audioObject's start; both None for a
    block that holds for the whole object. ``position`` is (azimuth, elevation, distance)
    or, when ``cartesian``, (X, Y, Z). ``jump_position`` and ``interpolation_length``
    decide how the position moves from the previous block's (see :func:`object_positions`).
    """

    block_id: str
    rtime: Fraction | None
    duration: Fraction | None
    cartesian: bool
    position: tuple[float, float, float]
    jump_position: bool
    interpolation_length: Fraction | None
    gain: float
    width: float
    height: float
    depth: float
    diffuse: float

    def to_dict(self) -> dict[str, Any]:
        """A JSON-ready summary."""
        return {
            "id": self.block_id,
            "rtime": _seconds(self.rtime),
            "duration": _seconds(self.duration),
            "cartesian": self.cartesian,
            "position": list(self.position),
            "jump_position": self.jump_position,
            "interpolation_length": _seconds(self.interpolation_length),
            "gain": self.gain,
            "width": self.width,
            "height": self.height,
            "depth": self.depth,
            "diffuse": self.diffuse,
        }


@dataclass(frozen=True)
class SpeakerBlock:
    """One audioBlockFormat of a DirectSpeakers channel: labels and a nominal position."""

    block_id: str
    rtime: Fraction | None
    duration: Fraction | None
    labels: tuple[str, ...]
    cartesian: bool
    position: tuple[float, float, float]


@dataclass(frozen=True)
class HoaBlock:
    """One audioBlockFormat of an HOA channel: the spherical harmonic it carries."""

    block_id: str
    order: int
    degree: int
    normalization: str | None
    nfc_ref_dist: float | None
    equation: str | None


@dataclass(frozen=True)
class ChannelFormat:
    """An audioChannelFormat, from the file or from the common definitions."""

    channel_id: str
    name: str
    type_definition: str
    blocks: tuple[ObjectBlock, ...] | tuple[SpeakerBlock, ...] | tuple[HoaBlock, ...] | tuple[()]
    low_pass_hz: float | None = None
    common: bool = False


@dataclass(frozen=True)
class PackFormat:
    """An audioPackFormat: its channel formats and nested packs, by ID."""

    pack_id: str
    name: str
    type_definition: str
    channel_ids: tuple[str, ...]
    pack_ids: tuple[str, ...]
    normalization: str | None = None
    nfc_ref_dist: float | None = None
    common: bool = False


@dataclass(frozen=True)
class ObjectChannel:
    """One track of an Objects pack: a sound source whose position changes over time.

    Attributes
    ----------
    object_id, object_name
        The audioObject that plays it (the innermost, for nested objects).
    object_path
        The audioObject IDs from the content's object down to ``object_id``.
    channel
        Its audioChannelFormat, with the blocks (:class:`ObjectBlock`).
    track
        The file channel (0-based).
    uid
        The audioTrackUID.
    gain
        Linear, the product of the gains of ``object_path``'s objects.
    mute
        True if any object on the path is muted.
    start, end
        When the object plays, in seconds from the start of the file (``end`` None: to the
        end of the file); nested objects play within their parents' spans.
    """

    object_id: str
    object_name: str
    object_path: tuple[str, ...]
    channel: ChannelFormat
    track: int
    uid: str
    gain: float
    mute: bool
    start: Fraction
    end: Fraction | None

    @property
    def blocks(self) -> tuple[ObjectBlock, ...]:
        """The channel's audioBlockFormats, in time order."""
        return self.channel.blocks  # type: ignore[return-value]

    def to_dict(self) -> dict[str, Any]:
        """A JSON-ready summary (blocks counted, not listed)."""
        return {
            "object_id": self.object_id,
            "object_name": self.object_name,
            "object_path": list(self.object_path),
            "channel_id": self.channel.channel_id,
            "channel_name": self.channel.name,
            "track": self.track,
            "uid": self.uid,
            "gain": self.gain,
            "mute": self.mute,
            "start": float(self.start),
            "end": _seconds(self.end),
            "blocks": len(self.channel.blocks),
            "cartesian": bool(self.blocks and self.blocks[0].cartesian),
        }


@dataclass(frozen=True)
class BedChannel:
    """One track of a DirectSpeakers pack: a loudspeaker feed.

    ``label`` is the first speaker label (a BS.2051 name such as ``M+030`` where the file
    gives one), ``position`` (azimuth, elevation, distance) or, when ``cartesian``,
    (X, Y, Z); ``lfe`` is set by the label (``LFE``, ``LFE1``, ``LFE2``) or by a
    ``frequency`` low-pass of at most 200 Hz. Other fields as in :class:`ObjectChannel`.
    """

    object_id: str
    object_name: str
    object_path: tuple[str, ...]
    pack_id: str
    channel: ChannelFormat
    track: int
    uid: str
    label: str | None
    cartesian: bool
    position: tuple[float, float, float]
    lfe: bool
    gain: float
    mute: bool
    start: Fraction
    end: Fraction | None

    def to_dict(self) -> dict[str, Any]:
        """A JSON-ready summary."""
        return {
            "object_id": self.object_id,
            "object_name": self.object_name,
            "pack_id": self.pack_id,
            "channel_id": self.channel.channel_id,
            "channel_name": self.channel.name,
            "common": self.channel.common,
            "track": self.track,
            "uid": self.uid,
            "label": self.label,
            "cartesian": self.cartesian,
            "position": list(self.position),
            "lfe": self.lfe,
            "gain": self.gain,
            "mute": self.mute,
            "start": float(self.start),
            "end": _seconds(self.end),
        }


@dataclass(frozen=True)
class HoaPack:
    """An HOA pack played by an object: its tracks in ACN order.

    ``tracks[k]`` is the file channel carrying ACN ``acns[k]`` (ACN = n^2 + n + m for order
    n and degree m); ``normalization`` is ``SN3D`` (the BS.2076 default), ``N3D`` or ``FuMa``.
    """

    object_id: str
    object_name: str
    object_path: tuple[str, ...]
    pack_id: str
    order: int
    normalization: str
    tracks: tuple[int, ...]
    acns: tuple[int, ...]
    nfc_ref_dist: float | None
    gain: float
    mute: bool
    start: Fraction
    end: Fraction | None

    def to_dict(self) -> dict[str, Any]:
        """A JSON-ready summary."""
        return {
            "object_id": self.object_id,
            "object_name": self.object_name,
            "pack_id": self.pack_id,
            "order": self.order,
            "normalization": self.normalization,
            "tracks": list(self.tracks),
            "acns": list(self.acns),
            "nfc_ref_dist": self.nfc_ref_dist,
            "gain": self.gain,
            "mute": self.mute,
            "start": float(self.start),
            "end": _seconds(self.end),
        }


@dataclass(frozen=True)
class AdmMaster:
    """One audioProgramme of an ADM broadcast WAV, resolved down to the file's tracks.

    Attributes
    ----------
    path, container
        The file and its header kind (``RIFF``, ``RF64`` or ``BW64``).
    sample_rate, channels, frames
        From the header.
    programme_id, programme_name
        The programme chosen (None when the file has no audioProgramme and every
        audioContent, or every top-level audioObject, is played instead; see ``notes``).
    programmes
        Every programme in the file, as (ID, name, audioContent IDs).
    contents
        The chosen programme's audioContents, as (ID, name, top-level object IDs).
    objects, beds, hoa
        What the programme plays, by kind.
    packs
        Every pack format the played objects use (the file's and the common ones), by ID.
    ignored
        What is not rendered, each with its reason (Matrix and Binaural types, unsupported
        features such as screen-related or divergence parameters).
    notes
        How the reader read something the standard leaves open (e.g. no programme).
    """

    path: str
    container: str
    sample_rate: int
    channels: int
    frames: int
    programme_id: str | None
    programme_name: str | None
    programmes: tuple[tuple[str, str, tuple[str, ...]], ...]
    contents: tuple[tuple[str, str, tuple[str, ...]], ...]
    objects: tuple[ObjectChannel, ...]
    beds: tuple[BedChannel, ...]
    hoa: tuple[HoaPack, ...]
    packs: dict[str, PackFormat]
    ignored: tuple[str, ...]
    notes: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        """A JSON-ready summary of the master (blocks counted, not listed)."""
        return {
            "path": self.path,
            "container": self.container,
            "sample_rate": self.sample_rate,
            "channels": self.channels,
            "frames": self.frames,
            "programme": {"id": self.programme_id, "name": self.programme_name},
            "programmes": [
                {"id": i, "name": n, "contents": list(c)} for i, n, c in self.programmes
            ],
            "contents": [
                {"id": i, "name": n, "objects": list(objs)} for i, n, objs in self.contents
            ],
            "objects": [o.to_dict() for o in self.objects],
            "beds": [b.to_dict() for b in self.beds],
            "hoa": [h.to_dict() for h in self.hoa],
            "packs": {
                k: {
                    "name": p.name,
                    "type": p.type_definition,
                    "channels": list(p.channel_ids),
                    "packs": list(p.pack_ids),
                    "common": p.common,
                }
                for k, p in self.packs.items()
            },
            "ignored": list(self.ignored),
            "notes": list(self.notes),
        }
