"""The render's plan: everything decided before any audio is read.

:func:`plan_render` probes the stem, chooses the layout and the channel order, loads and
equalises the HRTF set, builds the room, turns every input channel into a
:class:`~earfold.renderer.render.feeds.ChannelFeed` and assembles the filter bank
(:func:`plan_from_feeds`: the feeds stacked and calibrated, plus the shared tail).
"""

from __future__ import annotations

import dataclasses
import os
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..eq import (
    HeadphoneEq,
    load_headphone_eq,
)
from ..errors import LayoutError, OptionError, RendererError
from ..hrtf import HrirSet
from ..io import StemInfo, probe_stem
from ..layouts import (
    Layout,
    SceneLayout,
    filename_label,
    get_layout,
    labels_from_filenames,
    labels_from_mask,
    order_name,
    resolve_channel_order,
    scene_layout,
    stem_scene,
    suggest_layout,
)
from ..objects import AdmMaster, read_adm, read_wav_chunks
from ..room import Room, exact_brirs, get_room
from .bank import RenderPlan, plan_from_feeds, room_decay
from .feeds import ChannelFeed, speaker_feeds
from .filter_cache import FilterCache, default_filter_cache
from .fold import FOLD_CHOICES, fold_feeds, fold_section
from .options import ROOM_MODES, SCENE_OPTIONS, RenderSettings
from .prepared import (
    REUSED,
    is_measured_room,
    keep_lookups,
    layout_key,
    prepared_set,
    resolve_hrtf,
    room_part,
    take_lookups,
)

__all__ = ["RenderPlan", "plan_from_feeds", "plan_render", "resolve_hrtf"]


def _adm_master(stem: StemInfo, settings: RenderSettings) -> AdmMaster | None:
    """The ADM master a single WAV stem is (``axml`` with BS.2076 metadata and ``chna``),
    read for its programme; None for any other stem. A layout named for an ADM master is
    refused: its metadata places every track."""
    if len(stem.paths) != 1 or stem.format not in ("WAV", "WAVEX", "RF64", "BW64"):
        return None
    try:
        chunks = read_wav_chunks(stem.paths[0])
    except (RendererError, OSError):
        return None  # not a chunk structure we read: soundfile's view of it stands
    if chunks.chna is None or chunks.axml is None or b"audioFormatExtended" not in chunks.axml:
        return None
    name = Path(stem.paths[0]).name
    if settings.layout is not None:
        raise LayoutError(
            f"{name!r} is an ADM object master: its metadata (ITU-R BS.2076, axml and "
            "chna) places every track, so no layout is given for it; leave --layout out "
            f"('earfold adm inspect {name}' lists what it holds)"
        )
    return read_adm(stem.paths[0], programme=settings.adm_programme, chunks=chunks)


def _stem_labels(stem: StemInfo) -> list[str] | None:
    """Channel labels the stem itself carries (mono files' names, a WAV channel mask)."""
    if len(stem.paths) > 1:
        return labels_from_filenames(list(stem.paths))
    if stem.channel_mask:
        return labels_from_mask(stem.channel_mask, stem.channels)
    return None


def _layout(stem: StemInfo, value: str | os.PathLike[str] | Layout | None) -> Layout:
    """The layout asked for or, for None, the one the stem suggests."""
    if isinstance(value, Layout):
        return value
    if value is not None:
        return get_layout(value)
    labels = _stem_labels(stem)
    layout = suggest_layout(stem.channels, labels)
    if layout is None and labels is not None:
        layout = suggest_layout(stem.channels)
    if layout is None:
        raise LayoutError(
            f"no layout was given and none is suggested for a stem of {stem.channels} "
            "channel(s); choose the layout the stem was mixed for ('earfold layouts')"
            + _scene_hint(stem.channels)
        )
    return layout


def _scene_hint(channels: int) -> str:
    """For (N + 1)**2 channels, the Ambisonic scene they may be (never chosen unasked: a
    4-channel file may be 4.0 or first order)."""
    root = int(np.sqrt(channels))
    if root * root != channels or not 2 <= root <= 8:
        return ""
    name = "foa" if root == 2 else f"hoa{root - 1}"
    return f" (or, if it is an order-{root - 1} Ambisonic scene, layout {name})"


