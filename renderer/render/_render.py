"""One binaural render, from stem files to a two-channel file and its report.

:func:`plan_render` decides everything that does not need the audio (layout, channel
order, HRIR pair per loudspeaker, the filter bank); :func:`render` streams the stem
through the convolution engine into the output and returns the report.
"""

from __future__ import annotations

import contextlib
import os
import platform
import time
import uuid
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .. import __version__
from ..defaults import DEFAULT_LOUDNESS_LUFS, DEFAULT_TRUE_PEAK_DBTP, SPEED_OF_SOUND
from ..engine import DEFAULT_BLOCK_SIZE, BinauralConvolver, LfeOptions, lfe_filter
from ..eq import REFERENCE as CALIBRATION_REFERENCE
from ..eq import HeadphoneEq, calibration_gain, check_eq, equalised, load_headphone_eq
from ..errors import LayoutError, RenderCancelled, RendererError
from ..geometry import direction_to_vector, vector_to_direction
from ..hrtf import HrirSet, load_hrir_set, onset_times
from ..io import OutputWriter, StemInfo, StemReader, probe_stem, subtype_for
from ..layouts import (
    Layout,
    get_layout,
    labels_from_filenames,
    labels_from_mask,
    resolve_channel_order,
)
from ..loudness import DeliveryOptions, LoudnessMeter, channel_weights, deliver
from ..pipeline import BackgroundWriter, prefetch
from ..room import Room, build_room_filters, exact_brirs, get_room
from .plot_data import plot_section

#: Fraction of the progress bar given to the render pass; the delivery stage's pass over
#: the two-channel render takes the rest.
RENDER_PROGRESS_SHARE = 0.85

#: Room modes: the diffuse tail shared by all loudspeakers, or a whole response per loudspeaker.
ROOM_MODES = ("shared", "exact")

#: Low-frequency band (Hz) over which the set's level is read to place the LFE.
LFE_REFERENCE_BAND_HZ = (40.0, 120.0)


@dataclass(frozen=True)
class RenderSettings:
    """Everything a render depends on besides the stem.

    Attributes
    ----------
    layout : str or Layout
        Layout name (``earfold layouts``) or a JSON layout file.
    channel_order : sequence of str, optional
        Labels of the file channels in file order; overrides masks and file names.
    hrtf : str
        A shipped set's name (``earfold hrtf list``) or a SOFA file.
    lfe : LfeOptions
        How the LFE channel reaches the ears.
    subtype : str
        ``PCM_16`` (TPDF-dithered), ``PCM_24`` or ``FLOAT``.
    format : str, optional
        ``wav`` or ``flac``; from the output's extension when omitted.
    seed : int
        Seed of every random choice (dither, the room's tail), so a render is repeatable.
    block_size : int
        Frames per engine block.
    room : str, Room or None
        ``"none"``, a preset (``small``, ``medium``, ``large``) or a JSON room file.
    room_mode : str
        ``"shared"`` (the diffuse tail rendered once from a weighted sum of the channels)
        or ``"exact"`` (a full room response per loudspeaker; for comparison).
    loudness : float, "match" or None
        Integrated loudness target of the output in LUFS (default -23, EBU R128);
        ``"match"`` keeps the input stem's programme loudness (BS.1770, surround weights,
        LFE excluded; it costs a loudness pass over every input channel); None applies no
        gain.
    true_peak : float or None
        True-peak limiter ceiling in dBTP (default -1); None turns the limiter off (the
        report then says so).
    excerpt : (float, float) or None
        ``(start, length)`` in seconds: render only that window of the stem (cut to the
        stem's end); only those frames are read. None renders the whole stem.
    eq : str or None
        ``"diffuse-field"`` (the set's diffuse-field inverse on every HRIR) or ``"none"``;
        None (default) chooses diffuse-field for free-field sets and none for sets that
        already hold a room (measured BRIRs).
    headphone_eq : path, list or dict, optional
        Headphone compensation applied once to the two-channel output: a JSON band list
        file, an impulse response (WAV/FLAC), or the parsed band list itself
        (:mod:`earfold.renderer.eq.headphone`).
    """

    layout: str | Layout = "7.1.4"
    channel_order: Sequence[str] | None = None
    hrtf: str = ""
    lfe: LfeOptions = field(default_factory=LfeOptions)
    subtype: str = "PCM_24"
    format: str | None = None
    seed: int = 0
    block_size: int = DEFAULT_BLOCK_SIZE
    room: str | Room | None = "none"
    room_mode: str = "shared"
    loudness: float | str | None = DEFAULT_LOUDNESS_LUFS
    true_peak: float | None = DEFAULT_TRUE_PEAK_DBTP
    excerpt: tuple[float, float] | None = None
    eq: str | None = None
    headphone_eq: str | os.PathLike | list | dict | None = None


