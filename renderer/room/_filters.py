"""Turn a room, an HRIR set and a layout into the filters the convolution engine runs.

The response of loudspeaker ``c`` at the ears is split in two (the hybrid of image
sources and a statistical tail, :func:`earfold.renderer.room.image_sources`,
:func:`earfold.renderer.room.late_tail`):

* ``early[c]`` -- the direct sound and every image-source reflection that arrives before
  the tail has faded in, each through the HRIR pair of its own arrival direction
  (:meth:`earfold.renderer.hrtf.HrirSet.pair`), at its own fractional delay, scaled by ``1/r``
  and filtered by its walls (and the air). The reflections, not the direct sound, fade
  out with a cosine over the crossfade that starts at ``tail_offset``;
* ``tail`` -- one diffuse tail shared by all loudspeakers, starting at ``tail_offset``
  with the matching sine fade-in; loudspeaker ``c`` feeds it with ``tail_weights[c]``.

So that the engine can run the tail once for all channels, ``exact_brirs`` (early plus
weighted tail, per loudspeaker) is only the reference the shared form must equal.

Rendering. Run ``early`` (C, 2, Le) through one engine, and ``tail[None]`` (1, 2, Lt)
through a second fed with ``block @ tail_weights`` delayed by ``tail_offset`` frames
(a FIFO: no arithmetic). Prepending ``tail_offset`` zeros to the tail instead gives the
same output but makes the engine multiply the zero partitions too, one extra partition
of B = 8192 frames whenever ``tail_offset + Lt`` crosses a partition boundary.
Measured for 7.1.4 at 48 kHz in the large room: the shared form (12 channels x 1
partition plus 1 x 16) ran at 5.9 ms per second of audio, the exact form (12 x 17) at
18.1 ms.

Timing. Time zero of the filters is the emission time plus ``bulk_delay_samples`` (in the
report): the shortest direct path's travel time less :data:`LEAD_SAMPLES`, which removes
common latency but keeps room for the fractional delays' band-limited lead-in. Every path
then arrives at ``distance / c * fs - bulk`` samples (plus the HRIR's own onset). The
tail starts ``mixing_time`` after the direct sound of the farthest loudspeaker.

Level. Paths are scaled ``r_ref / distance`` with ``r_ref`` the farthest loudspeaker's
distance, so that loudspeaker's direct sound keeps the HRIR's own level, nearer ones are
louder, and the tail, whose level is set for a direct sound of unit amplitude at
``r_ref`` (:func:`earfold.renderer.room.late_tail`), is the same for every loudspeaker:
``tail_weights`` is 1, or 0 for an LFE channel, whose rows are left at zero for the render
to fill.

Wall filters. An image's seven band gains (the product of its walls' ``sqrt(1 - alpha)``
and the air's attenuation) become a magnitude response through the zero-phase band
weights of :func:`earfold.renderer.room.band_weights` (which sum to 1, so equal gains give a
flat response) and then a minimum-phase filter by the real-cepstrum (homomorphic) method
(Oppenheim and Schafer, *Discrete-Time Signal Processing*, ch. 13): causal, no pre-echo,
its energy at the reflection's arrival. Images with the same gains (the same walls, and
in a uniformly absorbing room the same order) share one filter, and a set of equal gains
is a plain scale factor.
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import numpy.typing as npt
import scipy.fft

from ..defaults import SPEED_OF_SOUND
from ..errors import RoomError, shown
from ..hrtf import HrirSet
from ..layouts import Layout
from ..signals import minimum_phase_spectrum
from ._acoustics import BANDS_HZ
from ._diffuse import diffuse_field
from ._image_source import image_sources
from ._late_tail import DEFAULT_CROSSFADE_S, band_weights, late_tail
from ._measure import measure_rt60
from ._model import MAX_ORDER, Room

__all__ = [
    "LEAD_SAMPLES",
    "MAX_CROSSFADE_S",
    "MAX_SAMPLERATE",
    "MIN_SAMPLERATE",
    "RoomFilters",
    "build_room_filters",
    "exact_brirs",
]

FloatArray = npt.NDArray[np.float64]
ComplexArray = npt.NDArray[np.complex128]

LEAD_SAMPLES = 16
"""Samples kept before the earliest direct sound, for the band-limited lead-in of its
fractional delay (a sinc's first side lobes)."""

#: Floor of a wall filter's magnitude before its logarithm is taken (-120 dB): a wall
#: with absorption 1 has beta = 0 in some band.
_MIN_MAGNITUDE = 1e-6

#: Band gains closer than this count as the same filter.
_GAIN_DECIMALS = 9

MIN_SAMPLERATE = 8000
"""Lowest sampling rate (Hz) a room is built at."""

MAX_SAMPLERATE = 384000
"""Highest sampling rate (Hz) a room is built at."""

MAX_CROSSFADE_S = 0.1
"""Longest early-to-tail crossfade (s)."""

UNCOVERED_NOTE_DEG = 50.0
"""Early paths outside a set's grid whose nearest measured direction is at most this far
(degrees) are reported as a note, farther as a warning. Our choice: the largest gap under
a set measured all round down to -40 degrees of elevation, as the shipped KEMAR set (a
path straight down is 50 degrees from the lowest ring), so every room on such a set gets
a note, and a set measured on the horizontal plane only a warning."""


@dataclass(frozen=True, eq=False)
class RoomFilters:
    """Filters for rendering a layout in a room.

    Attributes
    ----------
    early : ndarray, shape (C, 2, Le)
        Per loudspeaker, in the layout's order: direct sound and early reflections through
        the HRIRs, ending where the tail has faded in. LFE rows are zero.
    tail : ndarray, shape (2, Lt)
        The shared diffuse tail; its first sample plays ``tail_offset`` samples after time 0.
    tail_offset : int
        Samples from the filters' time zero to the tail's first sample.
    tail_weights : ndarray, shape (C,)
        How much of each channel feeds the tail (1, or 0 for LFE).
    report : dict
        JSON-ready figures: the room, timings, lengths, RT60 requested and measured back,
        DRR per loudspeaker, reflections used.
    samplerate : float
        Hz.
    """

    early: FloatArray
    tail: FloatArray
    tail_offset: int
    tail_weights: FloatArray
    report: dict[str, Any] = field(default_factory=dict)
    samplerate: float = 0.0


def exact_brirs(filters: RoomFilters) -> FloatArray:
    """The whole binaural room response of each loudspeaker: early plus weighted tail.

    Returns
    -------
    ndarray, shape (C, 2, max(Le, tail_offset + Lt))
        What the shared form renders, as one filter per loudspeaker ("exact mode").
    """
    early, tail, off = filters.early, filters.tail, filters.tail_offset
    length = max(early.shape[-1], off + tail.shape[-1])
    out: FloatArray = np.zeros(early.shape[:2] + (length,))
    out[..., : early.shape[-1]] = early
    out[..., off : off + tail.shape[-1]] += filters.tail_weights[:, None, None] * tail[None]
    return out


def _check_rate(samplerate: float) -> float:
    if isinstance(samplerate, bool) or not isinstance(
        samplerate, (int, float, np.integer, np.floating)
    ):
        raise RoomError(f"sampling rate must be a number of Hz, got {shown(samplerate)}")
    if not (math.isfinite(samplerate) and MIN_SAMPLERATE <= samplerate <= MAX_SAMPLERATE):
        raise RoomError(
            f"sampling rate {shown(samplerate)} Hz is outside {MIN_SAMPLERATE}..{MAX_SAMPLERATE} Hz"
        )
    return float(samplerate)


def build_room_filters(
    hset: HrirSet,
    layout: Layout,
    room: Room,
    samplerate: float,
    *,
    seed: int = 0,
    order: int | None = None,
    crossfade_s: float = DEFAULT_CROSSFADE_S,
    max_tail_seconds: float | None = None,
    without_direct: Sequence[int] = (),
) -> RoomFilters:
    """Early filters per loudspeaker and the shared tail for a layout in a room.

    Parameters
    ----------
    hset : HrirSet
        The HRIR set; resampled to ``samplerate`` if it is at another rate.
    layout : Layout
        Loudspeakers; rows of the result follow ``layout.speakers``. A speaker's
        ``distance`` is used when given, else ``room.speaker_radius``.
    room : Room
        The room.
    samplerate : float
        Hz.
    seed : int
        The render's seed; the tail's noise is seeded with ``(seed, room.seed)``.
    order : int, optional
        Image-source order instead of ``room.order`` (0 to :data:`MAX_ORDER`).
    crossfade_s : float
        Early-to-tail crossfade (s).
    max_tail_seconds : float, optional
        Cap on the tail's length (s).
    without_direct : sequence of int, optional
        Rows whose early filters hold the reflections only: their direct sound is
        rendered elsewhere (an ADM object's own HRIR pairs); the report's figures (DRR)
        are those of the whole response all the same.

    Raises
    ------
    RoomError
        If a loudspeaker does not fit in the room, or an argument is out of range.
    """
    t_start = time.perf_counter()
    fs = _check_rate(samplerate)
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise RoomError(f"seed {shown(seed)} must be a non-negative integer")
    n_order = room.order if order is None else order
    if (
        isinstance(n_order, bool)
        or not isinstance(n_order, (int, np.integer))
        or not 0 <= n_order <= MAX_ORDER
    ):
        raise RoomError(
            f"image-source order {shown(order)} must be an integer from 0 to {MAX_ORDER}"
        )
    if not (math.isfinite(crossfade_s) and 0 <= crossfade_s <= MAX_CROSSFADE_S):
        raise RoomError(f"crossfade {shown(crossfade_s)} s must be 0 to {MAX_CROSSFADE_S:g} s")
    if hset.samplerate != fs:
        hset = hset.resampled(fs)
    c = SPEED_OF_SOUND
    speakers = layout.speakers
    active = [i for i, s in enumerate(speakers) if not s.lfe]
    if not active:
        raise RoomError(
            f"layout {shown(layout.name)} has only LFE channels; nothing to place in a room"
        )
    distances = {i: (speakers[i].distance or room.speaker_radius) for i in active}
    positions = {
        i: room.speaker_position(speakers[i].vector, distances[i], label=speakers[i].label)
        for i in active
    }
    r_ref = max(distances.values())
    bulk = max(0, int(math.floor(min(distances.values()) / c * fs)) - LEAD_SAMPLES)
    tail_offset = int(round((r_ref / c + room.mixing_time) * fs)) - bulk
    fade = int(round(crossfade_s * fs))
    window_end = tail_offset + fade
    taps = hset.taps
    arrival_direct = {i: distances[i] / c * fs - bulk for i in active}
    early_len = max(window_end, int(math.ceil(max(arrival_direct.values()))) + taps + 1)
    nfft = scipy.fft.next_fast_len(2 * (early_len + taps) + 256, real=True)
    freqs = np.fft.rfftfreq(nfft, 1.0 / fs)
    bins = np.arange(freqs.size)
    weights = band_weights(freqs)
    fade_window = np.ones(early_len)
    ramp = (np.arange(fade) + 0.5) / max(fade, 1)
    fade_window[tail_offset:window_end] = np.cos(0.5 * np.pi * ramp)
    fade_window[window_end:] = 0.0

    filter_cache: dict[tuple[float, ...], ComplexArray | float] = {}

    def wall_filter(gains: FloatArray) -> ComplexArray | float:
        key = tuple(np.round(gains, _GAIN_DECIMALS))
        if key not in filter_cache:
            if np.ptp(gains) <= 10.0**-_GAIN_DECIMALS:
                filter_cache[key] = float(gains[0])
            else:
                filter_cache[key] = minimum_phase_spectrum(
                    gains @ weights, nfft, floor=_MIN_MAGNITUDE
                )
        return filter_cache[key]

    reflections_only = {int(i) for i in without_direct}
    early = np.zeros((len(speakers), 2, early_len))
    direct_energy = np.zeros(len(speakers))
    reflected_energy = np.zeros(len(speakers))
    per_speaker: list[dict[str, Any]] = []
    warnings: list[str] = []
    notes: list[str] = []
    max_path = (window_end + bulk) / fs * c
    uncovered_total = 0
    uncovered_worst = 0.0
    for i in active:
        images = image_sources(
            room, positions[i], order=int(n_order), reference_distance=r_ref, max_distance=max_path
        )
        groups: dict[tuple[Any, ...], list[int]] = {}
        for k in range(images.count):
            if k > 0 and (
                images.delays[k] * fs - bulk >= window_end
                or images.band_gains[k].max() < 10.0**-_GAIN_DECIMALS
            ):
                continue  # arrives after the crossfade, or a wall with absorption 1 took it
            key = tuple(np.round(images.band_gains[k], _GAIN_DECIMALS))
            groups.setdefault(key if k > 0 else ("direct",) + key, []).append(k)
        direct_spec = np.zeros((2, freqs.size), dtype=complex)
        reflected_spec = np.zeros((2, freqs.size), dtype=complex)
        uncovered = 0
        for key, members in groups.items():
            acc = np.zeros((2, freqs.size), dtype=complex)
            for k in members:
                pair = hset.pair(images.directions[k])
                if pair.method == "nearest":
                    uncovered += 1
                    uncovered_worst = max(uncovered_worst, pair.angular_error)
                delay = images.delays[k] * fs - bulk
                spec = np.fft.rfft(pair.ir, n=nfft, axis=-1)
                acc += images.spreading[k] * spec * np.exp(-2j * np.pi * bins * delay / nfft)
            acc *= wall_filter(images.band_gains[members[0]])
            if key[0] == "direct":
                direct_spec += acc
            else:
                reflected_spec += acc
        uncovered_total += uncovered
        direct = np.fft.irfft(direct_spec, n=nfft, axis=-1)[:, :early_len]
        reflected = np.fft.irfft(reflected_spec, n=nfft, axis=-1)[:, :early_len] * fade_window
        early[i] = reflected if i in reflections_only else direct + reflected
        direct_energy[i] = float(np.sum(direct**2))
        reflected_energy[i] = float(np.sum(reflected**2))
        used = sum(len(m) for key, m in groups.items() if key[0] != "direct")
        per_speaker.append(
            {
                "label": speakers[i].label,
                "distance_m": round(distances[i], 4),
                "position_m": [round(float(v), 4) for v in positions[i]],
                "direct_arrival_samples": round(arrival_direct[i], 3),
                "reflections": used,
                "image_sources_complete_until_ms": round(
                    (images.complete_distance - distances[i]) / c * 1e3, 3
                ),
            }
        )

    if uncovered_total:
        # Below the lowest measured elevation of a set (floor reflections under KEMAR's
        # -40 degrees) every room meets this: a property of the set, said as a note. Far
        # from any measurement (a sparse or horizontal-only set) it is a real problem.
        message = (
            f"{uncovered_total} early path(s) arrive from directions HRIR set {hset.name!r} "
            "does not cover (e.g. floor reflections below its lowest measurements); the "
            f"nearest measured directions were used, at most {uncovered_worst:.0f} degrees away"
        )
        (notes if uncovered_worst <= UNCOVERED_NOTE_DEG else warnings).append(message)
    seq = np.random.SeedSequence([int(seed), int(room.seed)])
    rng = np.random.Generator(np.random.PCG64(seq))
    diffuse = diffuse_field(hset, np.fft.rfftfreq(4096, 1.0 / fs))
    tail = late_tail(
        room,
        fs,
        (tail_offset + bulk) / fs,
        reference_distance=r_ref,
        diffuse=diffuse,
        rng=rng,
        crossfade_s=crossfade_s,
        max_seconds=max_tail_seconds,
    )
    tail_weights = np.array([0.0 if s.lfe else 1.0 for s in speakers])
    tail_energy = float(np.sum(tail**2))
    t_built = time.perf_counter()

    first = active[0]
    full = np.zeros((2, max(early_len, tail_offset + tail.shape[-1])))
    full[:, :early_len] = early[first]
    full[:, tail_offset : tail_offset + tail.shape[-1]] += tail
    measured = measure_rt60(full, fs)
    for entry, i in zip(per_speaker, active):
        rev = reflected_energy[i] + tail_energy
        entry["drr_db"] = round(10.0 * math.log10(direct_energy[i] / rev), 2) if rev > 0 else None

    report: dict[str, Any] = {
        "room": room.to_dict(),
        "samplerate": fs,
        "seed": int(seed),
        "order": int(n_order),
        "reference_distance_m": round(r_ref, 4),
        "bulk_delay_samples": bulk,
        "reference_arrival_samples": round(r_ref / c * fs - bulk, 3),
        "tail_offset_samples": tail_offset,
        "tail_offset_ms": round(tail_offset / fs * 1e3, 3),
        "mixing_time_ms": round(room.mixing_time * 1e3, 3),
        "crossfade_ms": round(fade / fs * 1e3, 3),
        "early_length": early_len,
        "tail_length": int(tail.shape[-1]),
        "rt60_requested_s": [round(float(t), 4) for t in room.rt60],
        "rt60_measured": {
            "what": f"whole response of {speakers[first].label!r}, both ears; Schroeder "
            "integration, ISO 3382-1 fits",
            "bands_hz": measured["bands_hz"],
            **{
                key: [None if v is None else round(v, 4) for v in measured[key]]
                for key in ("edt_s", "t20_s", "t30_s")
            },
        },
        "diffuse_field": diffuse.method,
        "coherence_at_bands": [
            round(float(np.interp(b, diffuse.freqs, diffuse.coherence)), 3) for b in BANDS_HZ
        ],
        "wall_filters": len(filter_cache),
        "speakers": per_speaker,
        "lfe": "rows left at zero, tail weight 0: the render adds its LFE path",
        "build_seconds": round(t_built - t_start, 3),
        "warnings": warnings,
        "notes": notes,
    }
    return RoomFilters(
        early=early,
        tail=tail,
        tail_offset=tail_offset,
        tail_weights=tail_weights,
        report=report,
        samplerate=fs,
    )
