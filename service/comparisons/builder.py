"""The comparison builder: renders each variant's excerpt, level-matches, writes trial files.

It runs in a worker's child process (:mod:`earfold.service.comparisons.build_child`), never in a
route handler. Steps:

1. The excerpt window: given, or automatic, the loudest window of the chosen length by
   short-term loudness (BS.1770 / EBU Tech 3341 readings of the stem every 100 ms, with
   the BS.1770 channel weights of the first variant's layout; LFE excluded).
2. Each variant renders that window (plus a pre-roll, :data:`PREROLL_S`, so reverberation
   and filter memory have built up when the excerpt starts) with no loudness gain and the
   limiter off, as float. The pre-roll and the tail past the excerpt are cut off, so every
   variant has exactly the same number of frames, and :data:`FADE_S` fades make the loop
   points click-free.
3. Each excerpt is measured (integrated loudness, true peak) with the renderer's meter.
   The common level is the loudest variant's loudness, lowered until every variant's
   true peak after its gain stays at or under the ceiling (:data:`CEILING_DBTP`), so no
   variant would need limiting; each variant gets ``common - measured`` dB.
4. The gained excerpts are written as 24-bit WAV of identical length and header, then
   measured again; the figures go into ``prepared.json`` next to them.
"""

from __future__ import annotations

import errno
import functools
import json
import math
import multiprocessing
import os
import signal
import tempfile
import time
from collections.abc import Callable, Sequence
from pathlib import Path

import numpy as np

__all__ = [
    "CEILING_DBTP",
    "FADE_S",
    "PREROLL_S",
    "BuildError",
    "build",
    "common_level",
    "loudest_window",
]

#: Seconds rendered before the excerpt and thrown away. Long enough for the HRIR and the
#: early part of a room to fill in and most of a medium room's tail to build up; a longer
#: pre-roll costs render time on every variant.
PREROLL_S = 1.0

#: Raised-cosine fade in and out at the excerpt's ends (s), so that looping the whole
#: excerpt does not click (a few ms is common practice).
FADE_S = 0.01

#: True-peak ceiling that no variant may exceed after level matching (dBTP); the
#: renderer's default limiter ceiling.
CEILING_DBTP = -1.0

#: Output sample format of the trial files: 24-bit PCM has a fixed header in libsndfile
#: (its float WAV adds a PEAK chunk whose values would differ between variants).
TRIAL_SUBTYPE = "PCM_24"


#: Processes that render a comparison's variants at once (forked from the build child
#: after the renderer and the HRIR sets are loaded, so they start warm). A listener is
#: waiting for the build, unlike a batch render, so it may use both cores of a small
#: machine; renders stay one process each (earfold.service.jobs.worker).
BUILD_PROCESSES = max(1, min(2, os.cpu_count() or 1))

#: How often the build child gathers its render processes' progress (s).
_GATHER_S = 0.05


class BuildError(ValueError):
    """A comparison cannot be built (a silent variant, an excerpt outside the stem)."""


def loudest_window(
    short_term: Sequence[float],
    interval_s: float,
    block_s: float,
    length_s: float,
    duration_s: float,
) -> float:
    """Start (s) of the loudest window of ``length_s`` by the given loudness readings.

    Parameters
    ----------
    short_term : sequence of float
        Loudness readings (LUFS), reading ``j`` covering ``[j * interval_s,
        j * interval_s + block_s]`` (the meter's short-term series: 3 s blocks).
    interval_s, block_s : float
    length_s, duration_s : float
        The window's and the stem's length.

    Notes
    -----
    The window's loudness is the power mean of the readings whose blocks lie inside it;
    candidate starts are the readings' starts. Ties go to the earliest window.
    """
    values = np.asarray(short_term, dtype=float)
    if length_s >= duration_s or values.size == 0:
        return 0.0
    power = np.power(10.0, values / 10.0)
    inside = max(1, int(math.floor((length_s - block_s) / interval_s + 1e-9)) + 1)
    last_start = duration_s - length_s
    starts = np.arange(len(values)) * interval_s
    n_candidates = int(np.count_nonzero(starts <= last_start + 1e-9))
    if n_candidates == 0:
        return 0.0
    inside = min(inside, len(values))
    csum = np.concatenate([[0.0], np.cumsum(power)])
    ends = np.minimum(np.arange(n_candidates) + inside, len(values))
    mean = (csum[ends] - csum[np.arange(n_candidates)]) / (ends - np.arange(n_candidates))
    return float(starts[int(np.argmax(mean))])


def common_level(
    measured_lufs: Sequence[float],
    true_peaks_dbtp: Sequence[float],
    ceiling_dbtp: float = CEILING_DBTP,
) -> float:
    """The level (LUFS) all variants are matched to.

    The loudest variant's loudness, lowered as far as needed that every variant's true
    peak after its gain (``tp + common - measured``) stays at or under ``ceiling_dbtp``.
    """
    loudest = max(measured_lufs)
    headroom = min(ceiling_dbtp - tp + lu for lu, tp in zip(measured_lufs, true_peaks_dbtp))
    return min(loudest, headroom)


