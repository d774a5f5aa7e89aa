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


def _excerpt(out: Path, pre_f: int, frames: int, samplerate: int) -> np.ndarray:
    """The excerpt of a rendered variant (pre-roll and tail cut off, ends faded); the
    rendered file is removed."""
    from earfold.renderer.io import read_audio

    audio, _ = read_audio(out)
    os.unlink(out)
    x = np.zeros((frames, 2), dtype=np.float32)
    part = audio[pre_f : pre_f + frames]
    x[: len(part)] = part
    _fade(x, int(round(FADE_S * samplerate)))
    return x


def _write_trial(path: Path, x: np.ndarray, gain_db: float, samplerate: int) -> tuple:
    """Write a variant's trial file at ``gain_db``; its loudness and true peak read back."""
    from earfold.renderer.io import read_audio, write_audio

    y = x * np.float32(10.0 ** (gain_db / 20.0))
    write_audio(path, y, samplerate, subtype=TRIAL_SUBTYPE)
    back, _ = read_audio(path)
    return _measure(back, samplerate)


def _nan(value: float | None) -> float:
    return math.nan if value is None else float(value)


def _none(value: float) -> float | None:
    return None if math.isnan(value) else float(value)


def _prepare_sets(jobs: list) -> None:
    """Load and prepare each HRIR set of ``jobs`` in this process, before the forks.

    A set computes some things once, on first use, and keeps them (earfold.renderer.hrtf:
    the onsets and aligned responses that directions between measurements need). Done
    here, the forks share them instead of each computing them again, and a process that
    builds one comparison after another (a worker's warm render process) keeps them.
    Planning a render of the first variant of each set, without its room, does it.
    """
    import dataclasses

    from earfold.renderer.render import plan_render

    seen = set()
    for ins, _, settings in jobs:
        if settings.hrtf in seen:
            continue
        seen.add(settings.hrtf)
        plan_render(ins, dataclasses.replace(settings, room="none"))


