"""Summaries of an ADM master for a command or a page: what ``earfold adm inspect FILE``
prints (:func:`inspect_adm`), what an upload says of a master (:func:`probe_adm`) and each
object's path over time, sampled coarsely for drawing (:func:`object_paths`)."""

from __future__ import annotations

import os
from typing import Any

import numpy as np

from ..errors import AdmError, RendererError
from ..geometry import vector_to_direction
from ._chunks import WavChunks, read_wav_chunks
from ._model import AdmMaster, ObjectChannel
from ._positions import direction_vectors, object_positions
from ._read import read_adm

__all__ = [
    "MAX_LISTED",
    "adm_overview",
    "PATH_POINTS",
    "inspect_adm",
    "is_adm_chunks",
    "motion_summary",
    "object_paths",
    "probe_adm",
]

#: Samples of each object's path in :func:`object_paths` by default. A page draws the
#: path on a picture a few hundred pixels wide: 200 points over the object's span are
#: finer than its pixels for a path that crosses it once (our choice), and keep the
#: answer small (some 5 kB of JSON per object).
PATH_POINTS = 200

#: Most items of each list in :func:`probe_adm`'s summary (programmes, ignored parts,
#: notes); the counts are always whole. A stem's description stays small whatever the
#: file holds.
MAX_LISTED = 50


def motion_summary(channel: ObjectChannel) -> dict[str, Any]:
    """Blocks, the span of motion and the range of each coordinate of an object channel.

    The span of motion runs from the start of the first block whose position differs from
    the previous block's to the end of the last such block's interpolation (BS.2076-2:
    the whole block, or ``interpolationLength`` after a jump); None for a static object.
    """
    blocks = channel.blocks
    origin = channel.start
    moving: list[tuple[float, float]] = []
    for prev, block in zip(blocks, blocks[1:]):
        if block.position != prev.position and block.rtime is not None:
            begin = origin + block.rtime
            length = block.interpolation_length or 0 if block.jump_position else block.duration or 0
            moving.append((float(begin), float(begin + length)))
    cartesian = bool(blocks and blocks[0].cartesian)
    names = ("X", "Y", "Z") if cartesian else ("azimuth", "elevation", "distance")
    ranges = {
        name: [min(b.position[i] for b in blocks), max(b.position[i] for b in blocks)]
        for i, name in enumerate(names)
    }
    return {
        "blocks": len(blocks),
        "cartesian": cartesian,
        "motion": None if not moving else [moving[0][0], max(e for _, e in moving)],
        "jumps": sum(1 for b in blocks[1:] if b.jump_position),
        "ranges": ranges,
        "gain_range": [min(b.gain for b in blocks), max(b.gain for b in blocks)],
        "spread": max(max(b.width, b.height, b.depth) for b in blocks) > 0,
        "diffuse": max(b.diffuse for b in blocks) > 0,
    }


def inspect_adm(
    path: str | os.PathLike[str],
    *,
    programme: str | None = None,
    path_points: int | None = None,
) -> dict[str, Any]:
    """A JSON-ready summary of an ADM master's chosen programme.

    Lists the file's programmes, the chosen programme's contents, its objects (each with
    its number of blocks, span of motion and position ranges: :func:`motion_summary`), beds,
    HOA packs, the packs used, and what is ignored and why. With ``path_points``, also
    ``"paths"``: each object's direction and gain over time (:func:`object_paths`, at most
    that many samples each).

    Raises
    ------
    AdmError
        As :func:`~earfold.renderer.objects.read_adm`; for ``path_points`` out of range.
    """
    master = read_adm(path, programme=programme)
    summary = master.to_dict()
    for entry, channel in zip(summary["objects"], master.objects):
        entry.update(motion_summary(channel))
    summary["duration"] = master.frames / master.sample_rate
    if path_points is not None:
        summary["paths"] = object_paths(master, points=path_points)
    return summary


def is_adm_chunks(chna: bytes | None, axml: bytes | None) -> bool:
    """Whether a WAV's chunks make it an ADM master: a ``chna`` chunk and an ``axml``
    chunk holding BS.2076 metadata (``audioFormatExtended``); ``axml`` of other kinds
    (e.g. other XML metadata) leaves the file plain channels."""
    return chna is not None and axml is not None and b"audioFormatExtended" in axml