@dataclass(frozen=True)
class RenderPlan:
    """What a render will do, decided before any audio is read."""

    stem: StemInfo
    layout: Layout
    order: tuple[int, ...]  # file channel i feeds layout speaker order[i]
    order_source: str
    hrir_set: HrirSet
    filters: np.ndarray  # (C, 2, L) in file channel order
    speakers: tuple[dict, ...]
    warnings: tuple[str, ...]
    tail: np.ndarray | None = None  # (2, Lt): shared room tail, or None
    tail_weights: np.ndarray | None = None  # (C,) in file channel order
    tail_offset: int = 0
    room: dict | None = None  # the room's report section
    eq: dict | None = None  # the equalisation's report section
    calibration: dict | None = None  # the calibration's report section
    headphone: HeadphoneEq | None = None  # applied to the two-channel output

    @property
    def length(self) -> int:
        """Length of the whole response: output frames = input frames + length - 1."""
        n = self.filters.shape[-1]
        if self.tail is not None:
            n = max(n, self.tail_offset + self.tail.shape[-1])
        if self.headphone is not None:
            n += self.headphone.ir.shape[-1] - 1
        return n


def resolve_hrtf(name_or_path: str | os.PathLike | None) -> tuple[str, str]:
    """Path and display name of an HRTF set given by shipped name or file path."""
    from earfold.hrtf_sets import DEFAULT_SET, get_shipped

    value = os.fspath(name_or_path) if name_or_path else DEFAULT_SET
    if value.lower().endswith(".sofa") or os.sep in value or "/" in value:
        return value, Path(value).name
    shipped = get_shipped(value)
    return str(shipped.path), shipped.name


def _choose_order(
    stem: StemInfo, layout: Layout, channel_order: Sequence[str] | None
) -> tuple[tuple[int, ...], str, list[str]]:
    warnings: list[str] = []
    if stem.channels != layout.channels:
        raise LayoutError(
            f"the stem has {stem.channels} channel(s) but layout {layout.name!r} has "
            f"{layout.channels} ({', '.join(layout.labels)}); choose the layout the stem was "
            f"mixed for"
        )
    if channel_order:
        return resolve_channel_order(layout, list(channel_order)), "--channel-order", warnings
    if len(stem.paths) > 1:
        labels = labels_from_filenames(list(stem.paths))
        if labels is not None:
            try:
                return resolve_channel_order(layout, labels), "file names", warnings
            except LayoutError as exc:
                raise LayoutError(
                    f"the file names give the labels {', '.join(labels)}, which do not fit: "
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
            f"excerpt must have a start >= 0 and a length > 0 seconds, not {excerpt!r}"
        )
    if start_s >= stem.duration:
        raise RendererError(
            f"the excerpt starts at {start_s:g} s but the stem is only {stem.duration:.3f} s long"
        )
    return stem.window(round(start_s * stem.samplerate), max(1, round(length_s * stem.samplerate)))


