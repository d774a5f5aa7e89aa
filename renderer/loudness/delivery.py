"""The delivery stage: loudness-normalise a finished render, limit its true peak, write it.

:func:`deliver` reads the float32 render twice. Pass 1 measures it (BS.1770-4 /
EBU R 128, :class:`~earfold.renderer.loudness.LoudnessMeter`); a render made by
:func:`earfold.renderer.render.render` was measured while it was written, and then pass 1
is skipped. The gain is then ``target - measured`` (or the input stem's loudness minus the
measured one for ``"match"``, or 0 for ``None``). Pass 2 applies the gain, the true-peak
limiter (:mod:`earfold.renderer.loudness.limiter`) unless it is off, meters the result and
writes it with :class:`earfold.renderer.io.OutputWriter` (TPDF dither at 16 bits, atomic
rename). The render's true peak plus the gain tells the limiter beforehand whether
anything can reach the ceiling; if not, it passes the render through without
interpolating it (the same samples it would emit otherwise), and the output, the render
times the gain, is not metered again: its figures are the render's meter read with the
gain (:meth:`earfold.renderer.loudness.LoudnessMeter.result`). The report section it
returns says what was done and what came out.
"""

from __future__ import annotations

import contextlib
import math
import os
from collections.abc import Callable
from dataclasses import replace
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..errors import DeliveryError, RenderCancelled
from ..pipeline import BackgroundWriter, prefetch
from ._levels import round_or_none
from ._meter import LoudnessMeter
from ._targets import MATCH, DeliveryOptions
from .limiter import TruePeakLimiter

__all__ = [
    "DELIVERY_BLOCK_FRAMES",
    "HEAVY_LIMITING_DB",
    "deliver",
]

DELIVERY_BLOCK_FRAMES = 65536
"""Frames per read in both passes (1.4 s at 48 kHz: large enough that per-block
overhead vanishes, small enough that memory stays a few MB)."""

HEAVY_LIMITING_DB = 6.0
"""Gain reduction beyond which the report warns that the target may be unreasonable for
the material (the limiter is then shaping the sound, not catching overs)."""

_NO_CLIP_DBFS = -0.01
# A render whose sample peak after the gain stays under this cannot clip or saturate in
# any output subtype (PCM_16 dither adds at most 1 LSB, -90 dB), so its output is the
# render times the gain.
_PASS1_SHARE = 0.3  # share of the progress bar for the measuring pass (no writing)