def _partly_labelled(
    paths: Sequence[str], found: Sequence[tuple[str, str | None]], layout: Layout
) -> LayoutError:
    """The error for mono files of which some names carry a channel label and some not.

    Taking such files in name order would send channels to the wrong loudspeakers, and
    guessing the one missing label would hide a misnamed file: neither is done.
    """
    bad = [
        f"{Path(path).name!r} (its name ends in {token!r}, which is no channel label)"
        if token
        else f"{Path(path).name!r} (its name ends in no label)"
        for path, (token, known) in zip(paths, found, strict=True)
        if known is None
    ]
    labelled = [known for _, known in found if known is not None]
    claimed = set()
    for label in labelled:
        try:
            claimed.add(layout.index(label))
        except LayoutError:
            pass
    free = [layout.labels[i] for i in range(layout.channels) if i not in claimed]
    left = f" (the labelled files leave {', '.join(free)} without a file)" if free else ""
    return LayoutError(
        f"{len(labelled)} of the {len(found)} mono files carry a channel label in their "
        f"names but {len(bad)} do not: {', '.join(bad)}; the channel order cannot be read "
        f"from the names{left}. Rename the file(s) so that every name ends in a label of "
        f"layout {layout.name!r} ({', '.join(layout.labels)}), or give --channel-order "
        f"with one label per file, in the order the files are given"
    )


def _choose_order(
    stem: StemInfo, layout: Layout, channel_order: Sequence[str] | str | None
) -> tuple[tuple[int, ...], str, list[str]]:
    warnings: list[str] = []
    if stem.channels != layout.channels:
        raise LayoutError(
            f"the stem has {stem.channels} channel(s) but layout {layout.name!r} has "
            f"{layout.channels} ({', '.join(layout.labels)}); choose the layout the stem was "
            f"mixed for"
        )
    if channel_order:
        given = channel_order if isinstance(channel_order, str) else list(channel_order)
        name = order_name(layout, given)
        source = "--channel-order" if name is None else f"channel order {name!r}"
        return resolve_channel_order(layout, given), source, warnings
    if len(stem.paths) > 1:
        found = [filename_label(p) for p in stem.paths]
        if any(known is not None for _, known in found) and any(k is None for _, k in found):
            raise _partly_labelled(stem.paths, found, layout)
        named = [known for _, known in found if known is not None]
        if len(named) == len(found):
            try:
                return resolve_channel_order(layout, named), "file names", warnings
            except LayoutError as exc:
                raise LayoutError(
                    f"the file names give the labels {', '.join(named)}, which do not fit: "
                    f"{exc}; rename the files or give --channel-order"
                ) from None
        warnings.append(
            "the mono files' names carry no channel labels; they were taken in the order "
            f"given as {', '.join(layout.labels)}"
        )
        return tuple(range(layout.channels)), "file order", warnings
    if stem.channel_mask:
        labels = labels_from_mask(stem.channel_mask, stem.channels, layout)
        if labels is not None:
            try:
                return resolve_channel_order(layout, labels), "WAV channel mask", warnings
            except LayoutError as exc:
                warnings.append(
                    f"the WAV channel mask does not fit the layout ({exc}); used the layout's "
                    "default order"
                )
        else:
            warnings.append(
                f"the WAV channel mask 0x{stem.channel_mask:X} does not describe "
                f"{stem.channels} channels; used the layout's default order"
            )
    return tuple(range(layout.channels)), "layout default", warnings


def _excerpt(stem: StemInfo, excerpt: tuple[float, float]) -> StemInfo:
    """The window ``(start, length)`` seconds of ``stem``; RendererError if it misses."""
    try:
        start_s, length_s = (float(v) for v in excerpt)
    except (TypeError, ValueError):
        raise RendererError(
            f"excerpt must be (start, length) in seconds, not {excerpt!r}"
        ) from None
    if not (np.isfinite(start_s) and np.isfinite(length_s)) or start_s < 0 or length_s <= 0:
        raise RendererError(
            f"excerpt must have a start >= 0 and a length > 0 seconds, not "
            f"({start_s:g}, {length_s:g})"
        )
    if start_s >= stem.duration:
        raise RendererError(
            f"the excerpt starts at {start_s:g} s but the stem is only {stem.duration:.3f} s long"
        )
    return stem.window(round(start_s * stem.samplerate), max(1, round(length_s * stem.samplerate)))