def plan_render(inputs: Sequence[str | os.PathLike], settings: RenderSettings) -> RenderPlan:
    """Probe the stem and build the filter bank, validating everything up front."""
    stem = probe_stem(inputs)
    if settings.excerpt is not None:
        stem = _excerpt(stem, settings.excerpt)
    layout = settings.layout if isinstance(settings.layout, Layout) else get_layout(settings.layout)
    order, order_source, warnings = _choose_order(stem, layout, settings.channel_order)
    path, name = resolve_hrtf(settings.hrtf)
    hset = load_hrir_set(path, stem.samplerate, name=name)
    hset, eq_report = _equalise(hset, settings.eq, warnings)
    headphone = None
    if settings.headphone_eq is not None:
        headphone = load_headphone_eq(settings.headphone_eq, stem.samplerate)
        eq_report["headphone"] = headphone.report

    room, room_filters, room_report = None, None, None
    if settings.room_mode not in ROOM_MODES:
        raise RendererError(
            f"unknown room mode {settings.room_mode!r}; choose one of {', '.join(ROOM_MODES)}"
        )
    requested_room = get_room(settings.room)
    if requested_room is not None and _is_measured_room(hset):
        warnings.append(
            f"HRTF set {hset.name!r} already holds room responses (RoomType "
            f"{hset.room_type!r}); rendered as measured, the synthetic room "
            f"{requested_room.name!r} was not added"
        )
        room_report = {
            "synthetic": False,
            "measured_room": True,
            "room_type": hset.room_type,
            "requested": requested_room.name,
        }
    elif requested_room is not None:
        room = requested_room
        room_filters = build_room_filters(hset, layout, room, stem.samplerate, seed=settings.seed)
        room_report = {"synthetic": True, "mode": settings.room_mode, **room_filters.report}
        warnings.extend(f"room: {w}" for w in room_filters.report.get("warnings", []))
    elif _is_measured_room(hset):
        room_report = {"synthetic": False, "measured_room": True, "room_type": hset.room_type}

    # Without a room, optional loudspeaker distances act as in an uncalibrated room: the
    # farther loudspeakers arrive later and quieter (1/r), relative to the nearest. With a
    # room, the room model places each loudspeaker at its distance itself.
    distances = [s.distance for s in layout.speakers if s.distance and not s.lfe]
    near = min(distances) if distances and room is None else None
    lfe_gain, lfe_onset = _lfe_reference(hset) if layout.lfe_indices else (1.0, 0)
    if room_filters is not None:
        lfe_onset += int(round(room_filters.report["reference_arrival_samples"]))
    brirs = None
    if room_filters is not None and settings.room_mode == "exact":
        brirs = exact_brirs(room_filters)

    pairs: list[np.ndarray] = []
    speakers: list[dict] = []
    for channel, speaker_index in enumerate(order):
        spk = layout.speakers[speaker_index]
        entry: dict = {"channel": channel, "label": spk.label}
        if spk.lfe:
            ir = lfe_filter(stem.samplerate, settings.lfe, reference_gain=lfe_gain, delay=lfe_onset)
            entry.update(
                lfe=True,
                method="lfe",
                cutoff_hz=settings.lfe.cutoff_hz,
                gain_db=settings.lfe.gain_db,
            )
        else:
            pair = hset.pair(spk.vector)
            ir = pair.ir
            used_az, used_el = vector_to_direction(hset.directions[list(pair.neighbours)])
            entry.update(
                azimuth=spk.azimuth,
                elevation=spk.elevation,
                method=pair.method,
                measured=[
                    {
                        "azimuth": round(float(a), 3),
                        "elevation": round(float(e), 3),
                        "weight": round(w, 6),
                    }
                    for a, e, w in zip(np.atleast_1d(used_az), np.atleast_1d(used_el), pair.weights)
                ],
                angular_error_deg=round(pair.angular_error, 3),
            )
            if pair.warning:
                warnings.append(f"{spk.label}: {pair.warning}")
            if room_filters is not None:
                ir = (brirs if brirs is not None else room_filters.early)[speaker_index]
                entry["room"] = True
            elif spk.distance and near:
                delay = (spk.distance - near) / SPEED_OF_SOUND * stem.samplerate
                gain = near / spk.distance
                shift = int(round(delay))
                ir = np.concatenate([np.zeros((2, shift)), ir * gain], axis=1)
                entry.update(
                    distance_m=spk.distance,
                    delay_samples=shift,
                    distance_gain_db=round(20 * np.log10(gain), 3),
                )
        pairs.append(ir)
        speakers.append(entry)

    length = max(p.shape[-1] for p in pairs)
    filters = np.zeros((len(pairs), 2, length), dtype=np.float64)
    for i, p in enumerate(pairs):
        filters[i, :, : p.shape[-1]] = p
    tail = tail_weights = None
    tail_offset = 0
    if room_filters is not None and brirs is None:
        tail = room_filters.tail
        tail_weights = np.asarray(room_filters.tail_weights)[list(order)]
        tail_offset = int(room_filters.tail_offset)
    gain = _calibrate(filters, speakers, tail, tail_weights, tail_offset, stem.samplerate)
    filters *= gain
    if tail is not None:
        tail = tail * gain
    calibration = {
        "gain_db": round(float(20 * np.log10(gain)), 3),
        "reference": CALIBRATION_REFERENCE,
        "applied": "to every filter, before the delivery stage",
    }
    return RenderPlan(
        stem,
        layout,
        order,
        order_source,
        hset,
        filters,
        tuple(speakers),
        tuple(warnings),
        tail,
        tail_weights,
        tail_offset,
        room_report,
        eq_report,
        calibration,
        headphone,
    )


