"""The plan of an ADM object master: beds, HOA packs and objects, free field or in a room.

What each kind of track feeds is described in :mod:`.adm_feeds`. This module builds the
filters:

* **Free field.** Bed tracks get their loudspeaker's HRIR pair (as a channel render
  does), HOA tracks the scene decoder's filters, and objects are followed along their
  paths by the moving-source engine with per-object HRIR pairs.
* **In a room.** One room build holds every row the master needs: the bed loudspeakers
  (at the room's loudspeaker radius, as a channel render places them), a virtual
  loudspeaker array for the objects' reflections (the antipodal spherical design of
  :data:`ROOM_ARRAY_ORDER`, :func:`~earfold.renderer.scenes.virtual_layout`, each direction
  at the beds' radius where the room leaves space) whose rows hold the reflections only
  (:func:`~earfold.renderer.room.build_room_filters` ``without_direct``), and each HOA
  order's virtual loudspeakers (decoded as a scene in a room is). An object's direct sound
  is its own, as free field (delayed to the room's direct arrival); its reflections come
  from panning it by VBAP (V. Pulkki, *J. Audio Eng. Soc.* 45(6), 1997) onto the array.
  All rows share the room's one diffuse tail, and the room's cost is that of its rows: it
  does not grow with the number of objects, only the panning does (a few gains per object
  and update).
* **Extent.** An object with a width or height is spread over the virtual array of
  :data:`ARRAY_ORDER` (50 directions) through the set's HRIRs (multiple-direction VBAP,
  :class:`~earfold.renderer.layouts.SpreadPanner`) instead of one pair, in a room too.
* **Diffuse.** An object's diffuse share goes to one more row: a decorrelating response
  with the set's diffuse-field spectrum and coherence, plus the room's tail in a room.

One calibration gain serves the whole master (:mod:`.adm_feeds`): that of the bed's
loudspeakers, or without a bed of ITU-R BS.2051's 0+5+0, computed on the same rows as the
render uses (with the room's tail when there is one).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..eq import REFERENCE as CALIBRATION_REFERENCE
from ..errors import LayoutError, OptionError, RendererError
from ..geometry import vector_to_direction
from ..io import StemInfo
from ..layouts import Layout, Speaker, get_layout
from ..objects import AdmMaster
from ..room import RoomFilters, exact_brirs, get_room
from .adm_feeds import (
    AdmTracks,
    MetadataPath,
    ObjectMix,
    PathSummary,
    TrackSpan,
    adm_layout,
    object_path,
)
from .bank import RenderPlan, calibrated_gain
from .feed_cache import cached_speaker_feeds
from .feeds import ChannelFeed, speaker_feeds
from .filter_cache import FilterCache, default_filter_cache
from .options import ROOM_MODES, SCENE_OPTIONS, RenderSettings
from .prepared import is_measured_room, keep_lookups, prepared_set, room_part, take_lookups

__all__ = ["ARRAY_ORDER", "ROOM_ARRAY_ORDER", "plan_adm"]

#: Order of the spherical design whose directions make the virtual array objects are
#: panned onto in a room: 50 directions (an antipodal 9-design), about 30 degrees apart,
#: so VBAP's phantom sources span small triangles while the room's rows stay few.
ARRAY_ORDER = 4

#: Order of the spherical design whose directions carry the objects' reflections in a
#: room: 20 directions (an antipodal 5-design). The reflections of a source between them
#: are a VBAP mix of theirs; the rows are long (the room's early part), so they are few.
ROOM_ARRAY_ORDER = 2


@dataclass(frozen=True)
class _Objects:
    """The objects' paths and summaries, and how each is rendered."""

    paths: list[MetadataPath]
    summaries: list[PathSummary]

    @property
    def spread_out(self) -> list[int]:
        """Objects with a width or height: spread over the virtual array."""
        return [k for k, summary in enumerate(self.summaries) if summary.extent]

    @property
    def followed(self) -> list[int]:
        """Points: followed by the moving engine with their own pairs."""
        return [k for k, summary in enumerate(self.summaries) if not summary.extent]

    @property
    def has_diffuse(self) -> bool:
        """Whether any object has a diffuse share."""
        return any(summary.diffuse for summary in self.summaries)