def plan_render(inputs: Sequence[str | os.PathLike[str]], settings: RenderSettings) -> RenderPlan:
    """Probe the stem and build the filter bank, validating everything up front."""
    stem = probe_stem(inputs)
    master = _adm_master(stem, settings)
    if settings.excerpt is not None:
        stem = _excerpt(stem, settings.excerpt)
    if master is not None:
        from .adm_plan import plan_adm  # here: only an ADM master loads it

        return plan_adm(stem, master, settings)
    if settings.adm_programme is not None:
        raise OptionError(
            "adm_programme applies to ADM masters only (a WAV with axml and chna chunks); "
            "leave it out"
        )
    if settings.fold not in FOLD_CHOICES:
        raise RendererError(
            f"unknown fold {settings.fold!r}; choose one of {', '.join(FOLD_CHOICES)}"
        )
    layout = _layout(stem, settings.layout)
    if isinstance(layout, SceneLayout):
        return _plan_scene(stem, layout, settings)
    _refuse_scene_options(layout, settings)
    order, order_source, warnings = _choose_order(stem, layout, settings.channel_order)
    solo = _solo(layout, order, settings.solo)
    notes: list[str] = []
    if solo is not None and settings.loudness is not None:
        notes.append(
            f"solo {solo['label']!r}: the loudness target applies to this loudspeaker alone, "
            "so it plays at the target, not at its level within the mix (loudness none "
            "keeps the render's own level)"
        )
    if settings.layout is None:
        # Said every time: a layout guessed from a channel count can be the wrong one.
        notes.append(
            f"no layout was given: rendered as {layout.name}, the layout suggested for "
            f"{stem.channels} channel(s); name the layout if the stem was mixed for another"
            + _scene_hint(stem.channels),
        )
    if settings.fold == "stereo":
        return _plan_fold(stem, layout, order, order_source, warnings, notes, settings, solo)
    ctx = _context(stem, settings, warnings, notes, layout, order, order_source, solo)
    requested_room = get_room(settings.room)
    bank_key = (
        None
        if ctx.cache is None or ctx.set_key is None
        else _bank_key(ctx.set_key, layout, order, requested_room, settings)
    )
    return _through_bank_cache(ctx, bank_key, lambda: _built_plan(ctx, settings, requested_room))


def _built_plan(
    ctx: _PlanContext, settings: RenderSettings, requested_room: Room | None
) -> RenderPlan:
    """The plan's filter bank computed: the feeds of every channel, the room, calibration."""
    stem, hset, set_key, cache = ctx.stem, ctx.hset, ctx.set_key, ctx.cache
    layout, warnings = ctx.layout, ctx.warnings
    room_filters, room_report = room_part(
        hset, layout, requested_room, stem.samplerate, settings, set_key, cache, warnings, ctx.notes
    )
    take_lookups(hset, set_key, cache)
    exact = room_filters is not None and settings.room_mode == "exact"
    feeds = speaker_feeds(
        layout,
        ctx.order,
        hset,
        stem.samplerate,
        lfe=settings.lfe,
        room_responses=(
            None
            if room_filters is None
            else exact_brirs(room_filters)
            if exact
            else room_filters.early
        ),
        room_tail_weights=(
            None if room_filters is None or exact else np.asarray(room_filters.tail_weights)
        ),
        room_arrival_samples=(
            0.0 if room_filters is None else float(room_filters.report["reference_arrival_samples"])
        ),
        warnings=warnings,
    )
    keep_lookups(hset, set_key, cache)
    shared = room_filters is not None and not exact
    return plan_from_feeds(
        stem,
        feeds,
        hset,
        warnings,
        layout=layout,
        order=ctx.order,
        order_source=ctx.order_source,
        tail=room_filters.tail if shared and room_filters is not None else None,
        tail_offset=int(room_filters.tail_offset) if shared and room_filters is not None else 0,
        room=room_report,
        eq=ctx.eq_report,
        headphone=ctx.headphone,
        notes=ctx.notes,
        solo=ctx.solo,
    )