def _equalise(hset: HrirSet, choice: str | None, warnings: list[str]) -> tuple[HrirSet, dict]:
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
    report: dict = {"type": choice, "chosen": reason, "diffuse_field": None, "headphone": None}
    if choice == "diffuse-field":
        hset, summary = equalised(hset)
        report["diffuse_field"] = summary
        if summary.get("boost_limited"):
            warnings.append(
                f"HRTF set {hset.name!r}: the diffuse-field inverse reached its boost limit "
                f"({summary['max_boost_db']:g} dB); the deepest dips are only partly filled"
            )
    return hset, report


def _calibrate(
    filters: np.ndarray,
    speakers: Sequence[dict],
    tail: np.ndarray | None,
    tail_weights: np.ndarray | None,
    tail_offset: int,
    samplerate: float,
) -> float:
    """The calibration gain (:mod:`earfold.renderer.eq.calibration`) of a filter bank."""
    mains = [i for i, s in enumerate(speakers) if not s.get("lfe")]

    def responses():
        for i in mains:
            r = filters[i]
            if tail is not None:
                n = max(r.shape[-1], tail_offset + tail.shape[-1])
                full = np.zeros((2, n))
                full[:, : r.shape[-1]] = r
                full[:, tail_offset : tail_offset + tail.shape[-1]] += tail_weights[i] * tail
                r = full
            yield r

    return calibration_gain(responses(), len(mains), samplerate)


def _is_measured_room(hset: HrirSet) -> bool:
    """Does the set already hold room responses (a reverberant RoomType or a BRIR convention)?"""
    room_type = (hset.room_type or "").lower().replace("-", " ")
    return (
        room_type not in ("", "free field", "freefield", "anechoic")
        or "brir" in hset.convention.lower()
    )


#: Frames per call of the shared tail's convolver (rounded up to a power of two, and at
#: least the engine block). The
#: tail (a whole second or more of the large room) costs ``length / block`` spectral
#: multiply-adds per frame in a uniformly partitioned engine: at the engine's 8192 frames,
#: 16 partitions for the large room. 32768 frames cut that to 4 at a little more FFT
#: work; measured on the 128801-frame large-room tail, one minute of 48 kHz mono into
#: two ears: 0.173 s at 8192, 0.150 at 16384, 0.121 at 32768, 0.136 at 65536.
TAIL_BLOCK_FRAMES = 32768


