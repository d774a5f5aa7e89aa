"""What an ADM object master feeds the ears: beds, HOA packs and moving objects.

An ADM master (:mod:`earfold.renderer.objects`) places each file track by its metadata:

* a **bed** track (DirectSpeakers) is a loudspeaker at its position, rendered through the
  HRTF set exactly as a channel render renders that loudspeaker (its LFE by label: the
  LFE path, no HRIR);
* the tracks of an **HOA** pack are Ambisonic channels of its order and normalisation,
  decoded by the scene decoder (:func:`earfold.renderer.scenes.scene_decoder`);
* an **object** track moves: its direction and gain are sampled from the metadata every
  :data:`UPDATE_SECONDS` (BS.2076 interpolation, :func:`~earfold.renderer.objects.object_positions`)
  into a :class:`~earfold.renderer.engine.SourcePath` that the moving-source engine follows
  (filters updated every hop of at most 10 ms, outputs crossfaded).

One calibration gain serves the whole master: the gain of its bed's loudspeakers as a
channel render would calibrate them, or without a bed that of ITU-R BS.2051's 0+5+0
(earfold's ``5.0``), so that an object resting at a loudspeaker's position renders as that
loudspeaker does in a channel render of the same layout (a check of the tests).

Coordinates: ADM polar positions are azimuth (positive to the left) and elevation in
degrees, as ours; ADM cartesian positions (ITU-R BS.2076: X to the right, Y to the front,
Z up) become our vector (x front, y left, z up) = (Y, -X, Z). Distance is not rendered (a
direction only): the report says so when an object's distance changes.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..engine import PathLike
from ..geometry import vector_to_direction
from ..layouts import Layout, Speaker
from ..objects import (
    AdmMaster,
    BlockTable,
    ObjectChannel,
    direction_vectors,
    object_positions,
    object_spread,
)

__all__ = [
    "UPDATE_SECONDS",
    "AdmTracks",
    "MetadataPath",
    "ObjectGains",
    "ObjectMix",
    "PathSummary",
    "TrackSpan",
    "adm_layout",
    "object_path",
    "position_vectors",
]

#: Interval of the samples of an object's metadata handed to the moving engine (s).
UPDATE_SECONDS = 0.010


@dataclass(frozen=True)
class TrackSpan:
    """The frames a bed or HOA track plays: ``start <= frame < end`` (``end`` -1: to the
    end of the file); outside them the track is silent (its object's BS.2076 span)."""

    track: int
    start: int
    end: int

    @classmethod
    def of(cls, track: int, start: Any, end: Any, samplerate: float, first: int = 0) -> TrackSpan:
        """From an object's start and end in seconds (``end`` None: to the end), in frames
        counted from the file's frame ``first`` (an excerpt's start)."""
        begin = int(round(float(start) * samplerate)) - first
        return cls(
            track, begin, -1 if end is None else max(0, int(round(float(end) * samplerate)) - first)
        )

    def to_dict(self) -> dict[str, Any]:
        """The report's entry (the track numbered from 1, times in frames)."""
        return {"track": self.track + 1, "start_frame": self.start, "end_frame": self.end}


@dataclass(frozen=True, eq=False)
class ObjectMix:
    """Objects mixed into some of the bus's channels with gains that follow their paths
    (a :class:`~earfold.renderer.engine.PanningMixer` with :class:`ObjectGains`).

    Attributes
    ----------
    channels : tuple of int
        The objects' file channels (0-based), in the order of ``paths``.
    paths : tuple of SourcePath
        Their paths, with their spreads (width, height, depth, diffuse).
    first : int
        The bus column of the mix's first channel.
    array : ndarray, shape (M, 3) or None
        The VBAP array the objects are panned onto (scaled by their direct share
        ``sqrt(1 - d)``); None: none, the diffuse channel only.
    diffuse : bool
        Whether one more channel follows: the objects' diffuse share ``sqrt(d)``.
    tail : bool
        Whether one more channel follows that: the room's tail fed by each object at its
        whole level (gain 1), as a loudspeaker feeds it, however the object is panned.
    """

    channels: tuple[int, ...]
    paths: tuple[PathLike, ...]
    first: int
    array: NDArray[np.float64] | None
    diffuse: bool
    tail: bool = False

    @property
    def width(self) -> int:
        """Bus channels the mix writes: the array's directions, diffuse and tail channels."""
        return (0 if self.array is None else len(self.array)) + int(self.diffuse) + int(self.tail)

    def gains(self) -> ObjectGains:
        """The gain function of the mix's mixer."""
        from ..layouts import SpreadPanner, VbapPanner

        panner = None if self.array is None else SpreadPanner(VbapPanner(self.array))
        return ObjectGains(panner, self.diffuse, self.tail)


class ObjectGains:
    """Gains of objects with spreads (the :class:`~earfold.renderer.engine.SpreadGains`
    protocol): the spread panner's unit-power gains times the direct share
    ``sqrt(1 - d)``, then, with ``diffuse``, the diffuse share ``sqrt(d)``, then, with
    ``tail``, 1 (the room's tail channel).

    Why a tail channel of its own: the room's shared tail is one filter fed by a weighted
    sum of channels, so an object panned with gains ``g`` onto rows that each fed the tail
    would feed it ``sum(g)`` (up to about 1.7 for three VBAP gains of unit power), louder
    than a loudspeaker; through its own channel it feeds it as one loudspeaker does.
    """

    def __init__(self, panner: Any, diffuse: bool, tail: bool = False) -> None:
        if panner is None and not diffuse and not tail:
            raise ValueError("object gains need an array, a diffuse or a tail channel")
        self.panner = panner
        self.diffuse = bool(diffuse)
        self.tail = bool(tail)

    def spread_gains(self, vectors: NDArray[np.float64], spread: NDArray[np.float64]) -> Any:
        """Gains ``(n, width)`` of unit vectors ``(n, 3)`` with spreads ``(n, 4)``."""
        from ..layouts import diffuse_split

        direct, diffuse = diffuse_split(spread[:, 3])
        parts = []
        if self.panner is not None:
            g = self.panner.gains(vectors, spread[:, 0], spread[:, 1])
            parts.append(g * direct[:, None])
        if self.diffuse:
            parts.append(diffuse[:, None])
        if self.tail:
            parts.append(np.ones((len(vectors), 1)))
        return np.column_stack(parts)


@dataclass(frozen=True, eq=False)
class AdmTracks:
    """The time-varying part of an ADM plan: objects and their paths, and track spans.

    Attributes
    ----------
    channels : tuple of int
        File channels (0-based) of the objects followed with their own HRIR pairs (the
        moving-source engine), in the order of ``paths``.
    paths : tuple of SourcePath
        Each of those objects' directions and gains over the stream's frames (the gains
        of their direct shares).
    gain : float
        The plan's calibration gain, applied to the moving engine's output.
    length : int
        Length of the objects' whole response: the moving engine's (its pairs and the
        set's EQ, after ``moving_delay``) or the bus's filters, the longer.
    moving_delay : int
        Frames the moving engine's output is delayed by (in a room: to the room's direct
        arrival, where the beds' direct sound is).
    mixes : tuple of ObjectMix
        The mixers that feed the bus from object tracks.
    bus_filters : ndarray, shape (B, 2, L) or None
        The calibrated filters of the bus's channels (spread array through the HRIRs,
        the room's reflection array, the diffuse channel), joined to the fixed bank.
    bus_tail_weights : ndarray, shape (B,) or None
        Their shares of the plan's shared tail.
    spans : tuple of TrackSpan
        Bed and HOA tracks that play only part of the time.
    """

    channels: tuple[int, ...]
    paths: tuple[PathLike, ...]
    gain: float
    length: int = 1
    moving_delay: int = 0
    mixes: tuple[ObjectMix, ...] = ()
    bus_filters: NDArray[np.float64] | None = None
    bus_tail_weights: NDArray[np.float64] | None = None
    spans: tuple[TrackSpan, ...] = ()


def position_vectors(positions: NDArray[np.float64], cartesian: bool) -> NDArray[np.float64]:
    """Unit direction vectors (x front, y left, z up) of ADM positions ``(n, 3)``: the
    objects wing's :func:`~earfold.renderer.objects.direction_vectors` (polar azimuth
    positive to the left; cartesian X right, Y front, Z up becomes (Y, -X, Z))."""
    return np.asarray(direction_vectors(positions, cartesian), dtype=np.float64)


#: Metadata samples summarised at a time for the report (10 minutes at 10 ms): a plan's
#: memory does not grow with the master's length.
SUMMARY_SAMPLES = 60_000


class MetadataPath:
    """An ADM object's path read from its metadata when an engine asks for it.

    Duck-types :class:`~earfold.renderer.engine.SourcePath` (the
    :class:`~earfold.renderer.engine.PathLike` protocol): the engines ask for the
    directions, gains and spreads of the updates ahead (a few seconds at a time), which
    are then worked out with BS.2076's interpolation (:func:`object_positions`) from the
    blocks, so no table of the whole path is ever held, however long the master.

    Parameters
    ----------
    channel : ObjectChannel
        The object's track.
    samplerate : float
        The stream's rate.
    first : int, optional
        The file's frame at the stream's frame 0 (an excerpt's start).
    direct_share : bool, optional
        Scale the gains by the direct share ``sqrt(1 - diffuse)`` (an object whose
        diffuse share goes elsewhere).
    """

    def __init__(
        self,
        channel: ObjectChannel,
        samplerate: float,
        first: int = 0,
        *,
        direct_share: bool = False,
        table: BlockTable | None = None,
    ) -> None:
        self.channel = channel
        self.table = BlockTable.of(channel) if table is None else table  # made once
        self.samplerate = float(samplerate)
        self.first = int(first)
        self.direct_share = bool(direct_share)
        self._frames: NDArray[Any] | None = None
        self._value: tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]] = (
            np.zeros((0, 3)),
            np.zeros(0),
            np.zeros((0, 4)),
        )

    def with_direct_share(self) -> MetadataPath:
        """The same path with its gains scaled to the direct share."""
        return MetadataPath(
            self.channel, self.samplerate, self.first, direct_share=True, table=self.table
        )

    def sample(
        self, frames: NDArray[Any]
    ) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
        """Unit vectors ``(n, 3)``, gains ``(n,)`` and spreads ``(n, 4)`` at ``frames``."""
        t = np.asarray(frames, dtype=np.float64).reshape(-1)
        if self._frames is not None and np.array_equal(t, self._frames):
            return self._value  # the panning mixer asks for gains, then spreads
        _, vectors, gains, spread = _sampled(self.table, (self.first + t) / self.samplerate)
        if self.direct_share:
            gains = gains * np.sqrt(1.0 - spread[:, 3])
        self._frames, self._value = t.copy(), (vectors, gains, spread)
        return self._value

    def at(self, frames: NDArray[Any]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """Unit vectors ``(n, 3)`` and gains ``(n,)`` at the given frames."""
        vectors, gains, _ = self.sample(frames)
        return vectors, gains

    def at_spread(self, frames: NDArray[Any]) -> NDArray[np.float64]:
        """Spreads ``(n, 4)``: width and height (degrees), depth, diffuse."""
        return self.sample(frames)[2]


def _sampled(
    table: BlockTable, seconds: NDArray[np.float64]
) -> tuple[Any, NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """An object's metadata at ``seconds`` (:func:`object_positions` from its block table),
    and from it unit vectors, gains (zero where the object is not active) and spreads."""
    path = table.at(seconds, short_way=True)
    vectors = position_vectors(path.positions, path.cartesian)
    gains = np.where(path.active, np.maximum(path.gain, 0.0), 0.0)
    return path, vectors, gains, object_spread(path)


@dataclass(frozen=True)
class PathSummary:
    """What the plan needs to know of a whole path, read in bounded pieces."""

    extent: bool
    diffuse: bool
    entry: dict[str, Any]


def object_path(
    channel: ObjectChannel, frames: int, samplerate: float, first: int = 0
) -> tuple[MetadataPath, PathSummary]:
    """An object track's path over ``frames`` frames from the file's frame ``first`` (an
    excerpt's start; the path's frames count from it), and its summary and report entry.

    The summary samples the metadata every :data:`UPDATE_SECONDS` (the engines' update
    interval) in pieces of :data:`SUMMARY_SAMPLES`; ``breakpoints`` counts the samples a
    table of the path would keep (those that differ from a neighbour, and the ends), so a
    static object has two whatever the length.
    """
    step = max(1, int(round(UPDATE_SECONDS * samplerate)))
    total = frames // step + 2  # samples 0, step, ... up to one past the last frame
    table = BlockTable.of(channel)
    extent = diffuse = False
    kept = 0
    moves: list[int] = []
    depth = False
    widest = [0.0, 0.0]
    most_diffuse = 0.0
    first_vector = last_vector = None
    previous: tuple[Any, ...] | None = None  # the last sample of the piece before
    same_before = False  # whether that sample equalled the one before it
    distance_range: list[float] = []
    for start in range(0, total, SUMMARY_SAMPLES):
        points = np.arange(start, min(total, start + SUMMARY_SAMPLES), dtype=np.int64) * step
        raw, vectors, gains, spread = _sampled(table, (first + points) / float(samplerate))
        if first_vector is None:
            first_vector = vectors[0]
        last_vector = vectors[-1]
        extent = extent or bool(np.any(spread[:, :2] > 0))
        diffuse = diffuse or bool(np.any(spread[:, 3] > 0))
        widest = [
            max(widest[0], float(spread[:, 0].max())),
            max(widest[1], float(spread[:, 1].max())),
        ]
        most_diffuse = max(most_diffuse, float(spread[:, 3].max()))
        if not raw.cartesian:
            depth = depth or bool(np.any(np.asarray(raw.depth) > 0))
            distance_range.extend(
                [float(raw.positions[:, 2].min()), float(raw.positions[:, 2].max())]
            )
        if previous is not None:
            vectors = np.concatenate([previous[0][None], vectors])
            gains = np.concatenate([[previous[1]], gains])
            spread = np.concatenate([previous[2][None], spread])
            points = np.concatenate([[previous[3]], points])
        same = (
            np.all(np.isclose(vectors[1:], vectors[:-1], atol=1e-12), axis=1)
            & np.isclose(gains[1:], gains[:-1], atol=1e-15)
            & np.all(spread[1:] == spread[:-1], axis=1)
        )
        # A sample is kept when it differs from its neighbour on either side, the ends
        # always. Each piece counts its samples but its last (whose right neighbour comes
        # with the next piece), and the last piece's last is an end.
        head = (
            np.array([True])
            if previous is None
            else np.array([not (same_before and bool(same[0]))])
        )
        kept += int(head.sum()) + int(np.sum(~(same[:-1] & same[1:])))
        moving = np.flatnonzero(~np.all(np.isclose(vectors[1:], vectors[:-1], atol=1e-9), axis=1))
        if moving.size:
            if not moves:
                moves.append(int(points[moving[0]]))
            moves[1:] = [int(points[moving[-1] + 1])]
        same_before = bool(same[-1]) if len(same) else same_before
        previous = (vectors[-1], gains[-1], spread[-1], points[-1])
    kept += 1  # the last sample: an end is always kept
    assert first_vector is not None and last_vector is not None
    entry: dict[str, Any] = {
        "object": channel.object_name,
        "object_id": channel.object_id,
        "track": channel.track + 1,
        "start_s": float(channel.start),
        "end_s": None if channel.end is None else float(channel.end),
        "muted": bool(channel.mute),
        "breakpoints": kept,
    }
    for key, vector in (("first_direction_deg", first_vector), ("last_direction_deg", last_vector)):
        az, el = vector_to_direction(vector)
        entry[key] = [round(float(az), 2), round(float(el), 2)]
    entry["moves_s"] = (
        None
        if not moves
        else [round(float((first + m) / samplerate), 3) for m in (moves[0], moves[-1])]
    )
    entry["largest_extent_deg"] = [round(widest[0], 2), round(widest[1], 2)]
    entry["largest_diffuse"] = round(most_diffuse, 4)
    entry["not_rendered"] = []
    if depth:
        entry["not_rendered"].append("depth")
    if distance_range and max(distance_range) - min(distance_range) > 1e-9:
        entry["not_rendered"].append("distance")
    return MetadataPath(channel, samplerate, first, table=table), PathSummary(
        extent, diffuse, entry
    )


def adm_layout(master: AdmMaster) -> Layout:
    """A layout with one entry per file track, for the plan's bookkeeping (labels, the
    meter's channel weights, the report): beds at their positions (LFE flagged), objects
    at their first position, HOA and unused tracks at the front. Labels are unique:
    ``"<track>:<name>"``."""
    speakers: list[Speaker] = []
    by_track: dict[int, Speaker] = {}
    for bed in master.beds:
        az, el = _polar(bed.position, bed.cartesian)
        by_track[bed.track] = Speaker(
            f"{bed.track + 1}:{bed.label or bed.object_name}", az, el, lfe=bed.lfe
        )
    for obj in master.objects:
        first = object_positions(obj, np.array([float(obj.start)]), short_way=True)
        obj_az, obj_el = vector_to_direction(position_vectors(first.positions, first.cartesian)[0])
        by_track[obj.track] = Speaker(
            f"{obj.track + 1}:{obj.object_name}", float(obj_az), float(obj_el)
        )
    for pack in master.hoa:
        for track, acn in zip(pack.tracks, pack.acns):
            by_track[track] = Speaker(f"{track + 1}:ACN{acn}", 0.0, 0.0)
    for track in range(master.channels):
        speakers.append(by_track.get(track, Speaker(f"{track + 1}:unused", 0.0, 0.0)))
    return Layout(
        "ADM",
        tuple(speakers),
        f"ADM master: {len(master.beds)} bed, {len(master.objects)} object and "
        f"{sum(len(p.tracks) for p in master.hoa)} HOA track(s)",
        "ITU-R BS.2076 metadata of the file",
    )


def _polar(position: tuple[float, float, float], cartesian: bool) -> tuple[float, float]:
    if not cartesian:
        return float(position[0]), float(position[1])
    az, el = vector_to_direction(position_vectors(np.array([position]), True)[0])
    return float(az), float(el)