def _refuse_scene_options(layout: Layout, settings: RenderSettings) -> None:
    """:class:`OptionError` when a loudspeaker render is given a scene's option."""
    given = [name for name in SCENE_OPTIONS if getattr(settings, name) is not None]
    if given:
        raise OptionError(
            f"{', '.join(given)} appl{'ies' if len(given) == 1 else 'y'} to Ambisonic scenes "
            f"only (layout foa, hoa2 ... hoa7); layout {layout.name!r} is loudspeakers: "
            "leave the option out, or name the scene's layout"
        )


def _plan_scene(stem: StemInfo, layout: SceneLayout, settings: RenderSettings) -> RenderPlan:
    """The plan of an Ambisonic scene: the decoder's filters as the bank (see
    :mod:`.scene_feeds` for the decoder, the room and the calibration).

    The bank is cached like a loudspeaker layout's (kind ``"bank"``), keyed by the
    prepared set, the order, normalisation, decoder, rotation, room, seed and solo, so a
    repeated render loads it and builds no decoder.
    """
    warnings: list[str] = []
    notes: list[str] = []
    if settings.channel_order:
        raise LayoutError(
            f"channel_order does not apply to Ambisonic scene {layout.name!r}: a scene's "
            "channels are in ACN order (AmbiX), or W X Y Z with ambisonic_norm fuma; "
            "leave channel_order out"
        )
    if settings.fold == "stereo":
        raise LayoutError(
            f"fold stereo is the ITU-R BS.775 fold-down of loudspeaker channels; "
            f"{layout.name!r} is an Ambisonic scene, which has no loudspeaker channels to "
            "fold: render it binaurally"
        )
    if settings.fold not in FOLD_CHOICES:
        raise RendererError(
            f"unknown fold {settings.fold!r}; choose one of {', '.join(FOLD_CHOICES)}"
        )
    asked = scene_layout(layout.name, settings.ambisonic_norm or layout.normalisation)
    # The stem's own scene: the one asked for, or one of a higher order decoded at the
    # order asked for (its higher channels left out).
    scene = stem_scene(asked, stem.channels)
    if scene.order > asked.order:
        notes.append(
            f"an order-{scene.order} scene decoded at order {asked.order} ({asked.name}): its "
            f"ACN channels {asked.channels} to {scene.channels - 1} are left out"
        )
    order = tuple(range(scene.channels))
    order_source = (
        "FuMa channel order (W X Y Z)"
        if scene.normalisation == "fuma"
        else "ACN channel order (AmbiX)"
    )
    solo = _solo(scene, order, settings.solo)
    if solo is not None and settings.loudness is not None:
        notes.append(
            f"solo {solo['label']!r}: the loudness target applies to this channel alone "
            "(loudness none keeps the render's own level)"
        )
    ctx = _context(stem, settings, warnings, notes, scene, order, order_source, solo)
    hset, set_key = ctx.hset, ctx.set_key
    from .scene_feeds import SCENE_REFERENCE, scene_bank, scene_taps, virtual_room_layout

    requested_room = get_room(settings.room)
    bank_key = None
    if ctx.cache is not None and set_key is not None:
        bank_key = {
            **_bank_key(set_key, scene, order, requested_room, settings),
            "scene": {
                "order": asked.order,
                "stem_order": scene.order,
                "normalisation": scene.normalisation,
                "decoder": settings.ambisonic_decoder,
                "rotation": None if settings.rotate is None else list(settings.rotate),
                "taps": scene_taps(hset),
                "version": SCENE_BANK_VERSION,
            },
        }

    def built() -> RenderPlan:
        virtual = (
            None
            if requested_room is None or is_measured_room(hset)
            else virtual_room_layout(asked.order, requested_room)
        )
        room_filters, room_report = room_part(
            hset,
            virtual,
            requested_room,
            stem.samplerate,
            settings,
            set_key,
            ctx.cache,
            warnings,
            notes,
        )
        if room_report is not None and virtual is not None and room_report.get("synthetic"):
            room_report["virtual_layout"] = virtual.description
        take_lookups(hset, set_key, ctx.cache)
        bank = scene_bank(
            scene,
            hset,
            stem.samplerate,
            method=settings.ambisonic_decoder,
            rotation=settings.rotate,
            order=asked.order,
            room=room_filters,
            exact=settings.room_mode == "exact",
        )
        keep_lookups(hset, set_key, ctx.cache)
        warnings.extend(bank.warnings)
        notes.extend(bank.notes)
        plan = plan_from_feeds(
            stem,
            bank.feeds,
            hset,
            warnings,
            layout=scene,
            order=order,
            order_source=order_source,
            tail=bank.tail,
            tail_offset=bank.tail_offset,
            room=room_report,
            eq=ctx.eq_report,
            headphone=ctx.headphone,
            notes=notes,
            solo=solo,
            calibration=(bank.gain, SCENE_REFERENCE),
        )
        return dataclasses.replace(plan, scene=bank.section)

    return _through_bank_cache(
        ctx, bank_key, built, accept=lambda meta: isinstance(meta.get("scene"), dict)
    )


