"""The render's plan: everything decided before any audio is read.

:func:`plan_render` probes the stem, chooses the layout and the channel order, loads and
equalises the HRTF set, builds the room, turns every input channel into a
:class:`~earfold.renderer.render.feeds.ChannelFeed` and assembles the filter bank
(:func:`plan_from_feeds`: the feeds stacked and calibrated, plus the shared tail).
"""

from __future__ import annotations

import dataclasses
import functools
import os
import stat
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..eq import REFERENCE as CALIBRATION_REFERENCE
from ..eq import (
    EqualisedHrirSet,
    HeadphoneEq,
    calibration_gain,
    check_eq,
    equalised,
    load_headphone_eq,
)
from ..errors import LayoutError, OptionError, RendererError
from ..hrtf import HrirSet, file_sha256, load_hrir_set
from ..io import StemInfo, probe_stem
from ..layouts import (
    Layout,
    SceneLayout,
    Speaker,
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
from ..room import Room, RoomFilters, build_room_filters, exact_brirs, get_room
from ._decay import energy_decay
from .adm_feeds import AdmTracks, adm_layout, object_path
from .feeds import ChannelFeed, speaker_feeds
from .filter_cache import FilterCache, default_filter_cache
from .fold import FOLD_CHOICES, fold_feeds, fold_section
from .options import ROOM_MODES, RenderSettings

__all__ = ["RenderPlan", "plan_from_feeds", "plan_render", "resolve_hrtf"]


@dataclass(frozen=True)
class RenderPlan:
    """What a render will do, decided before any audio is read.

    Attributes
    ----------
    stem : StemInfo
        The input (or the excerpt of it that is rendered).
    feeds : tuple of ChannelFeed
        What feeds the ears, one per input channel in file order.
    hrir_set : HrirSet or None
        The (equalised) set the feeds were built from; None for the stereo fold-down.
    filters : numpy.ndarray, shape (C, 2, L)
        The calibrated filter bank, in file channel order.
    warnings : tuple of str
    layout : Layout
        The loudspeaker layout the input channels belong to.
    order : tuple of int
        File channel ``i`` feeds layout loudspeaker ``order[i]``.
    order_source : str
        Where the channel order came from.
    tail, tail_weights, tail_offset
        The calibrated shared room tail ``(2, Lt)``, each channel's share of it ``(C,)``
        and its delay in samples; None and 0 without a shared tail.
    room, eq, calibration : dict or None
        The report's sections.
    headphone : HeadphoneEq or None
        Applied to the two-channel output.
    notes : tuple of str
        Information the report gives without alarm (what every default render would
        show); ``warnings`` are kept for real problems.
    fold : dict
        The report's ``fold`` section: ``{"mode": "binaural"}``, or the stereo
        fold-down's coefficients and source.
    solo : dict or None
        The loudspeaker rendered alone (label, layout index, file channel), or None.
    room_decay : dict or None
        The report's room decay plot, computed with the filters
        (:func:`room_decay`) and cached with them;
        None when there is no synthetic room or it is left to the report.
    scene : dict or None
        The report's ``scene`` section for an Ambisonic scene (order, normalisation, the
        decoder's description, rotation, room), None for loudspeakers. A scene's
        ``layout`` is then a :class:`~earfold.renderer.layouts.SceneLayout`: one
        placeholder "speaker" per file channel, labelled ``ACN0`` ... (``W X Y Z`` for
        FuMa), which gives the stream its channel names and the BS.1770 input weights
        (W alone); ``order`` is the identity (a scene keeps its own channel order).
    """

    stem: StemInfo
    feeds: tuple[ChannelFeed, ...]
    hrir_set: HrirSet | None
    filters: NDArray[np.float64]
    warnings: tuple[str, ...]
    layout: Layout
    order: tuple[int, ...]
    order_source: str
    tail: NDArray[np.float64] | None = None
    tail_weights: NDArray[np.float64] | None = None
    tail_offset: int = 0
    room: dict[str, Any] | None = None
    eq: dict[str, Any] | None = None
    calibration: dict[str, Any] | None = None
    headphone: HeadphoneEq | None = None
    notes: tuple[str, ...] = ()
    fold: dict[str, Any] = dataclasses.field(default_factory=lambda: {"mode": "binaural"})
    solo: dict[str, Any] | None = None
    room_decay: dict[str, Any] | None = None
    scene: dict[str, Any] | None = None
    objects: AdmTracks | None = None
    adm: dict[str, Any] | None = None

    @property
    def speakers(self) -> tuple[dict[str, Any], ...]:
        """The report entries of the input channels, in file order."""
        return tuple(f.report for f in self.feeds)

    @property
    def length(self) -> int:
        """Length of the whole response: output frames = input frames + length - 1."""
        n = int(self.filters.shape[-1])
        if self.tail is not None:
            n = max(n, self.tail_offset + int(self.tail.shape[-1]))
        if self.objects is not None:
            n = max(n, self.objects.length)
        if self.headphone is not None:
            n += int(self.headphone.ir.shape[-1]) - 1
        return n


def resolve_hrtf(name_or_path: str | os.PathLike[str] | None) -> tuple[str, str]:
    """Path and display name of an HRTF set given by shipped name or file path."""
    from earfold.hrtf_sets import DEFAULT_SET, get_shipped

    value = os.fspath(name_or_path) if name_or_path else DEFAULT_SET
    if value.lower().endswith(".sofa") or os.sep in value or "/" in value:
        return value, Path(value).name
    shipped = get_shipped(value)
    return str(shipped.path), str(shipped.name)


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
    if master is not None:
        return _plan_adm(stem, master, settings)
    if settings.adm_programme is not None:
        raise OptionError(
            "adm_programme applies to ADM masters only (a WAV with axml and chna chunks); "
            "leave it out"
        )
    if settings.excerpt is not None:
        stem = _excerpt(stem, settings.excerpt)
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
    cache = default_filter_cache()
    hset, eq_report, set_key = _prepared_set(
        settings.hrtf, settings.eq, stem.samplerate, warnings, notes, cache
    )
    headphone = None
    if settings.headphone_eq is not None:
        headphone = load_headphone_eq(settings.headphone_eq, stem.samplerate)
        eq_report["headphone"] = headphone.report

    if settings.room_mode not in ROOM_MODES:
        raise RendererError(
            f"unknown room mode {settings.room_mode!r}; choose one of {', '.join(ROOM_MODES)}"
        )
    requested_room = get_room(settings.room)
    bank_key = (
        None
        if cache is None or set_key is None
        else _bank_key(set_key, layout, order, requested_room, settings)
    )
    if cache is not None and bank_key is not None:
        found = cache.get("bank", bank_key, _bank_entry_ok(stem.channels))
        if found is not None:
            return _restored_plan(
                found,
                stem,
                hset,
                warnings,
                notes,
                eq_report,
                headphone,
                layout=layout,
                order=order,
                order_source=order_source,
                solo=solo,
            )
    added, added_notes = len(warnings), len(notes)
    plan = _built_plan(
        stem,
        hset,
        settings,
        requested_room,
        set_key,
        cache,
        warnings,
        notes,
        eq_report,
        headphone,
        layout=layout,
        order=order,
        order_source=order_source,
        solo=solo,
    )
    if plan.room is not None and plan.room.get("synthetic"):
        plan = dataclasses.replace(plan, room_decay=room_decay(plan))
    if cache is not None and bank_key is not None:
        cache.put("bank", bank_key, *_bank_entry(plan, warnings[added:], notes[added_notes:]))
    return plan


def _built_plan(
    stem: StemInfo,
    hset: HrirSet,
    settings: RenderSettings,
    requested_room: Room | None,
    set_key: dict[str, Any] | None,
    cache: FilterCache | None,
    warnings: list[str],
    notes: list[str],
    eq_report: dict[str, Any],
    headphone: HeadphoneEq | None,
    *,
    layout: Layout,
    order: tuple[int, ...],
    order_source: str,
    solo: dict[str, Any] | None,
) -> RenderPlan:
    """The plan's filter bank computed: the feeds of every channel, the room, calibration."""
    room_filters, room_report = _room_part(
        hset, layout, requested_room, stem.samplerate, settings, set_key, cache, warnings, notes
    )
    _take_lookups(hset, set_key, cache)
    exact = room_filters is not None and settings.room_mode == "exact"
    feeds = speaker_feeds(
        layout,
        order,
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
    _keep_lookups(hset, set_key, cache)
    shared = room_filters is not None and not exact
    return plan_from_feeds(
        stem,
        feeds,
        hset,
        warnings,
        layout=layout,
        order=order,
        order_source=order_source,
        tail=room_filters.tail if shared and room_filters is not None else None,
        tail_offset=int(room_filters.tail_offset) if shared and room_filters is not None else 0,
        room=room_report,
        eq=eq_report,
        headphone=headphone,
        notes=notes,
        solo=solo,
    )


#: The options that only an Ambisonic scene takes.
SCENE_OPTIONS = ("ambisonic_norm", "ambisonic_decoder", "rotate")


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
    if settings.room_mode not in ROOM_MODES:
        raise RendererError(
            f"unknown room mode {settings.room_mode!r}; choose one of {', '.join(ROOM_MODES)}"
        )
    cache = default_filter_cache()
    hset, eq_report, set_key = _prepared_set(
        settings.hrtf, settings.eq, stem.samplerate, warnings, notes, cache
    )
    headphone = None
    if settings.headphone_eq is not None:
        headphone = load_headphone_eq(settings.headphone_eq, stem.samplerate)
        eq_report["headphone"] = headphone.report
    from .scene_feeds import SCENE_REFERENCE, scene_bank, scene_taps, virtual_room_layout

    requested_room = get_room(settings.room)
    bank_key = None
    if cache is not None and set_key is not None:
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
        found = cache.get("bank", bank_key, _bank_entry_ok(stem.channels))
        if found is not None and isinstance(found[1].get("scene"), dict):
            return _restored_plan(
                found,
                stem,
                hset,
                warnings,
                notes,
                eq_report,
                headphone,
                layout=scene,
                order=order,
                order_source=order_source,
                solo=solo,
            )
    added, added_notes = len(warnings), len(notes)
    virtual = (
        None
        if requested_room is None or _is_measured_room(hset)
        else virtual_room_layout(asked.order, requested_room)
    )
    room_filters, room_report = _room_part(
        hset, virtual, requested_room, stem.samplerate, settings, set_key, cache, warnings, notes
    )
    if room_report is not None and virtual is not None and room_report.get("synthetic"):
        room_report["virtual_layout"] = virtual.description
    _take_lookups(hset, set_key, cache)
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
    _keep_lookups(hset, set_key, cache)
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
        eq=eq_report,
        headphone=headphone,
        notes=notes,
        solo=solo,
        calibration=(bank.gain, SCENE_REFERENCE),
    )
    plan = dataclasses.replace(plan, scene=bank.section)
    if plan.room is not None and plan.room.get("synthetic"):
        plan = dataclasses.replace(plan, room_decay=room_decay(plan))
    if cache is not None and bank_key is not None:
        cache.put("bank", bank_key, *_bank_entry(plan, warnings[added:], notes[added_notes:]))
    return plan


def _plan_adm(stem: StemInfo, master: AdmMaster, settings: RenderSettings) -> RenderPlan:
    """The plan of an ADM object master (see :mod:`.adm_feeds`): beds and HOA tracks as
    the fixed filter bank, objects as paths for the moving-source engine, one calibration
    gain for all of them."""
    from .feed_cache import cached_speaker_feeds
    from .moving_sources import moving_response_length, prepare_pair_grid

    name = Path(stem.paths[0]).name
    refused = [
        what
        for what, given in (
            ("channel_order", bool(settings.channel_order)),
            ("solo", settings.solo is not None),
            ("fold stereo", settings.fold == "stereo"),
            ("headphone_eq", settings.headphone_eq is not None),
            ("room", get_room(settings.room) is not None),
            *((option, getattr(settings, option) is not None) for option in SCENE_OPTIONS),
        )
        if given
    ]
    if refused:
        raise OptionError(
            f"{', '.join(refused)}: not available for ADM masters in this version ({name!r} "
            "is rendered as its metadata places it, free field); leave "
            f"{'it' if len(refused) == 1 else 'them'} out"
        )
    if stem.channels != master.channels:
        raise LayoutError(
            f"{name!r}: the audio has {stem.channels} channel(s) but its ADM header says "
            f"{master.channels}"
        )
    warnings: list[str] = []
    notes: list[str] = []
    cache = default_filter_cache()
    hset, eq_report, set_key = _prepared_set(
        settings.hrtf, settings.eq, stem.samplerate, warnings, notes, cache
    )
    rate = stem.samplerate
    layout = adm_layout(master)
    fixed: dict[int, tuple[ChannelFeed, float]] = {}
    if master.beds:
        reference = Layout(
            "ADM bed",
            tuple(layout.speakers[bed.track] for bed in master.beds),
            "the master's bed loudspeakers",
            "ITU-R BS.2076 metadata of the file",
        )
    else:
        reference = get_layout("5.0")
    _take_lookups(hset, set_key, cache)  # objects resting in place look up exact pairs
    reference_feeds = cached_speaker_feeds(
        reference,
        range(reference.channels),
        hset,
        rate,
        lfe=settings.lfe,
        set_key=set_key,
        cache=cache,
    )
    if master.beds:
        for bed, feed in zip(master.beds, reference_feeds):
            fixed[bed.track] = (feed, 0.0 if bed.mute else float(bed.gain))
    stacked = np.zeros((len(reference_feeds), 2, max(f.filters.shape[-1] for f in reference_feeds)))
    for i, feed in enumerate(reference_feeds):
        stacked[i, :, : feed.filters.shape[-1]] = feed.filters
    gain = _calibrate(stacked, reference_feeds, None, None, 0, rate)
    for pack in master.hoa:
        from ..scenes import scene_decoder  # here: a master without HOA never loads it
        from .scene_feeds import scene_taps

        decoder = scene_decoder(hset, pack.order, samplerate=rate, taps=scene_taps(hset))
        notes.extend(f"HOA {pack.object_name!r}: {w}" for w in decoder.warnings)
        bank = decoder.for_input(pack.normalization.lower())
        for track, acn in zip(pack.tracks, pack.acns):
            report = {"channel": track, "label": f"ACN{acn}", "hoa": pack.object_name}
            feed = ChannelFeed(label=f"ACN{acn}", filters=bank[acn], report=report)
            fixed[track] = (feed, 0.0 if pack.mute else float(pack.gain))
    spans = [f"{bed.object_name!r}" for bed in master.beds if bed.start or bed.end is not None] + [
        f"{pack.object_name!r}" for pack in master.hoa if pack.start or pack.end is not None
    ]
    if spans:
        warnings.append(
            "ADM: the time spans (start, duration) of bed and HOA objects are not applied in "
            f"this version; played throughout: {', '.join(sorted(set(spans)))}"
        )
    warnings.extend(f"ADM: not rendered: {reason}" for reason in master.ignored)
    notes.extend(f"ADM: {note}" for note in master.notes)
    length = max([1, *(f.filters.shape[-1] for f, _ in fixed.values())])
    filters = np.zeros((stem.channels, 2, length))
    for track, (feed, g) in fixed.items():
        filters[track, :, : feed.filters.shape[-1]] = g * feed.filters
    filters *= gain
    objects = None
    entries: list[dict[str, Any]] = []
    if master.objects:
        paths = []
        for obj in master.objects:
            path, entry = object_path(obj, stem.frames, rate)
            paths.append(path)
            entries.append(entry)
            if entry["not_rendered"]:
                warnings.append(
                    f"ADM object {obj.object_name!r}: rendered as a point source; its "
                    f"{', '.join(entry['not_rendered'])} "
                    f"{'is' if len(entry['not_rendered']) == 1 else 'are'} not rendered yet"
                )
        eq_report["moving_pairs_cache"] = prepare_pair_grid(hset, set_key, cache)
        _keep_lookups(hset, set_key, cache)
        objects = AdmTracks(
            channels=tuple(obj.track for obj in master.objects),
            paths=tuple(paths),
            gain=gain,
            report=tuple(entries),
            length=moving_response_length(hset),
        )
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
        feed_gain = fixed.get(track)
        speaker = layout.speakers[track]
        report = (
            {**feed_gain[0].report, "channel": track, "label": speaker.label}
            if feed_gain is not None
            else {"channel": track, "label": speaker.label}
        )
        feeds.append(
            ChannelFeed(
                label=speaker.label,
                filters=filters[track],
                lfe=feed_gain is not None and feed_gain[0].lfe,
                report=report,
            )
        )
    section = {
        **master.to_dict(),
        "calibration_reference": reference.name,
        "objects_rendered": entries,
    }
    return RenderPlan(
        stem=stem,
        feeds=tuple(feeds),
        hrir_set=hset,
        filters=filters,
        warnings=tuple(warnings),
        layout=layout,
        order=tuple(range(stem.channels)),
        order_source="the ADM master's track map (chna)",
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


def _room_part(
    hset: HrirSet,
    layout: Layout | None,
    room: Room | None,
    samplerate: float,
    settings: RenderSettings,
    set_key: dict[str, Any] | None,
    cache: FilterCache | None,
    warnings: list[str],
    notes: list[str],
) -> tuple[RoomFilters | None, dict[str, Any] | None]:
    """The synthetic room's filters for ``layout`` and the report's room section.

    A set that holds room responses already is rendered as measured (a warning when a
    synthetic room was asked for); the room's own warnings and notes join the plan's.
    """
    if room is not None and _is_measured_room(hset):
        warnings.append(
            f"HRTF set {hset.name!r} already holds room responses (RoomType "
            f"{hset.room_type!r}); rendered as measured, the synthetic room "
            f"{room.name!r} was not added"
        )
        return None, {
            "synthetic": False,
            "measured_room": True,
            "room_type": hset.room_type,
            "requested": room.name,
        }
    if room is not None and layout is not None:
        filters, prepared = _prepared_room(
            hset, layout, room, samplerate, settings.seed, set_key, cache
        )
        warnings.extend(f"room: {w}" for w in filters.report.get("warnings", []))
        notes.extend(f"room: {n}" for n in filters.report.get("notes", []))
        report = {"synthetic": True, "mode": settings.room_mode, **filters.report}
        return filters, {**report, "cache": prepared}
    if _is_measured_room(hset):
        return None, {"synthetic": False, "measured_room": True, "room_type": hset.room_type}
    return None, None


def _take_lookups(hset: HrirSet, set_key: dict[str, Any] | None, cache: FilterCache | None) -> None:
    """Give ``hset`` the direction lookups a render of it prepared before (cache), if any."""
    if cache is not None and set_key is not None:
        lookups = cache.get("lookup", set_key, _lookups_entry_ok)
        if lookups is not None:
            _lookup_set(hset).with_lookup_state(lookups[0])


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

#: Where prepared filters came from, as the report says: taken from the cache, computed
#: and stored in it, or computed with the cache turned off.
REUSED, STORED, UNCACHED = "reused", "stored", "off"


@functools.lru_cache(maxsize=64)
def _hash_of(path: str, mtime_ns: int, size: int) -> str:
    return file_sha256(path)


#: Files larger than this are not hashed for the cache (the SOFA reader refuses them).
_MAX_HASHED_BYTES = 1 << 30


def _content_hash(path: str) -> str | None:
    """SHA-256 of a file, remembered per (path, modification time, size).

    None, and no cache, for anything but a regular file of 1 byte to 1 GiB (a device such
    as /dev/zero, a pipe, a folder, a missing file): the loader gives the error the user
    reads, and hashing such a thing could read forever.
    """
    try:
        st = os.stat(path)
        if not stat.S_ISREG(st.st_mode) or not 0 < st.st_size <= _MAX_HASHED_BYTES:
            return None
        return _hash_of(path, st.st_mtime_ns, st.st_size)
    except OSError:
        return None


def _prepared_set(
    hrtf: str | os.PathLike[str] | None,
    eq: str | None,
    samplerate: float,
    warnings: list[str],
    notes: list[str],
    cache: FilterCache | None,
) -> tuple[HrirSet, dict[str, Any], dict[str, Any] | None]:
    """The HRTF set at ``samplerate``, equalised as asked; its EQ report and cache key.

    Keyed by the file's content (SHA-256), the rate, the EQ choice and the display name
    (which the warnings and notes quote). The key is None when the cache is off.
    """
    path, name = resolve_hrtf(hrtf)
    choice = check_eq(eq)
    digest = None if cache is None else _content_hash(path)
    key = (
        None
        if digest is None
        else {"sha256": digest, "samplerate": float(samplerate), "eq": choice, "name": name}
    )
    if cache is not None and key is not None:
        found = cache.get("hrtf", key, _set_entry_ok)
        if found is not None:
            arrays, meta = found
            warnings.extend(meta["warnings"])
            notes.extend(meta["notes"])
            report: dict[str, Any] = meta["eq_report"]
            report["cache"] = REUSED
            return _restored_set(arrays, meta, path), report, key
    added: list[str] = []
    added_notes: list[str] = []
    hset = load_hrir_set(path, samplerate, name=name)
    added.extend(hset.warnings)  # what the SOFA reader changed or found odd
    hset, report = _equalise(hset, choice, added, added_notes)
    warnings.extend(added)
    notes.extend(added_notes)
    if cache is not None and key is not None:
        cache.put("hrtf", key, *_set_entry(hset, report, added, added_notes))
        report["cache"] = STORED
    else:
        report["cache"] = UNCACHED
    return hset, report, key


_SET_FIELDS = ("name", "samplerate", "sha256", "convention", "room_type", "dropped", "warnings")


def _set_entry(
    hset: HrirSet, report: dict[str, Any], warnings: list[str], notes: list[str]
) -> tuple[dict[str, NDArray[Any]], dict[str, Any]]:
    arrays: dict[str, NDArray[Any]] = {"ir": hset.ir, "directions": hset.directions}
    if isinstance(hset, EqualisedHrirSet):
        if hset.raw is None or hset.fir is None:
            raise RendererError(f"equalised set {hset.name!r} has no original set")
        arrays.update(raw_ir=hset.raw.ir, raw_directions=hset.raw.directions, fir=hset.fir)
    meta = {
        "fields": {f: getattr(hset, f) for f in _SET_FIELDS},
        "equalised": isinstance(hset, EqualisedHrirSet),
        "eq_report": report,
        "warnings": warnings,
        "notes": notes,
    }
    return arrays, meta


def _set_entry_ok(arrays: Any, meta: Any) -> bool:
    """Is a stored set whole: fields present, arrays of consistent shapes, float64?"""
    fields = meta.get("fields")
    if not isinstance(fields, dict) or set(fields) != set(_SET_FIELDS):
        return False
    if not all(isinstance(meta.get(k), list) for k in ("warnings", "notes")):
        return False
    if not isinstance(meta.get("eq_report"), dict):
        return False
    names = {"ir", "directions"}
    if meta.get("equalised") is True:
        names |= {"raw_ir", "raw_directions", "fir"}
    elif meta.get("equalised") is not False:
        return False
    if set(arrays) != names or any(arrays[n].dtype != np.float64 for n in names):
        return False
    ir, dirs = arrays["ir"], arrays["directions"]
    m = ir.shape[0] if ir.ndim == 3 else -1
    ok = ir.ndim == 3 and ir.shape[1] == 2 and m > 0 and ir.shape[2] > 0
    ok = ok and dirs.shape == (m, 3)
    if "fir" in names:
        raw, fir = arrays["raw_ir"], arrays["fir"]
        ok = ok and fir.ndim == 1 and fir.shape[0] > 0
        ok = ok and raw.ndim == 3 and raw.shape[:2] == (m, 2)
        ok = ok and raw.shape[2] + fir.shape[0] - 1 == ir.shape[2]
        ok = ok and arrays["raw_directions"].shape == (m, 3)
    return bool(ok)


def _exact(hset: HrirSet, ir: NDArray[Any], directions: NDArray[Any]) -> HrirSet:
    """``hset`` holding exactly the stored arrays (its constructor re-normalises the
    directions, which could move their last bits: the cached plan must equal the fresh one)."""
    object.__setattr__(hset, "ir", ir)
    object.__setattr__(hset, "directions", directions)
    return hset


def _restored_set(arrays: dict[str, NDArray[Any]], meta: dict[str, Any], path: str) -> HrirSet:
    """The prepared set from a cache entry (checked by :func:`_set_entry_ok`)."""
    values = {**meta["fields"], "source": path, "warnings": tuple(meta["fields"]["warnings"])}
    ir, dirs = arrays["ir"], arrays["directions"]
    if not meta["equalised"]:
        return _exact(HrirSet(**values, ir=ir, directions=dirs), ir, dirs)
    raw_ir, raw_dirs = arrays["raw_ir"], arrays["raw_directions"]
    raw = _exact(HrirSet(**values, ir=raw_ir, directions=raw_dirs), raw_ir, raw_dirs)
    eq_set = EqualisedHrirSet(raw=raw, fir=arrays["fir"], **values, ir=ir, directions=dirs)
    return _exact(eq_set, ir, dirs)


def _lookup_set(hset: HrirSet) -> HrirSet:
    """The set whose lookups a render runs (an equalised set looks up its original)."""
    if isinstance(hset, EqualisedHrirSet) and hset.raw is not None:
        return hset.raw
    return hset


def _lookups_entry_ok(arrays: Any, meta: Any) -> bool:
    names = set(arrays)
    return names in ({"onsets"}, {"onsets", "aligned", "aligned_ref"}) and meta == {}


def _keep_lookups(hset: HrirSet, key: dict[str, Any] | None, cache: FilterCache | None) -> None:
    """Store what the set's direction lookups prepared (onsets, aligned responses), once.

    A separate entry from the set's: it is known only after the feeds were built.
    The shapes are checked against the set when taken back
    (:meth:`~earfold.renderer.hrtf.HrirSet.with_lookup_state`).
    """
    if cache is None or key is None:
        return
    state = _lookup_set(hset).lookup_state()
    if not state:
        return
    held = cache.get("lookup", key, _lookups_entry_ok)
    if held is not None and len(held[0]) >= len(state):
        return
    cache.put("lookup", key, state, {})


def _layout_key(layout: Layout) -> dict[str, Any]:
    """A layout as a cache key: its name and every loudspeaker's label and position."""
    return {
        "name": layout.name,
        "speakers": [
            [s.label, s.azimuth, s.elevation, s.distance, s.lfe, s.spread] for s in layout.speakers
        ],
    }


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
        "layout": _layout_key(layout),
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
    found: tuple[dict[str, NDArray[Any]], dict[str, Any]],
    stem: StemInfo,
    hset: HrirSet,
    warnings: list[str],
    notes: list[str],
    eq_report: dict[str, Any],
    headphone: HeadphoneEq | None,
    *,
    layout: Layout,
    order: tuple[int, ...],
    order_source: str,
    solo: dict[str, Any] | None,
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
        stem=stem,
        feeds=feeds,
        hrir_set=hset,
        filters=filters,
        warnings=(*warnings, *meta["warnings"]),
        layout=layout,
        order=order,
        order_source=order_source,
        tail=arrays.get("tail"),
        tail_weights=arrays.get("tail_weights"),
        tail_offset=meta["tail_offset"],
        room=room,
        eq=eq_report,
        calibration=meta["calibration"],
        headphone=headphone,
        notes=(*notes, *meta["notes"]),
        solo=solo,
        room_decay=meta["room_decay"],
        scene=meta.get("scene"),
    )


def _prepared_room(
    hset: HrirSet,
    layout: Layout,
    room: Room,
    samplerate: float,
    seed: int,
    set_key: dict[str, Any] | None,
    cache: FilterCache | None,
) -> tuple[RoomFilters, str]:
    """The room's filters (:func:`_room_filters`), from the cache when it holds them.

    Keyed by the prepared set's key, the layout's loudspeakers, every parameter of the
    room, the seed and the rate.
    """
    if cache is None or set_key is None:
        return _room_filters(hset, layout, room, samplerate, seed), UNCACHED
    key = {
        "set": set_key,
        "layout": _layout_key(layout),
        "room": dataclasses.asdict(room),
        "seed": int(seed),
        "samplerate": float(samplerate),
    }
    channels = layout.channels

    def whole(arrays: Any, meta: Any) -> bool:
        if set(arrays) != {"early", "tail", "tail_weights"}:
            return False
        if any(a.dtype != np.float64 for a in arrays.values()):
            return False
        early, tail, weights = arrays["early"], arrays["tail"], arrays["tail_weights"]
        offset, report = meta.get("tail_offset"), meta.get("report")
        return bool(
            early.ndim == 3
            and early.shape[:2] == (channels, 2)
            and early.shape[2] > 0
            and tail.ndim == 2
            and tail.shape[0] == 2
            and weights.shape == (channels,)
            and isinstance(offset, int)
            and offset >= 0
            and meta.get("samplerate") == float(samplerate)
            and isinstance(report, dict)
            and isinstance(report.get("reference_arrival_samples"), (int, float))
        )

    found = cache.get("room", key, whole)
    if found is not None:
        arrays, meta = found
        filters = RoomFilters(
            early=arrays["early"],
            tail=arrays["tail"],
            tail_offset=meta["tail_offset"],
            tail_weights=arrays["tail_weights"],
            report=meta["report"],
            samplerate=meta["samplerate"],
        )
        return filters, REUSED
    filters = _room_filters(hset, layout, room, samplerate, seed)
    cache.put(
        "room",
        key,
        {"early": filters.early, "tail": filters.tail, "tail_weights": filters.tail_weights},
        {
            "tail_offset": int(filters.tail_offset),
            "report": filters.report,
            "samplerate": float(filters.samplerate),
        },
    )
    return filters, STORED


def _room_filters(
    hset: HrirSet, layout: Layout, room: Room, samplerate: float, seed: int
) -> RoomFilters:
    """The room's filters per loudspeaker channel of ``layout``, in the layout's order.

    A channel spread over several directions (:attr:`Speaker.spread`, as LCRS's ``S``)
    is modelled as one loudspeaker per direction, and their early responses are summed at
    the channel's spread gain. Its share of the shared diffuse tail adds by power (the
    loudspeakers' tails are uncorrelated in a real room), so the spread channel excites
    the tail as much as one loudspeaker would.
    """
    if not any(s.spread for s in layout.speakers):
        return build_room_filters(hset, layout, room, samplerate, seed=seed)
    expanded: list[Speaker] = []
    mix: list[list[tuple[int, float]]] = []
    for s in layout.speakers:
        if not s.spread:
            mix.append([(len(expanded), 1.0)])
            expanded.append(s)
            continue
        mix.append([(len(expanded) + k, s.spread_gain) for k in range(len(s.spread))])
        expanded.extend(
            Speaker(f"{s.label}~{k + 1}", a, e, s.distance) for k, (a, e) in enumerate(s.spread)
        )
    virtual = Layout(layout.name, tuple(expanded), layout.description, layout.source)
    filters = build_room_filters(hset, virtual, room, samplerate, seed=seed)
    early = np.zeros((layout.channels, *filters.early.shape[1:]))
    weights = np.zeros(layout.channels)
    for i, parts in enumerate(mix):
        for v, gain in parts:
            early[i] += gain * filters.early[v]
            weights[i] += (gain * float(filters.tail_weights[v])) ** 2
    return dataclasses.replace(filters, early=early, tail_weights=np.sqrt(weights))


def plan_from_feeds(
    stem: StemInfo,
    feeds: Sequence[ChannelFeed],
    hset: HrirSet | None,
    warnings: Sequence[str],
    *,
    layout: Layout,
    order: tuple[int, ...],
    order_source: str,
    tail: NDArray[np.float64] | None = None,
    tail_offset: int = 0,
    room: dict[str, Any] | None = None,
    eq: dict[str, Any] | None = None,
    headphone: HeadphoneEq | None = None,
    notes: Sequence[str] = (),
    fold: dict[str, Any] | None = None,
    solo: dict[str, Any] | None = None,
    calibrate: bool = True,
    calibration: tuple[float, str] | None = None,
) -> RenderPlan:
    """Stack the feeds' filters into one bank, calibrate it with the tail, and plan.

    The calibration gain (:mod:`earfold.renderer.eq.calibration`) is computed over the
    non-LFE feeds, each with its share of the tail, and applied to every filter and to the
    tail; ``calibrate=False`` leaves the filters as they are (the stereo fold-down, whose
    coefficients are the standard's). With ``solo`` (``{"channel": i, ...}``) every other
    channel's filters and tail share are then zeroed, so the soloed loudspeaker sounds
    exactly as in the full render. ``calibration`` ``(gain, reference)``: a gain the
    caller computed for a reference of its own (an Ambisonic scene's diffuse field,
    :mod:`.scene_feeds`), applied the same way.
    """
    pairs = [f.filters for f in feeds]
    length = max(p.shape[-1] for p in pairs)
    filters = np.zeros((len(pairs), 2, length), dtype=np.float64)
    for i, p in enumerate(pairs):
        filters[i, :, : p.shape[-1]] = p
    tail_weights = None
    if tail is not None:
        tail_weights = np.asarray([f.tail_weight for f in feeds], dtype=np.float64)
    if calibrate:
        if calibration is None:
            gain = _calibrate(filters, feeds, tail, tail_weights, tail_offset, stem.samplerate)
            reference = CALIBRATION_REFERENCE
        else:
            gain, reference = calibration
        section = {
            "gain_db": round(float(20 * np.log10(gain)), 3),
            "reference": reference,
            "applied": "to every filter, before the delivery stage",
        }
    else:
        gain = 1.0
        section = {
            "gain_db": 0.0,
            "reference": "none: the feeds' gains are used as they are",
            "applied": "not applied",
        }
    filters *= gain
    if tail is not None:
        tail = tail * gain
    if solo is not None:
        others = [i for i in range(len(feeds)) if i != solo["channel"]]
        filters[others] = 0.0
        if tail_weights is not None:
            tail_weights[others] = 0.0
    return RenderPlan(
        stem=stem,
        feeds=tuple(feeds),
        hrir_set=hset,
        filters=filters,
        warnings=tuple(warnings),
        layout=layout,
        order=order,
        order_source=order_source,
        tail=tail,
        tail_weights=tail_weights,
        tail_offset=tail_offset,
        room=room,
        eq=eq,
        calibration=section,
        headphone=headphone,
        notes=tuple(notes),
        fold=fold if fold is not None else {"mode": "binaural"},
        solo=solo,
    )


def _equalise(
    hset: HrirSet, choice: str | None, warnings: list[str], notes: list[str]
) -> tuple[HrirSet, dict[str, Any]]:
    """Apply the equalisation asked for (or the set's default); the report section."""
    choice = check_eq(choice)
    measured_room = _is_measured_room(hset)
    if choice is None:
        choice = "none" if measured_room else "diffuse-field"
        reason = (
            "default: the set holds room responses"
            if measured_room
            else "default for a free-field set"
        )
    else:
        reason = "requested"
        if choice == "diffuse-field" and measured_room:
            warnings.append(
                f"diffuse-field equalisation of {hset.name!r}, whose responses include a room "
                f"(RoomType {hset.room_type!r}): the room's colour is averaged in and removed too"
            )
    report: dict[str, Any] = {
        "type": choice,
        "chosen": reason,
        "diffuse_field": None,
        "headphone": None,
    }
    if choice == "diffuse-field":
        hset, summary = equalised(hset)
        report["diffuse_field"] = summary
        if summary.get("boost_limited"):
            # A property of the set, shown by every render with it: information, no alarm.
            notes.append(
                f"HRTF set {hset.name!r}: the diffuse-field inverse reached its boost limit "
                f"({summary['max_boost_db']:g} dB); the deepest dips are only partly filled"
            )
    return hset, report


def _calibrate(
    filters: NDArray[np.float64],
    feeds: Sequence[ChannelFeed],
    tail: NDArray[np.float64] | None,
    tail_weights: NDArray[np.float64] | None,
    tail_offset: int,
    samplerate: float,
) -> float:
    """The calibration gain (:mod:`earfold.renderer.eq.calibration`) of a filter bank."""
    mains = [i for i, f in enumerate(feeds) if not f.lfe]

    def responses() -> Iterator[NDArray[np.float64]]:
        for i in mains:
            r: NDArray[np.float64] = filters[i]
            if tail is not None and tail_weights is not None:
                n = max(r.shape[-1], tail_offset + tail.shape[-1])
                full = np.zeros((2, n))
                full[:, : r.shape[-1]] = r
                full[:, tail_offset : tail_offset + tail.shape[-1]] += tail_weights[i] * tail
                r = full
            yield r

    return float(calibration_gain(responses(), len(mains), samplerate))


def _is_measured_room(hset: HrirSet) -> bool:
    """Does the set already hold room responses (a reverberant RoomType or a BRIR convention)?"""
    room_type = (hset.room_type or "").lower().replace("-", " ")
    return (
        room_type not in ("", "free field", "freefield", "anechoic")
        or "brir" in hset.convention.lower()
    )


def _room_response(plan: RenderPlan) -> tuple[NDArray[np.float64], str] | None:
    """The binaural room response of the first non-LFE loudspeaker, in layout order."""
    if plan.room is None:
        return None
    channels = [
        (speaker, ch)
        for ch, speaker in enumerate(plan.order)
        if not plan.layout.speakers[speaker].lfe
    ]
    if not channels:
        return None
    speaker, ch = min(channels)
    ir = plan.filters[ch]
    if plan.tail is not None and plan.tail_weights is not None:
        length = max(ir.shape[-1], plan.tail_offset + plan.tail.shape[-1])
        full = np.zeros((2, length))
        full[:, : ir.shape[-1]] = ir
        full[:, plan.tail_offset : plan.tail_offset + plan.tail.shape[-1]] += (
            float(plan.tail_weights[ch]) * plan.tail
        )
        ir = full
    return ir, plan.layout.speakers[speaker].label


def room_decay(plan: RenderPlan) -> dict[str, Any] | None:
    """The report's ``room_decay`` plot: the energy decay per octave band of the first
    non-LFE loudspeaker's binaural room response (None without a synthetic room).

    It depends on the plan's filters alone, so a plan computes it once and the cache of
    prepared filters keeps it with the filter bank
    (:attr:`~earfold.renderer.render.plan.RenderPlan.room_decay`).
    """
    room = _room_response(plan)
    if room is None:
        return None
    ir, label = room
    return {
        "what": f"binaural room response of {label!r}, both ears; Schroeder "
        "integration per octave band",
        "speaker": label,
        **energy_decay(ir, plan.stem.samplerate),
    }