def _fade(x: np.ndarray, frames: int) -> None:
    frames = min(frames, len(x) // 2)
    if frames < 1:
        return
    ramp = (0.5 - 0.5 * np.cos(np.pi * (np.arange(frames) + 0.5) / frames)).astype(np.float32)
    x[:frames] *= ramp[:, None]
    x[len(x) - frames :] *= ramp[::-1, None]


def _measure(x: np.ndarray, samplerate: int) -> tuple[float | None, float | None]:
    from earfold.renderer.loudness import LoudnessMeter

    meter = LoudnessMeter(samplerate, x.shape[1])
    meter.process(x)
    result = meter.result()
    return result.integrated_lufs, result.true_peak_dbtp


def choose_window(inputs: Sequence[str], settings, length_s: float) -> float:
    """Start (s) of the loudest ``length_s`` window of the stem (see :func:`loudest_window`)."""
    from earfold.renderer.io import StemReader
    from earfold.renderer.loudness import LoudnessMeter, channel_weights
    from earfold.renderer.render import plan_render

    plan = plan_render(inputs, settings)
    stem = plan.stem
    weights = channel_weights(plan.layout)[list(plan.order)]
    meter = LoudnessMeter(stem.samplerate, stem.channels, weights, measure_true_peak=False)
    with StemReader(stem) as reader:
        for block in reader.blocks(65536, reuse=True):
            meter.process(block)
    result = meter.result()
    if length_s >= 3.0:
        series, interval, block_s = result.short_term_series, result.short_term_interval_s, 3.0
    else:  # shorter than a short-term block: momentary (400 ms) readings
        series, interval, block_s = result.momentary_series, result.momentary_interval_s, 0.4
    return loudest_window(series, interval, block_s, length_s, stem.duration)


def _job_progress(report: Callable[[float], None], index: int, jobs: int, f: float) -> None:
    """Progress of job ``index`` of ``jobs`` as a share of all of them."""
    report((index + f) / jobs)


def _render_forked(
    jobs: list,
    processes: int,
    samplerate: int,
    progress: Callable[[float], None],
    cancelled: Callable[[], bool] | None,
) -> None:
    """Render ``jobs`` (inputs, output, settings) in ``processes`` forked processes.

    The HRIR sets are loaded first, so the forks share them; each fork renders every
    ``processes``-th job, reports progress through shared memory and stops when the
    parent asks (or dies). Errors come back as JSON text, not pickles.
    """
    from earfold.renderer.errors import RenderCancelled, RendererError
    from earfold.renderer.hrtf import load_hrir_set
    from earfold.renderer.render import render, resolve_hrtf

    for hrtf in {s.hrtf for _, _, s in jobs}:
        path, name = resolve_hrtf(hrtf)
        load_hrir_set(path, samplerate, name=name)
    ctx = multiprocessing.get_context("fork")
    done = ctx.Array("d", len(jobs), lock=False)
    stop = ctx.Value("b", 0, lock=False)
    errors = ctx.SimpleQueue()

    parent = os.getpid()  # taken before the fork: the forks stop when it is gone

    def work(indices: list[int]) -> None:
        from ..jobs.parent_watch import die_with_parent

        die_with_parent(signal.SIGTERM)

        def stopped() -> bool:
            return bool(stop.value) or os.getppid() != parent

        for i in indices:
            ins, out, settings = jobs[i]
            try:
                render(
                    ins,
                    out,
                    settings,
                    cancelled=stopped,
                    progress=functools.partial(done.__setitem__, i),
                )
            except RenderCancelled:
                os._exit(3)
            except Exception as exc:
                from ..jobs.render_child import EXIT_DISK_FULL, disk_full

                full = disk_full(exc, None if isinstance(exc, RendererError) else out.parent)
                if full or isinstance(exc, RendererError):
                    errors.put(json.dumps({"index": i, "error": str(exc), "disk_full": full}))
                    os._exit(EXIT_DISK_FULL if full else 2)
                raise
        os._exit(0)

    procs = [
        ctx.Process(target=work, args=(list(range(k, len(jobs), processes)),))
        for k in range(processes)
    ]
    for p in procs:
        p.start()
    try:
        while any(p.is_alive() for p in procs):
            time.sleep(_GATHER_S)
            progress(sum(done[:]) / len(jobs))
            if cancelled is not None and cancelled():
                stop.value = 1
    finally:
        stop.value = 1
        for p in procs:
            p.join()
    if cancelled is not None and cancelled():
        raise RenderCancelled("render cancelled")
    if not errors.empty():
        error = json.loads(errors.get())
        if error.get("disk_full"):
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        raise RendererError(error["error"])
    codes = [p.exitcode for p in procs]
    if any(code != 0 for code in codes):
        raise BuildError(
            f"a render process of the comparison died (exit status {codes}); "
            "the stem may be too large for this server"
        )


def build(
    inputs: Sequence[str],
    variants: Sequence[dict],
    excerpt: dict,
    folder: Path,
    *,
    progress: Callable[[float], None] | None = None,
    cancelled: Callable[[], bool] | None = None,
    processes: int = 1,
) -> dict:
    """Build the trial files of a comparison in ``folder`` and return what was done.

    Parameters
    ----------
    inputs : sequence of str
        The stem's files.
    variants : sequence of dict
        Render options of each variant (as a render job's ``options``).
    excerpt : dict
        ``{"start": s or None, "length": s}``; no start: the loudest window.
    folder : Path
        The comparison's folder; trial files go to ``audio/{index}.wav`` in it.
    processes : int
        Render processes (forked; :data:`BUILD_PROCESSES` in the build child).

    Returns
    -------
    dict
        ``excerpt`` (start, length, automatic), ``samplerate``, ``frames``,
        ``common_lufs``, ``ceiling_dbtp`` and per variant ``measured_lufs``,
        ``true_peak_dbtp``, ``gain_db``, ``matched_lufs``, ``matched_true_peak_dbtp``,
        ``file``.
    """
    import dataclasses

    from earfold.renderer.io import probe_stem, read_audio, write_audio
    from earfold.renderer.render import render

    from ..jobs.render_child import build_settings

    def report(fraction: float) -> None:
        if progress is not None:
            progress(min(max(fraction, 0.0), 1.0))

    stem = probe_stem(inputs)
    sr = stem.samplerate
    length_s = float(excerpt["length"])
    if length_s <= 0:
        raise BuildError(f"the excerpt length must be positive, not {length_s!r}")
    length_s = min(length_s, stem.duration)
    automatic = excerpt.get("start") is None
    settings = [
        dataclasses.replace(
            build_settings(v), loudness=None, true_peak=None, subtype="FLOAT", format="wav"
        )
        for v in variants
    ]
    if automatic:
        start_s = choose_window(inputs, settings[0], length_s)
    else:
        start_s = float(excerpt["start"])
    report(0.05)
    start_f = int(round(start_s * sr))
    frames = int(round(length_s * sr))
    if start_f >= stem.frames:
        raise BuildError(
            f"the excerpt starts at {start_s:g} s but the stem is only {stem.duration:.3f} s long"
        )
    frames = min(frames, stem.frames - start_f)
    pre_f = min(start_f, int(round(PREROLL_S * sr)))
    window = ((start_f - pre_f) / sr, (pre_f + frames) / sr)

    cut: list[np.ndarray] = []
    with tempfile.TemporaryDirectory(dir=folder, prefix=".build-") as tmp:
        jobs = [
            (list(inputs), Path(tmp) / f"{i}.wav", dataclasses.replace(s, excerpt=window))
            for i, s in enumerate(settings)
        ]
        render_progress = lambda f: report(0.05 + 0.85 * f)  # noqa: E731
        if processes > 1 and len(jobs) > 1:
            _render_forked(jobs, min(processes, len(jobs)), sr, render_progress, cancelled)
        else:
            for i, (ins, out, s) in enumerate(jobs):
                render(
                    ins,
                    out,
                    s,
                    cancelled=cancelled,
                    progress=functools.partial(_job_progress, render_progress, i, len(jobs)),
                )
        for _, out, _ in jobs:
            audio, _ = read_audio(out)
            os.unlink(out)
            x = np.zeros((frames, 2), dtype=np.float32)
            part = audio[pre_f : pre_f + frames]
            x[: len(part)] = part
            _fade(x, int(round(FADE_S * sr)))
            cut.append(x)

    lufs_values: list[float] = []
    peaks: list[float] = []
    for i, x in enumerate(cut):
        lufs, tp = _measure(x, sr)
        if lufs is None or tp is None:
            raise BuildError(
                f"variant {i + 1} is silent in the excerpt from {start_s:g} s "
                f"({length_s:g} s long), so it cannot be level-matched; choose "
                "another excerpt"
            )
        lufs_values.append(lufs)
        peaks.append(tp)
    common = common_level(lufs_values, peaks)
    audio_dir = folder / "audio"
    audio_dir.mkdir(exist_ok=True)
    out_variants = []
    for i, x in enumerate(cut):
        gain_db = common - lufs_values[i]
        y = x * np.float32(10.0 ** (gain_db / 20.0))
        path = audio_dir / f"{i}.wav"
        write_audio(path, y, sr, subtype=TRIAL_SUBTYPE)
        back, _ = read_audio(path)
        after_lufs, after_tp = _measure(back, sr)
        out_variants.append(
            {
                "index": i,
                "measured_lufs": round(lufs_values[i], 3),
                "true_peak_dbtp": round(peaks[i], 3),
                "gain_db": round(gain_db, 3),
                "matched_lufs": None if after_lufs is None else round(after_lufs, 3),
                "matched_true_peak_dbtp": None if after_tp is None else round(after_tp, 3),
                "file": f"audio/{i}.wav",
            }
        )
        report(0.9 + 0.1 * (i + 1) / len(cut))
    return {
        "excerpt": {
            "start": round(start_f / sr, 6),
            "length": round(frames / sr, 6),
            "automatic": automatic,
        },
        "samplerate": sr,
        "frames": frames,
        "common_lufs": round(common, 3),
        "ceiling_dbtp": CEILING_DBTP,
        "variants": out_variants,
    }