class _Engine:
    """The per-channel convolution plus, with a room, the shared tail path.

    The tail path mixes the channels with the plan's tail weights, delays the mix by the
    tail offset (a FIFO: cheaper than leading zeros in the tail filter, which would cost
    whole zero partitions) and convolves it with the two-ear tail in chunks of
    :data:`TAIL_BLOCK_FRAMES`, on a second thread. The direct output waits in a queue
    until the tail of the same frames is ready, so :meth:`process` returns what is
    complete (possibly nothing) and :meth:`tail_blocks` returns the rest: in all, exactly
    the frames of a whole convolution, in order.
    """

    def __init__(self, plan: RenderPlan, block_size: int) -> None:
        self.direct = BinauralConvolver(plan.filters, block_size=block_size)
        self.block_size = self.direct.block_size
        self.channels = plan.filters.shape[0]
        self.tail = None
        # Headphone compensation: once, on the two-channel output (each ear to itself).
        self.headphone = (
            None
            if plan.headphone is None
            else BinauralConvolver(plan.headphone.filters(), block_size=block_size)
        )
        if plan.tail is not None:
            # A power of two (the convolver's rule) and so a whole number of engine blocks.
            chunk = max(self.block_size, 1 << max(0, int(TAIL_BLOCK_FRAMES) - 1).bit_length())
            self.tail = BinauralConvolver(plan.tail[None], block_size=chunk)
            self.weights = np.asarray(plan.tail_weights, dtype=np.float32)
            self.fifo = np.zeros(plan.tail_offset, dtype=np.float32)
            self._mix: list[np.ndarray] = []  # tail input not yet handed to the thread
            self._mix_frames = 0
            self._direct: list[np.ndarray] = []  # direct output waiting for its tail
            self._direct_frames = 0
            self._tail_ready = np.zeros((0, 2), dtype=np.float32)
            self._pending = None  # the tail chunk being convolved
            self._pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="earfold-tail")

    def process(self, block: np.ndarray) -> np.ndarray:
        out = self._binaural(block)
        return out if self.headphone is None else self.headphone.process(out)

    def _binaural(self, block: np.ndarray) -> np.ndarray:
        if self.tail is None:
            return self.direct.process(block)
        n = len(block)
        mono = np.concatenate([self.fifo, block @ self.weights])
        self.fifo = mono[n:]
        self._mix.append(mono[:n])
        self._mix_frames += n
        if self._mix_frames >= self.tail.block_size:
            self._submit_tail()
        # The direct part runs here while the thread convolves the last full tail chunk:
        # both are FFTs and array arithmetic that release the GIL.
        out = self.direct.process(block)
        self._direct.append(out)
        self._direct_frames += len(out)
        return self._take(min(self._direct_frames, len(self._tail_ready)))

    def _submit_tail(self) -> None:
        """Hand the next tail chunk (zero-padded at the end of the stream) to the thread."""
        mix = np.concatenate(self._mix)
        size = self.tail.block_size
        chunk = mix[:size]
        if len(chunk) < size:
            chunk = np.concatenate([chunk, np.zeros(size - len(chunk), dtype=np.float32)])
        self._mix = [mix[size:]]
        self._mix_frames = max(0, len(mix) - size)
        self._collect_tail()
        self._pending = self._pool.submit(self.tail.process, chunk[:, None])

    def _collect_tail(self) -> None:
        if self._pending is not None:
            self._tail_ready = np.concatenate([self._tail_ready, self._pending.result()])
            self._pending = None

    def _take(self, frames: int) -> np.ndarray:
        """Sum and return the first ``frames`` of the waiting direct output and tail."""
        if frames == 0:
            return np.zeros((0, 2), dtype=np.float32)
        direct = np.concatenate(self._direct) if len(self._direct) > 1 else self._direct[0]
        out = direct[:frames] + self._tail_ready[:frames]
        self._direct = [direct[frames:]]
        self._direct_frames -= frames
        self._tail_ready = self._tail_ready[frames:]
        return out

    def close(self) -> None:
        if self.tail is not None:
            self._pool.shutdown(wait=True)

    def tail_blocks(self, frames: int):
        """The remaining ``frames`` of output after the last input (zeros pushed through)."""
        zeros = np.zeros((self.block_size, self.channels), dtype=np.float32)
        pushed = frames
        while pushed > 0:
            n = min(pushed, self.block_size)
            out = self.process(zeros[:n])
            if len(out):
                yield out
            pushed -= n
        if self.tail is None:
            return
        # What is still waiting: the last tail chunks. Past the whole convolution's
        # length the tail is zero, so a padded last chunk is cut to the direct output.
        while len(self._tail_ready) < self._direct_frames:
            if self._pending is None:
                self._submit_tail()
            self._collect_tail()
        out = self._take(self._direct_frames)
        if self.headphone is not None:
            out = self.headphone.process(out)
        if len(out):
            yield out

    def describe(self) -> dict:
        info = {
            "block_size": self.block_size,
            "partitions": self.direct.partitions,
            "filter_length": self.direct.filter_length,
        }
        if self.headphone is not None:
            info["headphone_eq"] = {
                "length": self.headphone.filter_length,
                "partitions": self.headphone.partitions,
            }
        if self.tail is not None:
            info["shared_tail"] = {
                "length": self.tail.filter_length,
                "block_size": self.tail.block_size,
                "partitions": self.tail.partitions,
                "offset": len(self.fifo),
            }
        return info


_METER_BATCH = 262144
# Frames the output meter takes at once in the writer thread (5.5 s at 48 kHz, 2 MB of
# stereo float32). Measured on a 60 s 7.1.4 render on two cores: metering the engine's
# 8192-frame blocks one by one added about 0.25 s, batches of 65536 about 0.1 s, of
# 262144 about 0.04 s.


