"""A plan's filter bank: the :class:`RenderPlan` and its assembly from channel feeds.

:func:`plan_from_feeds` stacks the feeds' filters into one bank, calibrates it
(:func:`calibrated_gain`, with the room's shared tail) and returns the plan;
:func:`room_decay` computes the report's room decay plot from the bank.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..eq import REFERENCE as CALIBRATION_REFERENCE
from ..eq import (
    HeadphoneEq,
    calibration_gain,
)
from ..hrtf import HrirSet
from ..io import StemInfo
from ..layouts import (
    Layout,
)
from ._decay import energy_decay
from .adm_feeds import AdmTracks
from .feeds import ChannelFeed

__all__ = ["RenderPlan", "calibrated_gain", "plan_from_feeds", "room_decay"]


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
            gain = calibrated_gain(filters, feeds, tail, tail_weights, tail_offset, stem.samplerate)
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


def calibrated_gain(
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
