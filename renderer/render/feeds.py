"""What feeds the ears: one description per input channel, whatever kind of input it is.

A render's plan does not need to know where its input channels come from. Each channel
is a :class:`ChannelFeed`: its label, the two-ear filter pair it is convolved with, whether
it is an LFE channel (left out of calibration and of the BS.1770 input meter's mains),
its share of the shared room tail and its entry in the report. :func:`speaker_feeds` builds
the feeds of a loudspeaker layout; another input kind (a scene decoder, an object
renderer) builds feeds of its own and reuses the rest of the render unchanged:
calibration, the engine, delivery and the report (:func:`earfold.renderer.render.plan.
plan_from_feeds`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..defaults import SPEED_OF_SOUND
from ..engine import LfeOptions, lfe_filter
from ..geometry import direction_to_vector, vector_to_direction
from ..hrtf import HrirSet, onset_times
from ..layouts import Layout, Speaker

__all__ = ["LFE_REFERENCE_BAND_HZ", "ChannelFeed", "speaker_feeds"]

#: Low-frequency band (Hz) over which the set's level is read to place the LFE.
LFE_REFERENCE_BAND_HZ = (40.0, 120.0)


@dataclass(frozen=True)
class ChannelFeed:
    """How one input channel reaches the ears.

    Attributes
    ----------
    label : str
        The channel's name (a loudspeaker label for a layout).
    filters : numpy.ndarray, shape (2, L)
        The two-ear filter pair the channel is convolved with (left, right), before
        calibration.
    lfe : bool
        An LFE channel: left out of the calibration of the mains.
    tail_weight : float
        The channel's share of the input of the shared room tail (0 without one).
    report : dict
        The channel's entry in the report's ``speakers`` section.
    """

    label: str
    filters: NDArray[np.floating[Any]]
    lfe: bool = False
    tail_weight: float = 0.0
    report: dict[str, Any] = field(default_factory=dict)


def _lfe_reference(hset: HrirSet) -> tuple[float, int]:
    """Low-frequency gain and onset (samples) of the set's front direction."""
    front = hset.pair(direction_to_vector(0.0, 0.0)).ir
    n = 1 << int(np.ceil(np.log2(max(hset.samplerate, front.shape[-1] * 4))))
    spec = np.abs(np.fft.rfft(front, n=n, axis=-1))
    freqs = np.fft.rfftfreq(n, 1 / hset.samplerate)
    lo, hi = LFE_REFERENCE_BAND_HZ
    band = (freqs >= lo) & (freqs <= hi)
    gain = float(np.mean(spec[:, band])) if band.any() else float(np.mean(spec[:, 0]))
    onset = int(round(float(np.mean(onset_times(front)))))
    return gain, onset


def _directions_filter(
    spk: Speaker, hset: HrirSet, warns: list[str]
) -> tuple[NDArray[np.float64], dict[str, Any], float]:
    """The filter pair of a loudspeaker channel, its report fields and worst angular error.

    A channel spread over several directions (:attr:`Speaker.spread`) is the sum of their
    pairs, each at :attr:`Speaker.spread_gain`.
    """
    pairs = []
    for azimuth, elevation in spk.directions:
        pair = hset.pair(direction_to_vector(azimuth, elevation))
        if pair.warning:
            warns.append(f"{spk.label}: {pair.warning}")
        pairs.append(pair)

    def measured(pair: Any) -> list[dict[str, float]]:
        used_az, used_el = vector_to_direction(hset.directions[list(pair.neighbours)])
        return [
            {"azimuth": round(float(a), 3), "elevation": round(float(e), 3), "weight": round(w, 6)}
            for a, e, w in zip(np.atleast_1d(used_az), np.atleast_1d(used_el), pair.weights)
        ]

    worst = round(max(p.angular_error for p in pairs), 3)
    if not spk.spread:
        return pairs[0].ir, {"method": pairs[0].method, "measured": measured(pairs[0])}, worst
    gain = spk.spread_gain
    length = max(p.ir.shape[-1] for p in pairs)
    ir = np.zeros((2, length))
    for p in pairs:
        ir[:, : p.ir.shape[-1]] += gain * p.ir
    fields: dict[str, Any] = {
        "method": pairs[0].method,
        "measured": [m for p in pairs for m in measured(p)],
        "spread": [
            {
                "azimuth": a,
                "elevation": e,
                "gain_db": round(20 * np.log10(gain), 3),
                "method": p.method,
                "measured": measured(p),
            }
            for (a, e), p in zip(spk.directions, pairs)
        ],
    }
    return ir, fields, worst