def deliver(
    temp_path: str | os.PathLike[str],
    output_path: str | os.PathLike[str],
    options: DeliveryOptions,
    *,
    input_loudness: float | None,
    subtype: str = "PCM_24",
    format: str | None = None,
    seed: int = 0,
    progress: Callable[[float], None] | None = None,
    cancelled: Callable[[], bool] | None = None,
    render_meter: LoudnessMeter | None = None,
    observe: Callable[[NDArray[Any], Callable[[NDArray[Any]], NDArray[np.float32]]], None]
    | None = None,
) -> dict[str, Any]:
    """Normalise, limit and write a render; return the report's delivery section.

    Parameters
    ----------
    temp_path : path-like
        The float render (any channel count; a binaural render has two). Only read.
    render_meter : LoudnessMeter, optional
        The meter that measured ``temp_path`` as the caller wrote it (true peak
        included); then the measuring pass is skipped and the file is read once. Its
        integrated loudness sets the gain; its true peak tells the limiter whether it
        has anything to do (``known_true_peak`` of
        :class:`earfold.renderer.loudness.limiter.TruePeakLimiter`). It is not changed.
    observe : callable, optional
        ``observe(codes, decode)`` is called on a thread of its own, in order, with
        every block of the delivered file as written (``codes``, from
        :meth:`earfold.renderer.io.OutputWriter.encode`) and the function that turns
        such a block into the float32 samples reading the file back gives
        (:meth:`earfold.renderer.io.OutputWriter.decoded`): what a caller would
        otherwise read again (the report's spectra), converting only what it uses.
    output_path : path-like
        The delivered file, written under a temporary name and renamed when complete.
    options : DeliveryOptions
        Loudness target and true-peak ceiling.
    input_loudness : float or None
        Integrated loudness of the input stem in LUFS
        (:func:`~earfold.renderer.loudness.measure_file` with
        :func:`~earfold.renderer.loudness.channel_weights`); used by
        ``"match"``. None when it could not be measured (silent stem).
    subtype, format, seed
        Passed to :class:`earfold.renderer.io.OutputWriter` (``seed`` seeds the PCM_16
        dither).
    progress : callable, optional
        Called with the fraction done, 0 to 1 over both passes.
    cancelled : callable, optional
        Polled once per block; when it returns True, raises
        :class:`earfold.renderer.errors.RenderCancelled` and leaves no output.

    Returns
    -------
    dict
        JSON-ready: ``target`` (as requested: a number, ``"match"`` or None),
        ``target_lufs`` (the level aimed at, or None), ``input_integrated_lufs``,
        ``render_integrated_lufs`` (before gain), ``gain_db``, ``output`` (the
        delivered file's measurement, :meth:`LoudnessResult.to_dict`),
        ``output_from_render`` (True when the output was the render times the gain, no
        sample limited or clipped: then ``output`` is the render's measurement with the
        gain, :meth:`LoudnessMeter.result`, which is what metering the output reads,
        to float rounding and the output's own rounding or dither, and the output is
        not metered again),
        ``true_peak_before_dbtp`` (the render after gain, before limiting),
        ``true_peak_after_dbtp``, ``ceiling_dbtp``, ``limiter`` (``enabled``,
        ``max_gain_reduction_db``, ``samples_limited``, and look-ahead and release),
        ``clipped_samples`` and ``warnings``.

    Examples
    --------
    Two seconds of stereo noise, delivered to -23 LUFS with the default -1 dBTP ceiling;
    the delivered file, measured again, reads the target:

    >>> import tempfile
    >>> from pathlib import Path
    >>> import numpy as np
    >>> from earfold.renderer.io import write_audio
    >>> from earfold.renderer.loudness import measure_file
    >>> noise = np.random.default_rng(0).normal(0.0, 0.1, (2 * 48000, 2))
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     render = Path(folder) / "render.wav"
    ...     delivered = Path(folder) / "delivered.wav"
    ...     write_audio(render, noise.astype(np.float32), 48000, subtype="FLOAT")
    ...     section = deliver(
    ...         render, delivered, DeliveryOptions(loudness=-23.0), input_loudness=None
    ...     )
    ...     measured = measure_file(delivered)
    >>> round(section["output"]["integrated_lufs"], 1)
    -23.0
    >>> round(measured.integrated_lufs, 1)
    -23.0
    """
    from ..io import OutputWriter, StemReader, probe_stem

    if not isinstance(options, DeliveryOptions):
        raise DeliveryError(f"options must be DeliveryOptions, not {type(options).__name__}")
    info = probe_stem([temp_path])
    rate, channels, total = info.samplerate, info.channels, info.frames
    warnings: list[str] = []

    def poll() -> None:
        if cancelled is not None and cancelled():
            raise RenderCancelled("render cancelled during delivery")

    def report(fraction: float) -> None:
        if progress is not None:
            progress(min(max(fraction, 0.0), 1.0))

    # Pass 1: measure the render as it is (unless the caller metered it while writing it).
    if render_meter is not None:
        before = render_meter
    else:
        before = LoudnessMeter(rate, channels)
        with StemReader(info) as reader:
            for block in reader.blocks(DELIVERY_BLOCK_FRAMES, reuse=True):
                poll()
                before.process(block)
                report(_PASS1_SHARE * reader.frames_read / total)
    measured = before.result()
    rendered = measured.integrated_lufs

    target = options.loudness
    target_lufs: float | None = None
    gain_db = 0.0
    if target == MATCH:
        target_lufs = None if input_loudness is None else float(input_loudness)
        if target_lufs is None:
            warnings.append(
                "the input stem's loudness could not be measured (silent, or "
                "shorter than 400 ms): 'match' applied no gain"
            )
    elif target is not None:
        target_lufs = float(target)
    if target_lufs is not None:
        if rendered is None:
            warnings.append(
                "the render is silent or shorter than 400 ms (no block above "
                "-70 LUFS): no loudness gain applied"
            )
        else:
            gain_db = target_lufs - rendered
    gain = 10.0 ** (gain_db / 20.0)

    # Pass 2: gain, limiter, meter, write. The limiter's interpolation gives the true
    # peaks before and after it; without a limiter the output is the render after gain.
    limiter = None
    if options.true_peak is not None:
        known = None
        if measured.true_peak_dbtp is not None:
            known = 10.0 ** ((measured.true_peak_dbtp + gain_db) / 20.0)
        limiter = TruePeakLimiter(
            rate, channels, ceiling_dbtp=options.true_peak, known_true_peak=known
        )
    # When the output will be the render times the gain (the limiter has nothing to do,
    # and nothing reaches full scale), metering it again would only repeat the render's
    # measurement shifted by the gain: that is taken instead (LoudnessMeter.result).
    # Otherwise the output is metered as it is written.
    unchanged = limiter is None or limiter.bypassed
    peak = measured.sample_peak_dbfs
    from_render = (
        unchanged
        and measured.true_peak_dbtp is not None
        and peak is not None
        and peak + gain_db < _NO_CLIP_DBFS
    )
    after = (
        None if from_render else LoudnessMeter(rate, channels, measure_true_peak=limiter is None)
    )

    with (
        StemReader(info) as reader,
        OutputWriter(
            output_path,
            rate,
            channels,
            format=format,
            subtype=subtype,
            frames_hint=total,
            seed=seed,
        ) as writer,
    ):
        # Writing (and, unless its figures come from the render's meter, metering) the
        # output run in threads of their own beside the reading and the limiter
        # (earfold.renderer.pipeline), in order; both are drained before the output file is
        # closed and before the meter is read. The blocks are new arrays that nobody
        # changes, so the two threads may share them. This thread converts each block to
        # the output's samples (OutputWriter.encode: checks, clipping, dither) and the
        # writer's thread only hands them to the file's encoder, the larger part of the
        # pass's work: measured on 600 s of stereo PCM_24, 0.2 s against 0.03 s.
        with contextlib.ExitStack() as threads:
            writing = threads.enter_context(BackgroundWriter(writer.write_encoded))
            metering = (
                None if after is None else threads.enter_context(BackgroundWriter(after.process))
            )
            observing = (
                None
                if observe is None
                else threads.enter_context(
                    BackgroundWriter(lambda codes: observe(codes, writer.decoded))
                )
            )

            def emit(block: NDArray[np.float32]) -> None:
                if block.shape[0]:
                    if metering is not None:
                        metering.submit(block)
                    encoded = writer.encode(block)
                    writing.submit(encoded)
                    if observing is not None:
                        observing.submit(encoded)

            # Reading runs a block ahead on its own thread (new arrays each time, so the
            # writer thread may hold them): this thread only scales and limits.
            for block in prefetch(reader.blocks(DELIVERY_BLOCK_FRAMES)):
                poll()
                scaled = block * np.float32(gain) if gain_db else block
                if limiter is not None:
                    emit(limiter.process(scaled))
                else:
                    emit(scaled)
                report(_PASS1_SHARE + (1 - _PASS1_SHARE) * reader.frames_read / total)
            if limiter is not None:
                emit(limiter.flush())
        clipped = writer.clipped_samples
        out_format = writer.format
    if after is None:
        result = before.result(gain_db)
        tp_before = result.true_peak_dbtp
    else:
        result = after.result()
        if limiter is not None:
            result = replace(result, true_peak_dbtp=_dbtp(limiter.output_true_peak))
            tp_before = _dbtp(limiter.input_true_peak)
        else:
            tp_before = result.true_peak_dbtp
    report(1.0)

    tp_after = result.true_peak_dbtp
    if limiter is None:
        if tp_after is not None and tp_after > 0.0:
            warnings.append(
                f"the limiter is off and the output's true peak is "
                f"{tp_after:+.2f} dBTP, above 0 dBTP: it may distort on "
                "playback or conversion"
            )
    elif limiter.max_gain_reduction_db > HEAVY_LIMITING_DB:
        warnings.append(
            f"the limiter reduced the level by up to {limiter.max_gain_reduction_db:.1f} dB "
            f"to hold {options.true_peak:g} dBTP; the loudness target may be too high for "
            "this material"
        )
    if clipped:
        warnings.append(
            f"{clipped} samples exceeded full scale and were clipped in the {subtype} output"
        )
    if target_lufs is not None and rendered is not None and result.integrated_lufs is not None:
        shortfall = target_lufs - result.integrated_lufs
        if shortfall > 0.5:
            warnings.append(
                f"the output reads {result.integrated_lufs:.1f} LUFS, "
                f"{shortfall:.1f} LU below the target, because of limiting"
            )

    return {
        "target": target,
        "target_lufs": round_or_none(target_lufs),
        "input_integrated_lufs": round_or_none(input_loudness),
        "render_integrated_lufs": round_or_none(rendered),
        "gain_db": round(gain_db, 2),
        "output": {**result.to_dict(), "format": out_format, "subtype": subtype},
        "output_from_render": after is None,
        "true_peak_before_dbtp": round_or_none(tp_before),
        "true_peak_after_dbtp": round_or_none(tp_after),
        "ceiling_dbtp": options.true_peak,
        "limiter": {
            "enabled": limiter is not None,
            "max_gain_reduction_db": round(limiter.max_gain_reduction_db, 2)
            if limiter is not None
            else 0.0,
            "samples_limited": limiter.samples_limited if limiter is not None else 0,
            "lookahead_ms": limiter.lookahead_ms if limiter is not None else None,
            "release_ms": limiter.release_ms if limiter is not None else None,
        },
        "clipped_samples": clipped,
        "warnings": warnings,
    }


def _dbtp(peak: float) -> float | None:
    return 20.0 * math.log10(peak) if peak > 0 else None