def _stream(
    plan: RenderPlan,
    settings: RenderSettings,
    path: Path,
    *,
    subtype: str,
    fmt: str | None,
    progress,
    cancelled,
    meter_input: bool,
    meter_output: bool,
    scratch: bool = False,
) -> dict:
    """Stream the stem through the engine into ``path``; meter input and output on the way.

    The input meter runs in the reader thread and the output meter in the writer thread,
    so on two cores they add little to the render's time.
    """
    stem = plan.stem
    engine = _Engine(plan, settings.block_size)
    total = stem.frames + plan.length - 1
    input_meter = None
    if meter_input:
        weights = channel_weights(plan.layout)[list(plan.order)]
        input_meter = LoudnessMeter(stem.samplerate, stem.channels, weights)
    # The delivery stage takes the render's loudness and true peak from here: with the
    # true peak known, its limiter need not interpolate a render that cannot reach the
    # ceiling (earfold.renderer.loudness.limiter, known_true_peak). The meter runs on the writer thread,
    # beside the engine.
    output_meter = LoudnessMeter(stem.samplerate, 2) if meter_output else None
    state = {"done": 0, "peak": 0.0}

    def metered(blocks):
        for block in blocks:
            if input_meter is not None:
                input_meter.process(block)
            yield block

    # The output meter takes the engine's blocks in batches of about _METER_BATCH frames:
    # its cost per call is large next to an engine block, and the engine hands over new
    # arrays every time, so holding some is safe.
    batch: list[np.ndarray] = []

    def meter_batch() -> None:
        if batch:
            output_meter.process(batch[0] if len(batch) == 1 else np.concatenate(batch))
            batch.clear()

    def write(block: np.ndarray) -> None:
        if output_meter is not None:
            batch.append(block)
            if sum(len(b) for b in batch) >= _METER_BATCH:
                meter_batch()
        writer.write(block)

    def emit(block: np.ndarray) -> None:
        background.submit(block)
        if block.size:
            state["peak"] = max(state["peak"], float(np.max(np.abs(block))))
        state["done"] += len(block)
        if progress is not None:
            progress(min(state["done"] / total, 1.0))

    with (
        contextlib.closing(engine),
        StemReader(stem) as reader,
        OutputWriter(
            path,
            stem.samplerate,
            2,
            format=fmt,
            subtype=subtype,
            frames_hint=total,
            seed=settings.seed,
            durable=not scratch,
        ) as writer,
    ):
        # Reading, convolving and writing overlap (earfold.renderer.pipeline); the writer thread
        # is drained before the output file is closed and renamed.
        with BackgroundWriter(write) as background:
            for block in prefetch(metered(reader.blocks(engine.block_size))):
                if cancelled is not None and cancelled():
                    raise RenderCancelled("render cancelled")
                emit(engine.process(block))
            for block in engine.tail_blocks(plan.length - 1):
                if cancelled is not None and cancelled():
                    raise RenderCancelled("render cancelled")
                emit(block)
        if output_meter is not None:
            meter_batch()
        clipped = writer.clipped_samples
        out_format = writer.format
    return {
        "frames": state["done"],
        "peak": state["peak"],
        "clipped": clipped,
        "format": out_format,
        "engine": engine.describe(),
        "input_loudness": None if input_meter is None else input_meter.result().integrated_lufs,
        "render_meter": output_meter,
    }