def _listed(items: list[Any]) -> list[Any]:
    return items[:MAX_LISTED]


def probe_adm(
    path: str | os.PathLike[str], *, programme: str | None = None
) -> dict[str, Any] | None:
    """A short summary of the ADM master ``path`` is, or None if it is not one.

    What an upload tells of a master: its programmes, the one rendered by default (or
    ``programme``), what that programme plays (counts of objects, bed loudspeakers and
    HOA tracks), the duration and what is not rendered. Reads the header and the metadata,
    never the audio; the reader's limits (:mod:`._limits`) bound its time and memory, and
    lists are cut at :data:`MAX_LISTED` items.

    Returns
    -------
    dict or None
        ``{"container", "tracks", "duration_s", "programme": {"id", "name"},
        "programmes": [{"id", "name"}], "programmes_total", "objects", "beds",
        "bed_labels", "hoa_tracks", "hoa_orders", "moving_objects", "ignored", "notes"}``;
        None for a file that is not a WAV we read or lacks ``chna`` or BS.2076 ``axml``
        (it is plain channels).

    Raises
    ------
    AdmError
        If the file is an ADM master whose metadata is broken or past a limit
        (:func:`~earfold.renderer.objects.read_adm`), or names no ``programme``; the
        message names the file.
    """
    try:
        chunks = read_wav_chunks(path)
    except (RendererError, OSError):
        return None  # not a chunk structure we read: plain audio, as the renderer sees it
    if not is_adm_chunks(chunks.chna, chunks.axml):
        return None
    return _short_summary(_read_named(path, programme, chunks))


def _read_named(
    path: str | os.PathLike[str], programme: str | None, chunks: WavChunks | None = None
) -> AdmMaster:
    """:func:`read_adm`, its errors naming the file (the reader's messages about the XML
    name the element, not the file)."""
    try:
        return read_adm(path, programme=programme, chunks=chunks)
    except AdmError as exc:
        name = os.path.basename(os.fspath(path))
        if name in str(exc):
            raise
        raise AdmError(f"ADM master {name!r}: {exc}") from None


def _short_summary(master: AdmMaster) -> dict[str, Any]:
    """:func:`probe_adm`'s summary of a master read."""
    return {
        "container": master.container,
        "tracks": master.channels,
        "duration_s": round(master.frames / master.sample_rate, 6),
        "programme": {"id": master.programme_id, "name": master.programme_name},
        "programmes": _listed([{"id": i, "name": n} for i, n, _ in master.programmes]),
        "programmes_total": len(master.programmes),
        "objects": len(master.objects),
        "moving_objects": sum(1 for o in master.objects if motion_summary(o)["motion"] is not None),
        "beds": len(master.beds),
        "bed_labels": _listed([b.label for b in master.beds]),
        "hoa_tracks": sum(len(h.tracks) for h in master.hoa),
        "hoa_orders": sorted({h.order for h in master.hoa}),
        "ignored": _listed(list(master.ignored)),
        "ignored_total": len(master.ignored),
        "notes": _listed(list(master.notes)),
    }


def adm_overview(
    path: str | os.PathLike[str], *, programme: str | None = None, points: int = PATH_POINTS
) -> dict[str, Any]:
    """What a page draws of an ADM master: :func:`probe_adm`'s summary of ``programme``
    (default the first) with each object's path (:func:`object_paths`, ``"paths"``) and
    each bed loudspeaker's direction (``"bed_directions"``: ``{"label", "track",
    "azimuth_deg", "elevation_deg", "lfe"}``, track 1-based).

    Raises
    ------
    AdmError
        If ``path`` is not an ADM master or cannot be read, as :func:`probe_adm`, or
        ``points`` is out of range (:func:`object_paths`).
    """
    master = _read_named(path, programme)
    beds = []
    for bed in master.beds:
        (vector,) = direction_vectors(np.array([bed.position]), bed.cartesian)
        az, el = vector_to_direction(vector)
        beds.append(
            {
                "label": bed.label,
                "track": bed.track + 1,
                "azimuth_deg": round(float(az), 2) + 0.0,
                "elevation_deg": round(float(el), 2) + 0.0,
                "lfe": bed.lfe,
            }
        )
    return {
        **_short_summary(master),
        "paths": object_paths(master, points=points),
        "bed_directions": beds,
    }


