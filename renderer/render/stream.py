"""The render's streaming pass: the stem through the engine into a file, metered on the way."""

from __future__ import annotations

import contextlib
import math
from collections.abc import Callable, Iterable, Iterator
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..engine import FoldEngine, MovingSourceEngine, PanningMixer
from ..errors import AudioError, RenderCancelled
from ..io import OutputWriter, StemReader
from ..loudness import LoudnessMeter, channel_weights
from ..pipeline import BackgroundWriter, prefetch
from .plan import RenderPlan

__all__ = ["HOT_INPUT_SCALE", "EngineOverflow", "engine_for", "stream"]


def engine_for(plan: RenderPlan, block_size: int) -> FoldEngine | ObjectsEngine:
    """The engine of ``plan``: its filter bank, shared tail and headphone EQ, and for an
    ADM master with objects the moving-source engine beside it (:class:`ObjectsEngine`)."""
    if plan.objects is not None:
        return ObjectsEngine(plan, block_size)
    return FoldEngine(
        plan.filters,
        block_size,
        tail=plan.tail,
        tail_weights=plan.tail_weights,
        tail_offset=plan.tail_offset,
        headphone=None if plan.headphone is None else plan.headphone.filters(),
    )


class ObjectsEngine:
    """An ADM master's engine (:mod:`.adm_plan`): one fixed bank (:class:`FoldEngine`,
    with the room's shared tail) on the bed and HOA tracks, on the bus the objects' mixers
    feed (:class:`~earfold.renderer.engine.PanningMixer`: the spread array, the room's
    reflection array, the diffuse and tail channels) and on the two ears of the moving
    engine that follows the other objects with their own pairs
    (:func:`~earfold.renderer.render.moving_sources.moving_source_engine`).

    The moving engine's ears enter the fixed engine as two more channels, filtered there
    by the set's equalisation (the moving engine's post filter, or a unit impulse for a
    set without one) delayed to the room's direct arrival: one convolver does the bed's
    work and the objects' equalisation together, instead of a second two-channel
    convolver behind the moving engine and a buffer that held the moving output until
    the fixed output of the same frames came (measured with a 7.1.4 bed and 16 objects:
    1.13 s of engine time per minute of audio against 1.18 s). Blocks are whole batches
    of the moving engine's hops. After the input, the moving engine's tail enters the
    fixed engine, then zeros: the output ends ``frames`` after the input, as for any
    engine. Bed and HOA tracks with a time span are silent outside it.
    """

    def __init__(self, plan: RenderPlan, block_size: int) -> None:
        objects, hset = plan.objects, plan.hrir_set
        assert objects is not None and hset is not None
        self.object_channels = list(objects.channels)
        taken = set(objects.channels) | {c for mix in objects.mixes for c in mix.channels}
        self.fixed_channels = [c for c in range(plan.stem.channels) if c not in taken]
        banks = [plan.filters[self.fixed_channels]]
        weights = [
            np.zeros(len(self.fixed_channels))
            if plan.tail_weights is None
            else plan.tail_weights[self.fixed_channels]
        ]
        rate = plan.stem.samplerate
        self.mixers = [
            (list(mix.channels), mix.first, PanningMixer(mix.paths, mix.gains(), rate))
            for mix in objects.mixes
        ]
        self._bus = 0
        if objects.bus_filters is not None:
            self._bus = int(objects.bus_filters.shape[0])
            banks.append(objects.bus_filters)
            weights.append(
                np.zeros(self._bus)
                if objects.bus_tail_weights is None
                else objects.bus_tail_weights
            )
        self.moving: MovingSourceEngine | None = None
        self.post_length = 0
        self.block_size = block_size
        if self.object_channels:
            from .moving_sources import moving_post_filter, moving_source_engine

            self.moving = moving_source_engine(hset, objects.paths, gain=objects.gain, post=False)
            post = moving_post_filter(hset)
            eq = np.ones((2, 1)) if post is None else np.atleast_2d(post) * np.ones((2, 1))
            delay = objects.moving_delay
            ears = np.zeros((2, 2, delay + eq.shape[-1]))
            ears[0, 0, delay:] = eq[0]  # the left ear's sum to the left ear
            ears[1, 1, delay:] = eq[1]
            self.post_length = 0 if post is None else int(eq.shape[-1])
            banks.append(ears)
            weights.append(np.zeros(2))
            # Blocks of whole batches of the moving engine's hops (7680 frames for 8192 at
            # 48 kHz): the fixed engine takes blocks of any length.
            batch = self.moving.batch_frames
            self.block_size = max(batch, block_size // batch * batch)
        longest = max(b.shape[-1] for b in banks)
        filters = np.concatenate([_padded(b, longest) for b in banks])
        if not len(filters):
            filters = np.zeros((1, 2, 1), dtype=np.float64)
            weights = [np.zeros(1)]
        self.fixed = FoldEngine(
            filters,
            block_size,
            tail=plan.tail,
            tail_weights=None if plan.tail is None else np.concatenate(weights),
            tail_offset=plan.tail_offset,
        )
        self._inputs = max(1, len(filters))
        self._gates = [
            (self.fixed_channels.index(span.track), span.start, span.end)
            for span in objects.spans
            if span.track in self.fixed_channels
        ]
        self._frame = 0

    def _joined(self, block: NDArray[Any] | None, ears: NDArray[Any] | None, n: int) -> Any:
        """The fixed engine's input for ``n`` frames: the bed and HOA tracks (gated by their
        spans), the bus the mixers feed, then the moving engine's two ears."""
        out = np.zeros((n, self._inputs), dtype=np.float32)
        fixed = len(self.fixed_channels)
        if block is not None:
            if fixed:
                out[:, :fixed] = block[:, self.fixed_channels]
                frames = self._frame + np.arange(n)
                for column, start, end in self._gates:
                    outside = (frames < start) | ((frames >= end) if end >= 0 else False)
                    out[outside, column] = 0.0
            for channels, first, mixer in self.mixers:
                at = fixed + first
                out[:, at : at + mixer.channels] += mixer.process(block[:, channels])
            self._frame += n
        if ears is not None:
            out[:, fixed + self._bus : fixed + self._bus + 2] = ears
        return out

    def process(self, block: NDArray[Any]) -> NDArray[Any]:
        """The output frames complete after ``block`` (``(n, 2)``, possibly fewer)."""
        ears = None if self.moving is None else self.moving.process(block[:, self.object_channels])
        return self.fixed.process(self._joined(block, ears, len(block)))

    def tail_blocks(self, frames: int) -> Iterator[NDArray[Any]]:
        """The remaining output after the last input (``frames`` zero frames pushed)."""
        pushed = 0
        if self.moving is not None:
            for ears in self.moving.flush():  # the moving engine's own tail: L - 1 frames
                pushed += len(ears)
                out = self.fixed.process(self._joined(None, ears, len(ears)))
                if len(out):
                    yield out
        yield from self.fixed.tail_blocks(frames - pushed)

    def close(self) -> None:
        """Stop the fixed engine's threads."""
        self.fixed.close()

    def describe(self) -> dict[str, Any]:
        """The report's ``engine`` section, with the object engines' figures."""
        out: dict[str, Any] = dict(self.fixed.describe())
        if self.moving is not None:
            out["objects"] = {
                "sources": self.moving.sources,
                "update_frames": self.moving.hop,
                "filter_length": self.moving.filter_length,
                "transform_size": self.moving.transform_size,
                "post_filter_length": self.post_length,
            }
        if self.mixers:
            out["object_mixes"] = [
                {"sources": mixer.sources, "first": first, "channels": mixer.channels}
                for _, first, mixer in self.mixers
            ]
        return out


def _padded(bank: NDArray[Any], length: int) -> NDArray[Any]:
    """``bank`` ``(C, 2, L)`` zero-padded to ``length`` taps."""
    if bank.shape[-1] >= length:
        return bank
    out = np.zeros((*bank.shape[:-1], length), dtype=bank.dtype)
    out[..., : bank.shape[-1]] = bank
    return out


_METER_BATCH = 262144
# Frames the output meter takes at once in the writer thread (5.5 s at 48 kHz, 2 MB of
# stereo float32). Measured on a 60 s 7.1.4 render on two cores: metering the engine's
# 8192-frame blocks one by one added about 0.25 s, batches of 65536 about 0.1 s, of
# 262144 about 0.04 s.

_READ_FRAMES = 65536
# Frames per read of the stem (1.4 s at 48 kHz; 3 MB for 12 channels), handed to the
# engine in blocks of its own size (its output does not depend on them). Every hand-over
# between threads costs Python calls and lock traffic: measured on a 600 s 5.1 render with the
# large room, reading in the engine's 8192-frame blocks with two-deep queues left one of
# two cores idle a third of the time.

_QUEUE_BLOCKS = 3
# Blocks held between two threads of the render pass: enough that a thread that is
# briefly slower (the meter on a batch, the tail on a chunk) does not stall the others.


HOT_INPUT_SCALE = 2.0**-64
"""Exact input scale (-385.3 dB) of a render retried after the engine overflowed.

The float32 engine overflows for stems peaking above about 1e33 (its FFT sums thousands
of products). Scaled by 2**-64, the largest float32 (3.4e38) becomes 1.8e19, far inside
its range, while a sample 385 dB under the peak stays a normal float32: the render is
the same audio, exactly scaled (a power of two changes no mantissa), and the delivery
stage's loudness gain undoes the scale."""


class EngineOverflow(AudioError):
    """The engine's float32 arithmetic overflowed: the stem is too hot to render as is."""


_OVERFLOW = (
    "the render overflowed: the input's level is too high for the engine's float32 "
    "arithmetic (sample levels above about 1e33, +660 dBFS); scale the stem down, or "
    "render with a loudness target so that it is scaled for you"
)


def stream(
    plan: RenderPlan,
    path: Path,
    *,
    block_size: int,
    seed: int,
    subtype: str,
    fmt: str | None,
    progress: Callable[[float], None] | None,
    cancelled: Callable[[], bool] | None,
    meter_input: bool,
    meter_output: bool,
    scratch: bool = False,
    input_scale: float = 1.0,
) -> dict[str, Any]:
    """Stream the stem through the engine into ``path``; meter input and output on the way.

    The input meter runs in the reader thread and the output meter in a thread of its
    own beside the writer's, so on two cores they add little to the render's time.
    ``input_scale`` (a power of two, :data:`HOT_INPUT_SCALE`) scales every input block
    before it is metered and rendered; :class:`EngineOverflow` says the engine overflowed.
    """
    stem = plan.stem
    engine = engine_for(plan, block_size)
    total = stem.frames + plan.length - 1
    input_meter: LoudnessMeter | None = None
    if meter_input:
        weights = channel_weights(plan.layout)[list(plan.order)]
        input_meter = LoudnessMeter(stem.samplerate, stem.channels, weights)
    # The delivery stage takes the render's loudness and true peak from here: with the
    # true peak known, its limiter need not interpolate a render that cannot reach the
    # ceiling (earfold.renderer.loudness.limiter, known_true_peak). The meter runs on a
    # thread of its own, beside the engine and the writer.
    output_meter = LoudnessMeter(stem.samplerate, 2) if meter_output else None
    state: dict[str, Any] = {"done": 0, "peak": 0.0}

    def metered(blocks: Iterable[NDArray[np.float32]]) -> Iterator[NDArray[np.float32]]:
        for block in blocks:
            if input_scale != 1.0:
                block = block * np.float32(input_scale)
            if input_meter is not None:
                input_meter.process(block)
            yield block

    # The output meter runs on a thread of its own and takes the engine's blocks in
    # batches of about _METER_BATCH frames: its cost per call is large next to an engine
    # block, and the engine hands over new arrays every time, so holding some is safe.
    batch: list[NDArray[np.floating[Any]]] = []
    batched = [0]

    def meter_batch() -> None:
        if batch and output_meter is not None:
            output_meter.process(batch[0] if len(batch) == 1 else np.concatenate(batch))
            batch.clear()
            batched[0] = 0

    def meter(block: NDArray[np.floating[Any]]) -> None:
        batch.append(block)
        batched[0] += len(block)
        if batched[0] >= _METER_BATCH:
            meter_batch()

    def emit(block: NDArray[np.floating[Any]]) -> None:
        if block.size:
            # The peak without a temporary array: max and min propagate NaN and show
            # infinities.
            peak = max(float(np.max(block)), -float(np.min(block)))
            if not math.isfinite(peak):
                raise EngineOverflow(_OVERFLOW)
            state["peak"] = max(state["peak"], peak)
            if metering is not None:
                metering.submit(block)
            writing.submit(block)
        state["done"] += len(block)
        if progress is not None:
            progress(min(state["done"] / total, 1.0))

    with (
        contextlib.closing(engine),
        StemReader(stem, labels=[plan.layout.labels[i] for i in plan.order]) as reader,
        OutputWriter(
            path,
            stem.samplerate,
            2,
            format=fmt,
            subtype=subtype,
            frames_hint=total,
            seed=seed,
            durable=not scratch,
        ) as writer,
    ):
        # Reading, convolving (the shared tail on a thread of the engine's own), metering
        # and writing overlap (earfold.renderer.pipeline); the writer and the meter are
        # drained before the output file is closed and renamed, and before the meter is
        # read.
        with contextlib.ExitStack() as threads:
            writing = threads.enter_context(BackgroundWriter(writer.write, _QUEUE_BLOCKS))
            metering = (
                None
                if output_meter is None
                else threads.enter_context(BackgroundWriter(meter, _QUEUE_BLOCKS))
            )
            step = engine.block_size
            # The reader fills the queue and one more block while this thread holds
            # one: each read block is a view of one of QUEUE + 3 buffers, overwritten only
            # after the engine has taken it (the input scale, when there is one, makes
            # new arrays; the engine copies what it keeps).
            blocks = reader.blocks(
                max(step, _READ_FRAMES // step * step), reuse=True, buffers=_QUEUE_BLOCKS + 3
            )
            for block in prefetch(metered(blocks), _QUEUE_BLOCKS):
                if cancelled is not None and cancelled():
                    raise RenderCancelled("render cancelled")
                # The engine takes the read in blocks of its own size: a block of a few
                # hundred kB stays in the cache while it is transposed into the
                # engine's window (the whole read, several MB, made the engine 1.3-1.8
                # times slower).
                for first in range(0, len(block), step):
                    emit(engine.process(block[first : first + step]))
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