def render(
    inputs: Sequence[str | os.PathLike],
    output: str | os.PathLike,
    settings: RenderSettings,
    *,
    progress: Callable[[float], None] | None = None,
    cancelled: Callable[[], bool] | None = None,
) -> dict:
    """Render a stem to a binaural file and return the report.

    Parameters
    ----------
    inputs : sequence of path
        One multichannel file, or several mono files.
    output : path
        The output file; written under a temporary name and renamed when complete.
    settings : RenderSettings
        Layout, channel order, HRTF set, LFE, output format.
    progress : callable, optional
        Called with the fraction done (0 to 1) as blocks are written.
    cancelled : callable, optional
        Polled once per block; when it returns True the render stops, leaves no output
        and raises :class:`RenderCancelled`.
    """
    t0 = time.perf_counter()
    subtype = subtype_for(settings.subtype)
    options = DeliveryOptions(loudness=settings.loudness, true_peak=settings.true_peak)
    plan = plan_render(inputs, settings)
    t_plan = time.perf_counter()
    stem = plan.stem
    out_path = Path(output)
    direct = options.loudness is None and options.true_peak is None
    # With a delivery stage the engine writes a float32 render beside the output, which
    # the stage reads back (gain, limiter, dither, final subtype) and then removes.
    temp = (
        out_path
        if direct
        else out_path.with_name(f".{out_path.name}.{uuid.uuid4().hex[:8]}.render.wav")
    )
    share = 1.0 if direct else RENDER_PROGRESS_SHARE
    try:
        streamed = _stream(
            plan,
            settings,
            temp,
            subtype=subtype if direct else "FLOAT",
            fmt=settings.format if direct else "wav",
            progress=None if progress is None else (lambda f: progress(share * f)),
            cancelled=cancelled,
            meter_input=options.loudness == "match",
            meter_output=not direct,
            scratch=not direct,
        )
        t_render = time.perf_counter()
        delivery = None
        if not direct:
            delivery = deliver(
                temp,
                out_path,
                options,
                input_loudness=streamed["input_loudness"],
                subtype=subtype,
                format=settings.format,
                seed=settings.seed,
                progress=None
                if progress is None
                else (lambda f: progress(share + (1 - share) * f)),
                cancelled=cancelled,
                render_meter=streamed["render_meter"],
            )
    finally:
        if not direct:
            temp.unlink(missing_ok=True)
    t_end = time.perf_counter()

    warnings = list(stem.warnings) + list(plan.warnings)
    if delivery is not None:
        warnings.extend(delivery["warnings"])
        clipped = delivery["clipped_samples"]
        out_format = delivery["output"]["format"]
        peak_dbfs = delivery["output"].get("sample_peak_dbfs")
    else:
        clipped = streamed["clipped"]
        out_format = streamed["format"]
        peak = streamed["peak"]
        peak_dbfs = round(20 * np.log10(peak), 2) if peak > 0 else None
        warnings.append(
            "the true-peak limiter is off and no loudness target is set: the output keeps the "
            "render's level, peaks included"
        )
        if clipped:
            warnings.append(
                f"{clipped} output samples exceeded full scale and were clipped; lower the "
                "stem's level, set a loudness target, or write FLOAT"
            )
    done = streamed["frames"]
    duration = stem.frames / stem.samplerate
    hset = plan.hrir_set
    return {
        "earfold_version": __version__,
        "created": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "input": {
            "files": [Path(p).name for p in stem.paths],
            "format": stem.format,
            "subtype": stem.subtype,
            "samplerate": stem.samplerate,
            "channels": stem.channels,
            "frames": stem.frames,
            "duration_s": round(duration, 6),
            "channel_mask": None if stem.channel_mask is None else f"0x{stem.channel_mask:X}",
            "excerpt_start_s": round(stem.start / stem.samplerate, 6) if stem.start else None,
        },
        "layout": plan.layout.to_dict(),
        "channel_order": {
            "labels": [plan.layout.speakers[i].label for i in plan.order],
            "source": plan.order_source,
        },
        "hrtf": {
            "name": hset.name,
            "file": Path(hset.source).name,
            "sha256": hset.sha256,
            "convention": hset.convention,
            "measurements": hset.measurements,
            "samplerate": hset.samplerate,
            "taps": hset.taps,
        },
        "speakers": list(plan.speakers),
        "lfe": {
            "cutoff_hz": settings.lfe.cutoff_hz,
            "gain_db": settings.lfe.gain_db,
            "order": settings.lfe.order,
        },
        "output": {
            "file": Path(output).name,
            "format": out_format,
            "subtype": subtype,
            "samplerate": stem.samplerate,
            "channels": 2,
            "frames": done,
            "filter_length": plan.length,
            "peak_dbfs": peak_dbfs,
            "clipped_samples": clipped,
            "dither": "TPDF" if subtype == "PCM_16" else None,
            "seed": settings.seed,
        },
        "engine": streamed["engine"],
        "delivery": delivery,
        "room": plan.room,
        "eq": plan.eq,
        "calibration": plan.calibration,
        "timings_s": {
            "plan": round(t_plan - t0, 4),
            "render": round(t_render - t_plan, 4),
            "delivery": round(t_end - t_render, 4),
            "total": round(t_end - t0, 4),
            "x_real_time": round(duration / max(t_end - t_plan, 1e-9), 1),
        },
        "platform": {"python": platform.python_version(), "machine": platform.machine()},
        "plots": plot_section(plan, out_path, delivery),
        "warnings": warnings,
    }