def speaker_feeds(
    layout: Layout,
    order: Sequence[int],
    hset: HrirSet,
    samplerate: float,
    *,
    lfe: LfeOptions,
    room_responses: NDArray[np.float64] | None = None,
    room_tail_weights: NDArray[np.float64] | None = None,
    room_arrival_samples: float = 0.0,
    warnings: list[str] | None = None,
) -> tuple[ChannelFeed, ...]:
    """The feeds of a loudspeaker layout, one per file channel, in file order.

    Parameters
    ----------
    layout : Layout
        The loudspeakers.
    order : sequence of int
        File channel ``i`` feeds loudspeaker ``order[i]`` of the layout.
    hset : HrirSet
        The (equalised) HRIR set at ``samplerate``.
    samplerate : float
        The stem's rate in Hz.
    lfe : LfeOptions
        How an LFE channel reaches the ears.
    room_responses : numpy.ndarray, shape (S, 2, L), optional
        With a synthetic room, each loudspeaker's binaural room response in layout order
        (the early part when the tail is shared, the whole response otherwise); None
        renders free field (and then optional loudspeaker distances delay and attenuate
        the farther ones).
    room_tail_weights : numpy.ndarray, shape (S,), optional
        Each loudspeaker's share of the shared room tail, in layout order; None when
        there is no shared tail.
    room_arrival_samples : float
        The room's reference arrival time (samples), by which the LFE is delayed too.
    warnings : list of str, optional
        Where interpolation warnings go.
    """
    warns = warnings if warnings is not None else []
    # Without a room, optional loudspeaker distances act as in an uncalibrated room: the
    # farther loudspeakers arrive later and quieter (1/r), relative to the nearest. With a
    # room, the room model places each loudspeaker at its distance itself.
    distances = [s.distance for s in layout.speakers if s.distance and not s.lfe]
    near = min(distances) if distances and room_responses is None else None
    lfe_gain, lfe_onset = _lfe_reference(hset) if layout.lfe_indices else (1.0, 0)
    if room_responses is not None:
        lfe_onset += int(round(room_arrival_samples))

    feeds: list[ChannelFeed] = []
    for channel, speaker_index in enumerate(order):
        spk = layout.speakers[speaker_index]
        entry: dict[str, Any] = {"channel": channel, "label": spk.label}
        if spk.lfe:
            ir = lfe_filter(samplerate, lfe, reference_gain=lfe_gain, delay=lfe_onset)
            entry.update(
                lfe=True,
                method="lfe",
                cutoff_hz=lfe.cutoff_hz,
                gain_db=lfe.gain_db,
            )
        else:
            ir, used, worst = _directions_filter(spk, hset, warns)
            entry.update(azimuth=spk.azimuth, elevation=spk.elevation, **used)
            entry["angular_error_deg"] = worst
            if room_responses is not None:
                ir = room_responses[speaker_index]
                entry["room"] = True
            elif spk.distance and near:
                delay = (spk.distance - near) / SPEED_OF_SOUND * samplerate
                gain = near / spk.distance
                shift = int(round(delay))
                ir = np.concatenate([np.zeros((2, shift)), ir * gain], axis=1)
                entry.update(
                    distance_m=spk.distance,
                    delay_samples=shift,
                    distance_gain_db=round(20 * np.log10(gain), 3),
                )
        weight = 0.0 if room_tail_weights is None else float(room_tail_weights[speaker_index])
        feeds.append(
            ChannelFeed(label=spk.label, filters=ir, lfe=spk.lfe, tail_weight=weight, report=entry)
        )
    return tuple(feeds)