@dataclass(frozen=True)
class _Rows:
    """The rows rendered (beds or the reference, the reflection array, HOA loudspeakers):
    their uncalibrated filters and tail shares, and the room they were built in."""

    speakers: list[Speaker]
    filters: NDArray[np.float64]
    tail: NDArray[np.float64]
    reflections: tuple[int, ...]
    room: RoomFilters | None

    @property
    def arrival(self) -> int:
        """The room's direct arrival at the beds' radius in whole frames (0 free field):
        where an object's own direct sound goes."""
        if self.room is None:
            return 0
        return int(round(float(self.room.report["reference_arrival_samples"])))


def plan_adm(stem: StemInfo, master: AdmMaster, settings: RenderSettings) -> RenderPlan:
    """The plan of an ADM object master (see the module's notes)."""
    name = Path(stem.paths[0]).name
    refused = [
        what
        for what, given in (
            ("channel_order", bool(settings.channel_order)),
            ("solo", settings.solo is not None),
            ("fold stereo", settings.fold == "stereo"),
            ("headphone_eq", settings.headphone_eq is not None),
            *((option, getattr(settings, option) is not None) for option in SCENE_OPTIONS),
        )
        if given
    ]
    if refused:
        raise OptionError(
            f"{', '.join(refused)}: not available for ADM masters in this version ({name!r} "
            "is rendered as its metadata places it); leave "
            f"{'it' if len(refused) == 1 else 'them'} out"
        )
    if settings.room_mode not in ROOM_MODES:
        raise RendererError(
            f"unknown room mode {settings.room_mode!r}; choose one of {', '.join(ROOM_MODES)}"
        )
    if stem.channels != master.channels:
        raise LayoutError(
            f"{name!r}: the audio has {stem.channels} channel(s) but its ADM header says "
            f"{master.channels}"
        )
    warnings: list[str] = []
    notes: list[str] = []
    cache = default_filter_cache()
    hset, eq_report, set_key = prepared_set(
        settings.hrtf, settings.eq, stem.samplerate, warnings, notes, cache
    )
    rate = stem.samplerate
    layout = adm_layout(master)
    room = get_room(settings.room)
    in_room = room is not None and not is_measured_room(hset)

    # The objects' paths, and how each is rendered: followed with its own HRIR pairs (a
    # point), or spread over the virtual array (a width or height); in a room all of them
    # also take their reflections from the reflection array.
    paths: list[MetadataPath] = []
    summaries: list[PathSummary] = []
    entries: list[dict[str, Any]] = []
    for obj in master.objects:
        path, summary = object_path(obj, stem.frames, rate, stem.start)
        entry = summary.entry
        paths.append(path)
        summaries.append(summary)
        entries.append(entry)
        if entry["not_rendered"]:
            warnings.append(
                f"ADM object {obj.object_name!r}: its {', '.join(entry['not_rendered'])} "
                f"{'is' if len(entry['not_rendered']) == 1 else 'are'} not rendered in this "
                "version (a direction only)"
            )
    paths_of = _Objects(paths, summaries)
    spread_out, followed = paths_of.spread_out, paths_of.followed

    # The rows rendered: the calibration reference (the bed's loudspeakers, or 5.0), and in
    # a room the objects' reflection array and each HOA order's virtual loudspeakers.
    if master.beds:
        reference = tuple(layout.speakers[bed.track] for bed in master.beds)
    else:
        reference = get_layout("5.0").speakers
    rows = list(reference)
    virtual_at: dict[int, int] = {}  # first row of each HOA order; -1: the objects' array
    reflections: tuple[int, ...] = ()
    if in_room:
        from ..room import virtual_distance
        from ..scenes import virtual_layout  # here: a free-field render never loads it

        # The reflection array: each direction at the beds' radius where the room leaves
        # space, nearer where a surface is closer (towards the floor; its level is evened
        # out below). Each HOA order's virtual loudspeakers: at one distance, as a scene's.
        groups: list[tuple[str, int, NDArray[np.float64], list[float]]] = []
        if master.objects:
            directions = virtual_layout(ROOM_ARRAY_ORDER)
            reach = [virtual_distance(room, v[None, :]) for v in directions]  # type: ignore[arg-type]
            groups.append(("R", -1, directions, list(reach)))
        for order in sorted({pack.order for pack in master.hoa}):
            directions = virtual_layout(order)
            distance = virtual_distance(room, directions)  # type: ignore[arg-type]
            groups.append((f"H{order}.", order, directions, [distance] * len(directions)))
        for prefix, order, directions, distances in groups:
            virtual_at[order] = len(rows)
            az, el = vector_to_direction(directions)
            rows.extend(
                Speaker(f"{prefix}{i + 1}", round(float(a), 6), round(float(e), 6), d)
                for i, (a, e, d) in enumerate(
                    zip(np.atleast_1d(az), np.atleast_1d(el), distances, strict=True)
                )
            )
        if -1 in virtual_at:
            first = virtual_at[-1]
            reflections = tuple(range(first, first + len(virtual_layout(ROOM_ARRAY_ORDER))))
    rows_layout = Layout(
        "ADM rows",
        tuple(rows),
        "the master's bed loudspeakers (or ITU-R BS.2051 0+5+0 for calibration)"
        + (", the objects' reflection array" if reflections else "")
        + (", the HOA packs' virtual loudspeakers" if in_room and master.hoa else ""),
        "ITU-R BS.2076 metadata of the file",
    )
    room_filters, room_report = room_part(
        hset,
        rows_layout if in_room else None,
        room,
        rate,
        settings,
        set_key,
        cache,
        warnings,
        notes,
        without_direct=reflections,
    )
    take_lookups(hset, set_key, cache)  # objects resting in place look up exact pairs
    exact = room_filters is not None and settings.room_mode == "exact"
    if room_filters is None:
        # Free field: the bed's feeds as a channel render's, kept in the cache.
        row_feeds = cached_speaker_feeds(
            rows_layout,
            range(len(rows)),
            hset,
            rate,
            lfe=settings.lfe,
            set_key=set_key,
            cache=cache,
            warnings=warnings,
        )
    else:
        row_warnings: list[str] = []
        row_feeds = speaker_feeds(
            rows_layout,
            tuple(range(len(rows))),
            hset,
            rate,
            lfe=settings.lfe,
            room_responses=exact_brirs(room_filters) if exact else room_filters.early,
            room_tail_weights=None if exact else np.asarray(room_filters.tail_weights),
            room_arrival_samples=float(room_filters.report["reference_arrival_samples"]),
            warnings=row_warnings,
        )
        # The reflection array's rows have no direct sound: where a set does not cover
        # their directions (below KEMAR's -40 degrees) the room's own note says so.
        quiet = tuple(f"{rows[i].label}: " for i in reflections)
        warnings.extend(w for w in row_warnings if not w.startswith(quiet))
    shared = room_filters is not None and not exact
    tail = None if not shared or room_filters is None else np.asarray(room_filters.tail, float)
    tail_offset = 0 if tail is None or room_filters is None else int(room_filters.tail_offset)
    length = max(f.filters.shape[-1] for f in row_feeds)
    row_filters = np.zeros((len(rows), 2, length))
    for i, feed in enumerate(row_feeds):
        row_filters[i, :, : feed.filters.shape[-1]] = feed.filters
    row_tail = np.array([f.tail_weight if tail is not None else 0.0 for f in row_feeds])
    if exact and room_filters is not None:
        # The reflection rows hold their reflections alone in exact mode too: the objects'
        # tail is a row of its own (below), not one tail per row added up through VBAP.
        for i in reflections:
            row_filters[i] = 0.0
            early = room_filters.early[i]
            row_filters[i, :, : early.shape[-1]] = early
    if room is not None and in_room:
        # The room model plays a nearer loudspeaker louder (1/r against the farthest); a
        # virtual row brought nearer than the beds' radius by a surface is scaled back by
        # d / R, so that every direction of the array plays at the level of a loudspeaker
        # at the beds' radius (an object must not jump in level as it pans).
        radius = float(room.speaker_radius)
        for i in reflections:
            near = rows[i].distance
            if near and near < radius:
                row_filters[i] *= near / radius
                row_tail[i] *= near / radius
    nref = len(reference)
    gain = calibrated_gain(
        row_filters[:nref],
        row_feeds[:nref],
        tail,
        None if tail is None else row_tail[:nref],
        tail_offset,
        rate,
    )

    # The fixed tracks: beds and HOA, with their gains (a muted one silent).
    fixed: dict[int, tuple[ChannelFeed, NDArray[np.float64], float]] = {}
    for i, bed in enumerate(master.beds):
        g = 0.0 if bed.mute else float(bed.gain)
        fixed[bed.track] = (row_feeds[i], g * row_filters[i], g * row_tail[i])
    for pack in master.hoa:
        g = 0.0 if pack.mute else float(pack.gain)
        acn_filters, acn_tail = _hoa_filters(
            pack.order,
            pack.normalization,
            hset,
            rate,
            row_filters,
            row_tail,
            virtual_at,
            notes,
            pack.object_name,
        )
        for track, acn in zip(pack.tracks, pack.acns):
            report = {"channel": track, "label": f"ACN{acn}", "hoa": pack.object_name}
            feed = ChannelFeed(label=f"ACN{acn}", filters=acn_filters[acn], report=report)
            padded = np.zeros((2, max(length, acn_filters.shape[-1])))
            padded[:, : acn_filters.shape[-1]] = acn_filters[acn]
            fixed[track] = (feed, g * padded, g * float(acn_tail[acn]))
    length = max([length, *(f.shape[-1] for _, f, _ in fixed.values())])
    filters = np.zeros((stem.channels, 2, length))
    tail_weights = np.zeros(stem.channels)
    for track, (_, f, w) in fixed.items():
        filters[track, :, : f.shape[-1]] = f
        tail_weights[track] = w
    filters *= gain

    # Beds and HOA packs play only within their objects' time spans (BS.2076-2 start,
    # duration): their tracks are gated to them.
    spans = tuple(
        TrackSpan.of(bed.track, bed.start, bed.end, rate, stem.start)
        for bed in master.beds
        if bed.start or bed.end is not None
    ) + tuple(
        TrackSpan.of(track, pack.start, pack.end, rate, stem.start)
        for pack in master.hoa
        if pack.start or pack.end is not None
        for track in pack.tracks
    )
    warnings.extend(f"ADM: not rendered: {reason}" for reason in master.ignored)
    notes.extend(f"ADM: {note}" for note in master.notes)

    objects = None
    if master.objects or spans:
        objects = _object_tracks(
            master,
            paths_of,
            _Rows(rows, row_filters, row_tail, reflections, room_filters),
            hset,
            settings,
            (set_key, cache, eq_report),
            gain,
            spans,
            notes,
        )
        for k in spread_out:
            entries[k]["rendered"] = "spread over the virtual array"
        for k in followed:
            entries[k]["rendered"] = "own HRIR pairs along its path"
        if reflections:
            for entry in entries:
                entry["rendered"] += "; reflections from the room's virtual array"
    keep_lookups(hset, set_key, cache)  # with what the feeds and the pair grid looked up
    used = set(fixed) | {obj.track for obj in master.objects}
    unused = [t + 1 for t in range(stem.channels) if t not in used]
    if unused:
        notes.append(
            "ADM: track(s) "
            + ", ".join(map(str, unused))
            + " are not in the programme rendered and stay silent"
        )
    feeds = []
    for track in range(stem.channels):
        entry_of = fixed.get(track)
        speaker = layout.speakers[track]
        report = (
            {**entry_of[0].report, "channel": track, "label": speaker.label}
            if entry_of is not None
            else {"channel": track, "label": speaker.label}
        )
        feeds.append(
            ChannelFeed(
                label=speaker.label,
                filters=filters[track],
                lfe=entry_of is not None and entry_of[0].lfe,
                tail_weight=float(tail_weights[track]),
                report=report,
            )
        )
    section: dict[str, Any] = {
        **master.to_dict(),
        "calibration_reference": "ADM bed" if master.beds else "5.0",
        "objects_rendered": entries,
        "objects_method": (
            None
            if not master.objects
            else "followed along their paths with per-object HRIR pairs, updated every 10 ms "
            "or less and crossfaded; objects with a width or height spread over a virtual "
            "array (multiple-direction VBAP)"
            + (
                f"; in the room their reflections come from a virtual array of "
                f"{len(reflections)} directions they are panned onto by VBAP (Pulkki 1997)"
                if reflections
                else ""
            )
        ),
        "time_spans": [span.to_dict() for span in spans],
    }
    if room_report is not None and in_room:
        room_report = {
            **room_report,
            "virtual_array": f"{len(reflections)} directions (antipodal spherical "
            f"{2 * ROOM_ARRAY_ORDER + 1}-design) carrying the objects' reflections"
            if reflections
            else None,
        }
    plan = RenderPlan(
        stem=stem,
        feeds=tuple(feeds),
        hrir_set=hset,
        filters=filters,
        warnings=tuple(warnings),
        layout=layout,
        order=tuple(range(stem.channels)),
        order_source="the ADM master's track map (chna)",
        tail=None if tail is None else gain * tail,
        tail_weights=None if tail is None else tail_weights,
        tail_offset=tail_offset,
        room=room_report,
        eq=eq_report,
        calibration={
            "gain_db": round(float(20 * np.log10(gain)), 3),
            "reference": f"{CALIBRATION_REFERENCE}; the loudspeakers of "
            + ("the master's bed" if master.beds else "ITU-R BS.2051 0+5+0 (5.0)")
            + ", the same gain for objects and HOA",
            "applied": "to every filter and to the objects, before the delivery stage",
        },
        notes=tuple(notes),
        objects=objects,
        adm=section,
    )
    if room_filters is not None:
        plan = _with_decay(plan, row_filters, row_tail, tail, tail_offset, rows, gain)
    return plan