@dataclasses.dataclass
class _PlanContext:
    """What a plan of loudspeakers or of a scene has decided before its filter bank: the
    stem, the prepared set and its cache key, the channel order, the report's lists."""

    stem: StemInfo
    hset: HrirSet
    set_key: dict[str, Any] | None
    cache: FilterCache | None
    eq_report: dict[str, Any]
    headphone: HeadphoneEq | None
    warnings: list[str]
    notes: list[str]
    layout: Layout
    order: tuple[int, ...]
    order_source: str
    solo: dict[str, Any] | None


def _context(
    stem: StemInfo,
    settings: RenderSettings,
    warnings: list[str],
    notes: list[str],
    layout: Layout,
    order: tuple[int, ...],
    order_source: str,
    solo: dict[str, Any] | None,
) -> _PlanContext:
    """The room mode checked, the HRTF set prepared (:func:`prepared_set`) and the
    headphone EQ loaded: what every loudspeaker or scene plan starts from."""
    if settings.room_mode not in ROOM_MODES:
        raise RendererError(
            f"unknown room mode {settings.room_mode!r}; choose one of {', '.join(ROOM_MODES)}"
        )
    cache = default_filter_cache()
    hset, eq_report, set_key = prepared_set(
        settings.hrtf, settings.eq, stem.samplerate, warnings, notes, cache
    )
    headphone = None
    if settings.headphone_eq is not None:
        headphone = load_headphone_eq(settings.headphone_eq, stem.samplerate)
        eq_report["headphone"] = headphone.report
    return _PlanContext(
        stem,
        hset,
        set_key,
        cache,
        eq_report,
        headphone,
        warnings,
        notes,
        layout,
        order,
        order_source,
        solo,
    )


def _through_bank_cache(
    ctx: _PlanContext,
    bank_key: dict[str, Any] | None,
    build: Callable[[], RenderPlan],
    accept: Callable[[dict[str, Any]], bool] = lambda meta: True,
) -> RenderPlan:
    """The plan from the cached bank under ``bank_key`` when there is one (and ``accept``
    takes its metadata), else ``build()`` with its room decay plot, stored under the key
    with the warnings and notes the build added."""
    if ctx.cache is not None and bank_key is not None:
        found = ctx.cache.get("bank", bank_key, _bank_entry_ok(ctx.stem.channels))
        if found is not None and accept(found[1]):
            return _restored_plan(found, ctx)
    added, added_notes = len(ctx.warnings), len(ctx.notes)
    plan = build()
    if plan.room is not None and plan.room.get("synthetic"):
        plan = dataclasses.replace(plan, room_decay=room_decay(plan))
    if ctx.cache is not None and bank_key is not None:
        entry = _bank_entry(plan, ctx.warnings[added:], ctx.notes[added_notes:])
        ctx.cache.put("bank", bank_key, *entry)
    return plan