def _build_forked(
    jobs: list,
    processes: int,
    samplerate: int,
    cut: tuple[int, int],
    audio_dir: Path,
    gains: Callable[[list[float | None], list[float | None]], list[float]],
    progress: Callable[[float], None],
    cancelled: Callable[[], bool] | None,
) -> tuple[list[float], list[float], list[tuple[float | None, float | None]]]:
    """Render, cut, measure and write ``jobs`` (inputs, output, settings) in
    ``processes`` forked processes.

    The HRIR sets are loaded first, so the forks share them. Each fork takes every
    ``processes``-th job: renders it, cuts and measures its excerpt, and keeps it in
    memory; once every excerpt is measured the parent decides the gains (``gains``,
    from the measured loudness and true peaks; it may raise), and each fork writes its
    trial files and measures them again. Progress and figures cross through shared
    memory, errors as JSON text (not pickles); the forks stop when the parent asks (or
    dies). Returns the measured loudness, true peaks and each trial file's figures.
    """
    from earfold.renderer.errors import RenderCancelled, RendererError
    from earfold.renderer.render import render

    _prepare_sets(jobs)
    n = len(jobs)
    pre_f, frames = cut
    ctx = multiprocessing.get_context("fork")
    done = ctx.Array("d", n, lock=False)
    #: per job: loudness, true peak (measured), then loudness, true peak (trial file)
    figures = ctx.Array("d", 4 * n, lock=False)
    #: per job: 1 once measured, 2 once its trial file is written
    stage = ctx.Array("b", n, lock=False)
    gain_db = ctx.Array("d", n, lock=False)
    go = ctx.Value("b", 0, lock=False)
    stop = ctx.Value("b", 0, lock=False)
    errors = ctx.SimpleQueue()

    parent = os.getpid()  # taken before the fork: the forks stop when it is gone

    def work(indices: list[int]) -> None:
        from ..jobs.parent_watch import die_with_parent

        die_with_parent(signal.SIGTERM)

        def stopped() -> bool:
            return bool(stop.value) or os.getppid() != parent

        i = indices[0] if indices else 0
        try:
            excerpts = {}
            for i in indices:
                ins, out, settings = jobs[i]
                render(
                    ins,
                    out,
                    settings,
                    cancelled=stopped,
                    progress=functools.partial(done.__setitem__, i),
                )
                x = _excerpt(out, pre_f, frames, samplerate)
                lufs, tp = _measure(x, samplerate)
                figures[4 * i], figures[4 * i + 1] = _nan(lufs), _nan(tp)
                excerpts[i] = x
                stage[i] = 1
            while not go.value:
                if stopped():
                    os._exit(3)
                time.sleep(0.002)
            for i in indices:
                lufs, tp = _write_trial(audio_dir / f"{i}.wav", excerpts[i], gain_db[i], samplerate)
                figures[4 * i + 2], figures[4 * i + 3] = _nan(lufs), _nan(tp)
                stage[i] = 2
        except RenderCancelled:
            os._exit(3)
        except Exception as exc:
            from ..jobs.render_child import EXIT_DISK_FULL, disk_full

            full = disk_full(exc, None if isinstance(exc, RendererError) else audio_dir)
            if full or isinstance(exc, RendererError):
                errors.put(json.dumps({"index": i, "error": str(exc), "disk_full": full}))
                os._exit(EXIT_DISK_FULL if full else 2)
            raise
        os._exit(0)

    procs = [
        ctx.Process(target=work, args=(list(range(k, n, processes)),)) for k in range(processes)
    ]
    for p in procs:
        p.start()
    failure: BaseException | None = None
    try:
        while any(p.is_alive() for p in procs):
            time.sleep(_GATHER_S)
            written = sum(1 for k in range(n) if stage[k] == 2)
            progress(0.9 * sum(done[:]) / n + 0.1 * written / n)
            if cancelled is not None and cancelled():
                stop.value = 1
            if not go.value and not stop.value and all(stage[k] >= 1 for k in range(n)):
                measured = [_none(figures[4 * k]) for k in range(n)]
                peaks = [_none(figures[4 * k + 1]) for k in range(n)]
                try:
                    for k, g in enumerate(gains(measured, peaks)):
                        gain_db[k] = g
                    audio_dir.mkdir(exist_ok=True)
                    go.value = 1
                except BaseException as exc:  # a silent variant: stop the forks, then raise
                    failure = exc
                    stop.value = 1
    finally:
        if not go.value:
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
    if failure is not None:
        raise failure
    codes = [p.exitcode for p in procs]
    if any(code != 0 for code in codes):
        raise BuildError(
            f"a render process of the comparison died (exit status {codes}); "
            "the stem may be too large for this server"
        )
    return (
        [figures[4 * k] for k in range(n)],
        [figures[4 * k + 1] for k in range(n)],
        [(_none(figures[4 * k + 2]), _none(figures[4 * k + 3])) for k in range(n)],
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

    from earfold.renderer.io import probe_stem
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

    def silent(i: int) -> BuildError:
        return BuildError(
            f"variant {i + 1} is silent in the excerpt from {start_s:g} s "
            f"({length_s:g} s long), so it cannot be level-matched; choose "
            "another excerpt"
        )

    def gains(measured: list[float | None], tps: list[float | None]) -> list[float]:
        for i, (lufs, tp) in enumerate(zip(measured, tps)):
            if lufs is None or tp is None:
                raise silent(i)
        common = common_level(measured, tps)  # type: ignore[arg-type]
        return [common - lufs for lufs in measured]  # type: ignore[operator]

    audio_dir = folder / "audio"
    with tempfile.TemporaryDirectory(dir=folder, prefix=".build-") as tmp:
        jobs = [
            (list(inputs), Path(tmp) / f"{i}.wav", dataclasses.replace(s, excerpt=window))
            for i, s in enumerate(settings)
        ]
        if processes > 1 and len(jobs) > 1:
            # Rendering, measuring and writing spread over the processes; the figures
            # and files are those of the one-process path below.
            lufs_values, peaks, matched = _build_forked(
                jobs,
                min(processes, len(jobs)),
                sr,
                (pre_f, frames),
                audio_dir,
                gains,
                lambda f: report(0.05 + 0.95 * f),
                cancelled,
            )
            gain_values = gains(list(lufs_values), list(peaks))
        else:
            render_progress = lambda f: report(0.05 + 0.85 * f)  # noqa: E731
            for i, (ins, out, s) in enumerate(jobs):
                render(
                    ins,
                    out,
                    s,
                    cancelled=cancelled,
                    progress=functools.partial(_job_progress, render_progress, i, len(jobs)),
                )
            cut = [_excerpt(out, pre_f, frames, sr) for _, out, _ in jobs]
            measured = [_measure(x, sr) for x in cut]
            gain_values = gains([m[0] for m in measured], [m[1] for m in measured])
            lufs_values = [float(m[0]) for m in measured]  # type: ignore[arg-type]
            peaks = [float(m[1]) for m in measured]  # type: ignore[arg-type]
            audio_dir.mkdir(exist_ok=True)
            matched = []
            for i, x in enumerate(cut):
                matched.append(_write_trial(audio_dir / f"{i}.wav", x, gain_values[i], sr))
                report(0.9 + 0.1 * (i + 1) / len(cut))

    common = common_level(lufs_values, peaks)
    out_variants = []
    for i, (after_lufs, after_tp) in enumerate(matched):
        out_variants.append(
            {
                "index": i,
                "measured_lufs": round(lufs_values[i], 3),
                "true_peak_dbtp": round(peaks[i], 3),
                "gain_db": round(gain_values[i], 3),
                "matched_lufs": None if after_lufs is None else round(after_lufs, 3),
                "matched_true_peak_dbtp": None if after_tp is None else round(after_tp, 3),
                "file": f"audio/{i}.wav",
            }
        )
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