def _hoa_filters(
    order: int,
    normalization: str,
    hset: Any,
    rate: float,
    row_filters: NDArray[np.float64],
    row_tail: NDArray[np.float64],
    virtual_at: dict[int, int],
    notes: list[str],
    name: str,
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Filters ``((order + 1)**2, 2, L)`` of an HOA pack's ACN channels in its
    normalisation, and each one's share of the room's tail: free field the scene decoder's
    filters, in a room the pack's virtual loudspeakers' rows decoded as a scene in a room is
    (:func:`~earfold.renderer.render.scene_feeds.scene_bank`)."""
    from ..scenes import (
        conversion_matrix,
        decode_speaker_filters,
        fold_matrix,
        scene_decoder,
        speaker_gains,
        virtual_layout,
    )
    from .scene_feeds import scene_taps

    norm = normalization.lower()
    if order not in virtual_at:
        decoder = scene_decoder(hset, order, samplerate=rate, taps=scene_taps(hset))
        notes.extend(f"HOA {name!r}: {w}" for w in decoder.warnings)
        bank = np.asarray(decoder.for_input(norm), dtype=np.float64)
        return bank, np.zeros(len(bank))
    directions = virtual_layout(order)
    at = virtual_at[order]
    rows = row_filters[at : at + len(directions)]
    sn3d = decode_speaker_filters(rows, directions, order, rate)
    matrix = conversion_matrix(order, norm)
    sn3d_tail = speaker_gains(directions, order, "basic").T @ row_tail[at : at + len(directions)]
    return fold_matrix(sn3d, matrix), matrix.T @ sn3d_tail


def _with_decay(
    plan: RenderPlan,
    row_filters: NDArray[np.float64],
    row_tail: NDArray[np.float64],
    tail: NDArray[np.float64] | None,
    tail_offset: int,
    rows: list[Speaker],
    gain: float,
) -> RenderPlan:
    """The plan with the report's room decay plot, of the first non-LFE reference row."""
    import dataclasses

    from ._decay import energy_decay

    if not plan.room or not plan.room.get("synthetic"):
        return plan
    first = next(i for i, s in enumerate(rows) if not s.lfe)
    ir = row_filters[first]
    if tail is not None:
        n = max(ir.shape[-1], tail_offset + tail.shape[-1])
        full = np.zeros((2, n))
        full[:, : ir.shape[-1]] = ir
        full[:, tail_offset : tail_offset + tail.shape[-1]] += row_tail[first] * tail
        ir = full
    label = rows[first].label
    decay = {
        "what": f"binaural room response of {label!r}, both ears; Schroeder integration "
        "per octave band",
        "speaker": label,
        **energy_decay(gain * ir, plan.stem.samplerate),
    }
    return dataclasses.replace(plan, room_decay=decay)


def _object_tracks(
    master: AdmMaster,
    objects: _Objects,
    rows: _Rows,
    hset: Any,
    settings: RenderSettings,
    prepared: tuple[dict[str, Any] | None, FilterCache | None, dict[str, Any]],
    gain: float,
    spans: tuple[TrackSpan, ...],
    notes: list[str],
) -> AdmTracks:
    """The objects' part of the plan: the moving engine's paths (their direct shares), and
    the bus the mixers feed: the spread array's rows (HRIR pairs, delayed to the room's
    direct arrival), the reflection array's rows, the diffuse row; each mixer's sources
    and columns."""
    from .moving_sources import moving_response_length, prepare_pair_grid

    rate = float(hset.samplerate)
    set_key, cache, eq_report = prepared

    bus: list[NDArray[np.float64]] = []
    bus_tail: list[float] = []
    mixes: list[ObjectMix] = []
    tracks = [obj.track for obj in master.objects]
    room_tail = rows.room is not None
    exact = settings.room_mode == "exact"
    if objects.spread_out:
        array = _design(ARRAY_ORDER)
        az, el = vector_to_direction(array)
        spread_layout = Layout(
            "ADM spread array",
            tuple(
                Speaker(f"A{i + 1}", float(a), float(e))
                for i, (a, e) in enumerate(zip(np.atleast_1d(az), np.atleast_1d(el)))
            ),
            "the virtual array objects with an extent are spread over",
            "earfold.renderer.scenes.virtual_layout",
        )
        pairs = cached_speaker_feeds(
            spread_layout,
            range(len(array)),
            hset,
            rate,
            lfe=settings.lfe,
            set_key=set_key,
            cache=cache,
        )
        for feed in pairs:
            row = np.zeros((2, rows.arrival + feed.filters.shape[-1]))
            row[:, rows.arrival :] = feed.filters
            bus.append(row)
            bus_tail.append(0.0)
        in_free_field = not rows.reflections
        mixes.append(
            ObjectMix(
                channels=tuple(tracks[k] for k in objects.spread_out),
                paths=tuple(objects.paths[k] for k in objects.spread_out),
                first=0,
                array=array,
                diffuse=objects.has_diffuse and in_free_field,
            )
        )
    if rows.reflections:
        first = len(bus)
        bus.extend(rows.filters[list(rows.reflections)])
        bus_tail.extend(0.0 for _ in rows.reflections)  # the tail has a channel of its own
        mixes.append(
            ObjectMix(
                channels=tuple(tracks),
                paths=tuple(objects.paths),
                first=first,
                array=_design(ROOM_ARRAY_ORDER),
                diffuse=objects.has_diffuse,
                tail=room_tail,
            )
        )
    if objects.has_diffuse:
        diffuse_col = len(bus)
        bus.append(_diffuse_row(hset, rate, settings.seed, rows.room))
        bus_tail.append(0.0)
        notes.append(
            "ADM: diffuse shares (BS.2076 diffuse) go through a short decorrelating response "
            "with the set's diffuse-field spectrum and interaural coherence"
            + (", and feed the room's tail" if rows.room is not None else "")
        )
        # Objects whose diffuse share no mixer above carries: those objects.followed with their
        # own pairs, free field.
        alone = [
            k for k in objects.followed if not rows.reflections and objects.summaries[k].diffuse
        ]
        if alone:
            mixes.append(
                ObjectMix(
                    channels=tuple(tracks[k] for k in alone),
                    paths=tuple(objects.paths[k] for k in alone),
                    first=diffuse_col,
                    array=None,
                    diffuse=True,
                )
            )
    if rows.reflections and rows.room is not None:
        # The objects' tail channel (after the reflection array's rows and the diffuse
        # row, the reflection mix's last column): the tail's share of a loudspeaker at the
        # beds' radius; in exact mode the tail itself as the row's filter.
        weight = float(np.max(rows.room.tail_weights))
        if exact:
            offset, tail = int(rows.room.tail_offset), np.asarray(rows.room.tail, float)
            row = np.zeros((2, offset + tail.shape[-1]))
            row[:, offset:] = weight * tail
            bus.append(row)
            bus_tail.append(0.0)
        else:
            mains = [i for i, speaker in enumerate(rows.speakers) if not speaker.lfe]
            bus.append(np.zeros((2, 1)))
            bus_tail.append(float(np.max(rows.tail[mains])) if mains else 0.0)
    bus_filters = None
    if bus:
        width = max(b.shape[-1] for b in bus)
        bus_filters = np.zeros((len(bus), 2, width))
        for i, b in enumerate(bus):
            bus_filters[i, :, : b.shape[-1]] = b
        bus_filters *= gain
    direct = [
        objects.paths[k].with_direct_share() if objects.summaries[k].diffuse else objects.paths[k]
        for k in objects.followed
    ]
    moving = 1
    if direct:
        eq_report["moving_pairs_cache"] = prepare_pair_grid(hset, set_key, cache)
        moving = moving_response_length(hset)
    return AdmTracks(
        channels=tuple(tracks[k] for k in objects.followed),
        paths=tuple(direct),
        gain=gain,
        length=max(rows.arrival + moving, 1 if bus_filters is None else int(bus_filters.shape[-1])),
        moving_delay=rows.arrival,
        mixes=tuple(mixes),
        bus_filters=bus_filters,
        bus_tail_weights=(
            None
            if rows.room is None or bus_filters is None
            else np.asarray(bus_tail, dtype=np.float64)
        ),
        spans=spans,
    )


def _design(order: int) -> NDArray[np.float64]:
    """The directions of the virtual array of ``order``
    (:func:`~earfold.renderer.scenes.virtual_layout`; the scenes wing is loaded only by a
    master that needs an array)."""
    from ..scenes import virtual_layout

    return np.asarray(virtual_layout(order), dtype=np.float64)


def _diffuse_row(
    hset: Any, rate: float, seed: int, room_filters: RoomFilters | None
) -> NDArray[np.float64]:
    """The filters of the diffuse shares' channel.

    A short decorrelating response with the set's diffuse-field spectrum and interaural
    coherence at the mean energy of its pairs
    (:func:`~earfold.renderer.room.diffuse_response`), so a diffuse share is as loud as a
    direct one; in a room it starts with the rows' direct sound (the room's reference
    arrival), and the object's tail channel feeds the room's tail.
    """
    from ..room import diffuse_response

    response = diffuse_response(hset, rate, seed=seed)
    if room_filters is None:
        return np.asarray(response, dtype=np.float64)
    onset = int(round(float(room_filters.report["reference_arrival_samples"])))
    row = np.zeros((2, onset + response.shape[-1]))
    row[:, onset:] = response
    return row