def _solo(layout: Layout, order: Sequence[int], label: str | None) -> dict[str, Any] | None:
    """The loudspeaker ``label`` names (layout index, file channel), or None.

    Raises
    ------
    LayoutError
        If the label is no channel of the layout; the message lists its labels.
    """
    if label is None:
        return None
    if not isinstance(label, str) or not label.strip():
        raise LayoutError(
            f"solo must be a channel label of layout {layout.name!r} "
            f"({', '.join(layout.labels)}), not {label!r}"
        )
    try:
        index = layout.index(label.strip())
    except LayoutError as exc:
        raise LayoutError(f"solo: {exc}") from None
    speaker = layout.speakers[index]
    return {
        "label": speaker.label,
        "channel": list(order).index(index),
        "lfe": speaker.lfe,
    }


def _plan_fold(
    stem: StemInfo,
    layout: Layout,
    order: tuple[int, ...],
    order_source: str,
    warnings: list[str],
    notes: list[str],
    settings: RenderSettings,
    solo: dict[str, Any] | None,
) -> RenderPlan:
    """The plan of the stereo fold-down (:mod:`.fold`): one-tap feeds, no HRTF, no room."""
    room = get_room(settings.room)
    ignored = []
    if room is not None:
        ignored.append(f"the room {room.name!r}")
    # The HRTF set is not named: the service always names one (its default), and the
    # report's hrtf section (null) and fold section already say that none is used.
    if settings.eq not in (None, "none"):
        ignored.append(f"the HRTF equalisation {settings.eq!r}")
    if ignored:
        verb = "does not apply and was" if len(ignored) == 1 else "do not apply and were"
        notes.append(
            "fold stereo is the plain ITU-R BS.775 fold-down to two loudspeaker channels: "
            f"{' and '.join(ignored)} asked for {verb} left out"
        )
    if solo is not None and solo["lfe"]:
        warnings.append(
            f"solo {solo['label']!r} with fold stereo: the fold-down leaves the LFE out "
            "(ITU-R BS.775), so the output is silent"
        )
    eq_report: dict[str, Any] = {
        "type": "none",
        "chosen": "fold stereo: no HRTF",
        "diffuse_field": None,
        "headphone": None,
    }
    headphone = None
    if settings.headphone_eq is not None:
        headphone = load_headphone_eq(settings.headphone_eq, stem.samplerate)
        eq_report["headphone"] = headphone.report
    return plan_from_feeds(
        stem,
        fold_feeds(layout, order),
        None,
        warnings,
        layout=layout,
        order=order,
        order_source=order_source,
        eq=eq_report,
        headphone=headphone,
        notes=notes,
        fold=fold_section(layout),
        solo=solo,
        calibrate=False,
    )


#: Bump when the scenes wing's decoders change what a scene's bank holds.
SCENE_BANK_VERSION = 1


def _bank_key(
    set_key: dict[str, Any],
    layout: Layout,
    order: tuple[int, ...],
    room: Room | None,
    settings: RenderSettings,
) -> dict[str, Any]:
    """Everything the calibrated filter bank is computed from (besides the stem's rate,
    which the set's key holds): the prepared set, the layout and channel order, the LFE,
    the room with its seed and mode, and the soloed loudspeaker."""
    return {
        "set": set_key,
        "layout": layout_key(layout),
        "order": list(order),
        "lfe": dataclasses.asdict(settings.lfe),
        "room": None if room is None else dataclasses.asdict(room),
        "room_mode": settings.room_mode if room is not None else None,
        "seed": int(settings.seed) if room is not None else None,
        "solo": settings.solo,
    }


_FEED_FIELDS = ("label", "lfe", "tail_weight", "report")