def _changes(values: np.ndarray) -> np.ndarray:
    """Which rows of ``values`` (n, k) to keep so that runs of equal rows keep only their
    ends: a row is kept when it differs from the row before or the row after."""
    keep = np.ones(len(values), dtype=bool)
    if len(values) > 2:
        same = np.all(np.isclose(values[1:], values[:-1], rtol=0.0, atol=1e-9), axis=1)
        keep[1:-1] = ~(same[:-1] & same[1:])
    return keep


def object_paths(master: AdmMaster, *, points: int = PATH_POINTS) -> list[dict[str, Any]]:
    """Each object's direction and gain over its time span, sampled for drawing.

    Every object channel of the master is sampled at ``points`` evenly spaced times from
    its start to its end (the end of the file when the object has none; the last sample
    one audio frame before the end, where the object still plays), with the BS.2076-2
    interpolation of :func:`object_positions`. Runs of samples that neither move nor
    change gain keep only their ends, so a resting object has two points. A coarse
    picture: a jump between two samples is drawn as a move between them.

    Parameters
    ----------
    master
        From :func:`~earfold.renderer.objects.read_adm`.
    points
        Samples per object, 2 to 10,000.

    Returns
    -------
    list of dict
        Per object channel, in the master's order: ``{"object", "object_id", "track"
        (1-based, as ``chna`` counts), "start_s", "end_s", "muted", "cartesian",
        "blocks", "times_s", "azimuth_deg", "elevation_deg", "gain"}``; azimuth positive
        to the left and elevation up in degrees (ADM cartesian positions turned into
        directions, :func:`direction_vectors`), gain linear (0 where the object is muted).

    Raises
    ------
    AdmError
        If ``points`` is out of range.

    Examples
    --------
    An object that rests has two points, whatever ``points`` is:

    >>> from fractions import Fraction as F
    >>> from earfold.renderer.objects import ChannelFormat, ObjectBlock, ObjectChannel
    >>> from earfold.renderer.objects import AdmMaster
    >>> block = ObjectBlock("AB_00031001_00000001", None, None, False, (30.0, 0.0, 1.0),
    ...                     False, None, 1.0, 0.0, 0.0, 0.0, 0.0)
    >>> ch = ChannelFormat("AC_00031001", "a", "Objects", (block,))
    >>> obj = ObjectChannel("AO_1001", "Voice", ("AO_1001",), ch, 0, "ATU_00000001", 1.0,
    ...                     False, F(0), None)
    >>> master = AdmMaster("m.wav", "RIFF", 48000, 1, 48000, None, None, (), (), (obj,),
    ...                    (), (), {}, (), ())
    >>> path = object_paths(master)[0]
    >>> path["times_s"], path["azimuth_deg"]
    ([0.0, 0.99998], [30.0, 30.0])
    """
    if not 2 <= points <= 10_000:
        raise AdmError(f"object_paths: points must be 2 to 10000, got {points!r}")
    duration = master.frames / master.sample_rate
    frame = 1.0 / master.sample_rate
    out = []
    for obj in master.objects:
        start = min(float(obj.start), duration)
        end = duration if obj.end is None else min(float(obj.end), duration)
        last = max(start, end - frame)
        times = np.linspace(start, last, points)
        path = object_positions(obj, times, short_way=True)
        az, el = vector_to_direction(direction_vectors(path.positions, path.cartesian))
        gain = np.where(path.active, path.gain, 0.0)
        keep = _changes(np.stack([az, el, gain], axis=1))
        out.append(
            {
                "object": obj.object_name,
                "object_id": obj.object_id,
                "track": obj.track + 1,
                "start_s": float(obj.start),
                "end_s": None if obj.end is None else float(obj.end),
                "muted": bool(obj.mute),
                "cartesian": path.cartesian,
                "blocks": len(obj.blocks),
                "times_s": [round(float(t), 5) for t in times[keep]],
                "azimuth_deg": [round(float(a), 2) + 0.0 for a in az[keep]],
                "elevation_deg": [round(float(e), 2) + 0.0 for e in el[keep]],
                "gain": [round(float(g), 5) for g in gain[keep]],
            }
        )
    return out