def _bank_entry(
    plan: RenderPlan, warnings: list[str], notes: list[str]
) -> tuple[dict[str, NDArray[Any]], dict[str, Any]]:
    """What a plan's bank leaves in the cache: the calibrated filters and tail, and the
    report's parts that came with them (feeds, room, calibration, warnings, notes)."""
    arrays: dict[str, NDArray[Any]] = {"filters": plan.filters}
    if plan.tail is not None and plan.tail_weights is not None:
        arrays.update(tail=plan.tail, tail_weights=plan.tail_weights)
    room = None if plan.room is None else {k: v for k, v in plan.room.items() if k != "cache"}
    meta = {
        "feeds": [{f: getattr(feed, f) for f in _FEED_FIELDS} for feed in plan.feeds],
        "tail_offset": int(plan.tail_offset),
        "room": room,
        "calibration": plan.calibration,
        "room_decay": plan.room_decay,
        "scene": plan.scene,
        "warnings": warnings,
        "notes": notes,
    }
    return arrays, meta


def _bank_entry_ok(channels: int) -> Callable[[Any, Any], bool]:
    """The check of a stored bank for a stem of ``channels`` channels."""

    def whole(arrays: Any, meta: Any) -> bool:
        names = set(arrays)
        if names not in ({"filters"}, {"filters", "tail", "tail_weights"}):
            return False
        if any(a.dtype != np.float64 for a in arrays.values()):
            return False
        filters = arrays["filters"]
        if not (filters.ndim == 3 and filters.shape[:2] == (channels, 2) and filters.shape[2]):
            return False
        if "tail" in names:
            tail, weights = arrays["tail"], arrays["tail_weights"]
            if not (tail.ndim == 2 and tail.shape[0] == 2 and tail.shape[1] > 0):
                return False
            if weights.shape != (channels,):
                return False
        feeds, offset = meta.get("feeds"), meta.get("tail_offset")
        return bool(
            isinstance(feeds, list)
            and len(feeds) == channels
            and all(
                isinstance(f, dict)
                and set(f) == set(_FEED_FIELDS)
                and isinstance(f["label"], str)
                and isinstance(f["lfe"], bool)
                and isinstance(f["tail_weight"], (int, float))
                and isinstance(f["report"], dict)
                for f in feeds
            )
            and isinstance(offset, int)
            and offset >= 0
            and (meta.get("room") is None or isinstance(meta.get("room"), dict))
            and isinstance(meta.get("calibration"), dict)
            and "room_decay" in meta
            and (meta["room_decay"] is None or isinstance(meta["room_decay"], dict))
            and (meta.get("scene") is None or isinstance(meta.get("scene"), dict))
            and all(
                isinstance(meta.get(k), list) and all(isinstance(t, str) for t in meta[k])
                for k in ("warnings", "notes")
            )
        )

    return whole


def _restored_plan(
    found: tuple[dict[str, NDArray[Any]], dict[str, Any]], ctx: _PlanContext
) -> RenderPlan:
    """The plan from a stored bank (checked by :func:`_bank_entry_ok`): the same filters,
    report sections, warnings and notes as the plan that stored it. Each feed's
    ``filters`` is its row of the calibrated bank."""
    arrays, meta = found
    filters = arrays["filters"]
    feeds = tuple(
        ChannelFeed(
            label=f["label"],
            filters=filters[i],
            lfe=f["lfe"],
            tail_weight=float(f["tail_weight"]),
            report=f["report"],
        )
        for i, f in enumerate(meta["feeds"])
    )
    room = None if meta["room"] is None else {**meta["room"]}
    if room is not None and room.get("synthetic"):
        room["cache"] = REUSED
    return RenderPlan(
        stem=ctx.stem,
        feeds=feeds,
        hrir_set=ctx.hset,
        filters=filters,
        warnings=(*ctx.warnings, *meta["warnings"]),
        layout=ctx.layout,
        order=ctx.order,
        order_source=ctx.order_source,
        tail=arrays.get("tail"),
        tail_weights=arrays.get("tail_weights"),
        tail_offset=meta["tail_offset"],
        room=room,
        eq=ctx.eq_report,
        calibration=meta["calibration"],
        headphone=ctx.headphone,
        notes=(*ctx.notes, *meta["notes"]),
        solo=ctx.solo,
        room_decay=meta["room_decay"],
        scene=meta.get("scene"),
    )
