"""The cases ``earfold bench`` times, each run in a process of its own (see :mod:`._bench`),
and the interleaved rounds that compare variants at the same moment.
"""

from __future__ import annotations

import os
import time
from collections.abc import Callable
from typing import TYPE_CHECKING, Any

import numpy as np
import numpy.typing as npt

if TYPE_CHECKING:
    from ..render import RenderSettings

__all__ = [
    "BENCH_HRTF",
    "BENCH_SAMPLERATE",
    "CASES",
    "DELIVERY_ROUNDS",
    "EQ_ENGINE_ROUNDS",
    "EQ_ENGINE_SECONDS",
    "EQ_ROUNDS",
    "LOUD_TARGET_LUFS",
    "MEMORY_CASES",
    "SCENE_CASES",
    "SCENE_REFERENCE_LAYOUT",
    "SCENE_ROUNDS",
    "SELF_REPEATING",
    "Figures",
    "interleaved",
    "make_noise_stem",
    "round_ratios",
]

Figures = dict[str, Any]
"""A case's figures, JSON-ready: ``"seconds"`` and whatever else the case measures."""

BENCH_SAMPLERATE = 48000
BENCH_HRTF = "mit-kemar"


def make_noise_stem(
    path: str | os.PathLike[str],
    channels: int,
    seconds: float,
    samplerate: int = BENCH_SAMPLERATE,
    seed: int = 1,
) -> None:
    """Write a white-noise stem at -20 dBFS RMS per channel, in blocks."""
    from ..io import OutputWriter

    rng = np.random.default_rng(seed)
    frames = int(seconds * samplerate)
    block = 1 << 16
    with OutputWriter(path, samplerate, channels, subtype="PCM_24", frames_hint=frames) as w:
        for start in range(0, frames, block):
            n = min(block, frames - start)
            w.write((0.1 * rng.standard_normal((n, channels))).astype(np.float32))


def _settings(
    layout: str, room: str, mode: str = "shared", delivered: bool = False
) -> RenderSettings:
    from ..render import RenderSettings

    # The speed cases render raw (no loudness gain, no limiter): the engine and its I/O.
    # The delivered case adds the default delivery stage (-23 LUFS, limiter at -1 dBTP).
    if delivered:
        return RenderSettings(layout=layout, hrtf=BENCH_HRTF, room=room, room_mode=mode)
    return RenderSettings(
        layout=layout, hrtf=BENCH_HRTF, room=room, room_mode=mode, loudness=None, true_peak=None
    )


def _case_ours(stem: str, layout: str, out: str, room: str) -> Figures:
    from ..render import render

    report = render([stem], out, _settings(layout, room))
    return {"seconds": report["timings_s"]["render"], "block_size": report["engine"]["block_size"]}


def _case_delivered(
    stem: str, layout: str, out: str, room: str, loudness: float | None = None
) -> Figures:
    import dataclasses

    from ..render import render

    settings = _settings(layout, room, delivered=True)
    if loudness is not None:
        settings = dataclasses.replace(settings, loudness=loudness)
    report = render([stem], out, settings)
    t = report["timings_s"]
    return {
        "seconds": t["render"] + t["delivery"],
        "samples_limited": report["delivery"]["limiter"]["samples_limited"],
    }


def _case_ours_exact(stem: str, layout: str, out: str, room: str) -> Figures:
    from ..render import render

    report = render([stem], out, _settings(layout, room, "exact"))
    return {"seconds": report["timings_s"]["render"]}


def _case_baseline(stem: str, layout: str, out: str, room: str) -> Figures:
    from ..engine import convolve_reference
    from ..io import read_audio, write_audio
    from ..render import plan_render

    # With a room the baseline convolves the full room response of every loudspeaker.
    plan = plan_render([stem], _settings(layout, room, "exact"))
    t0 = time.perf_counter()
    data, rate = read_audio(stem)
    y = convolve_reference(data, plan.filters)
    write_audio(out, y.astype(np.float32), rate, subtype="PCM_24")
    return {"seconds": time.perf_counter() - t0}


def _case_io_floor(stem: str, layout: str, out: str, room: str) -> Figures:
    from ..engine import DEFAULT_BLOCK_SIZE
    from ..io import OutputWriter, StemReader
    from ..render import plan_render

    plan = plan_render([stem], _settings(layout, room))
    info = plan.stem
    tail = plan.length - 1
    t0 = time.perf_counter()
    with (
        StemReader(info) as reader,
        OutputWriter(
            out, info.samplerate, 2, subtype="PCM_24", frames_hint=info.frames + tail
        ) as writer,
    ):
        for block in reader.blocks(DEFAULT_BLOCK_SIZE):
            # Two of the input's channels stand in for the ears: same size, same entropy.
            writer.write(block[:, :2] if block.shape[1] >= 2 else np.repeat(block, 2, axis=1))
        writer.write(np.zeros((tail, 2), dtype=np.float32))
    return {"seconds": time.perf_counter() - t0}


def _case_eq(stem: str, layout: str, out: str, room: str, eq: str, cold: bool = False) -> Figures:
    import dataclasses

    from ..hrtf.hrir import _load_cached
    from ..render import render

    if cold:  # the set is read, resampled (and equalised) again
        _load_cached.cache_clear()
    report = render([stem], out, dataclasses.replace(_settings(layout, room), eq=eq))
    t = report["timings_s"]
    return {"seconds": t["render"], "plan_seconds": t["plan"]}


#: Rounds of the EQ comparison (off and on, interleaved; see the module's notes).
EQ_ROUNDS = 7

#: Rounds of the delivery comparison (raw, default delivery, loud delivery).
DELIVERY_ROUNDS = 5

#: Loudness target of the delivery case whose limiter works: on the bench's noise stems
#: (true peak about 9 dB over the integrated loudness) -9 LUFS puts the peaks over the
#: -1 dBTP ceiling, and the limiter lowers about 5 % of the frames of a 7.1.4 render.
LOUD_TARGET_LUFS = -9.0


def interleaved(
    variants: dict[str, Callable[[], Figures]], rounds: int
) -> dict[str, list[Figures]]:
    """Run each variant once per round, the order reversed every other round.

    Returns every variant's results, round by round, so that they can be compared
    round by round (:func:`round_ratios`).
    """
    names = list(variants)
    runs: dict[str, list[Figures]] = {name: [] for name in names}
    for i in range(rounds):
        for name in names if i % 2 == 0 else names[::-1]:
            runs[name].append(variants[name]())
    return runs


def round_ratios(runs: list[Figures], reference: list[Figures]) -> list[float]:
    """Each round's time over the reference's time in the same round."""
    return [r["seconds"] / ref["seconds"] for r, ref in zip(runs, reference)]


def _summary(runs: list[Figures], reference: list[Figures] | None = None) -> Figures:
    out: Figures = {
        "seconds": min(r["seconds"] for r in runs),
        "all_seconds": [round(r["seconds"], 4) for r in runs],
    }
    if "plan_seconds" in runs[0]:
        out["plan_seconds"] = min(r["plan_seconds"] for r in runs)
    if reference is not None:
        ratios = round_ratios(runs, reference)
        out["round_ratios"] = [round(x, 4) for x in ratios]
        out["median_ratio"] = float(np.median(ratios))
    return out


def _case_eq_pair(stem: str, layout: str, out: str, room: str) -> Figures:
    # The one-off preparation: planning from a cold cache, once each, with the render.
    cold = {
        eq: _case_eq(stem, layout, out, room, eq, cold=True) for eq in ("none", "diffuse-field")
    }
    # Then the render passes with both sets prepared, as a process holds them (cached per
    # set and rate): the equalisation is precomputed, and what is left to compare is its
    # effect on the render itself.
    runs = interleaved(
        {
            "off": lambda: _case_eq(stem, layout, out, room, "none"),
            "on": lambda: _case_eq(stem, layout, out, room, "diffuse-field"),
        },
        EQ_ROUNDS,
    )
    on = {
        **_summary(runs["on"], runs["off"]),
        "plan_seconds": cold["diffuse-field"]["plan_seconds"],
    }
    off = {**_summary(runs["off"]), "plan_seconds": cold["none"]["plan_seconds"]}
    return {**on, "off": off, "engine": _eq_engine_work(stem, layout, room)}


#: Rounds and length of the EQ's engine-alone comparison.
EQ_ENGINE_ROUNDS = 10
EQ_ENGINE_SECONDS = 20.0


def _eq_engine_work(stem: str, layout: str, room: str) -> Figures:
    """The engine alone, EQ off and on: the same blocks, each timed on its own.

    Every block is processed once per round by each engine, rounds interleaved; the
    figure is the sum over blocks of each block's fastest time. The machine's other work
    only ever adds to a block's time, so the fastest of several tries is the block's own
    cost, and the sum compares the engines' work without the minute-scale drift that
    whole renders see. (What the EQ could change is only here: it changes the filters,
    nothing else in the render.)
    """
    import dataclasses

    from ..io import StemReader
    from ..render import engine_for, plan_render

    settings = _settings(layout, room)
    plans = {
        eq: plan_render([stem], dataclasses.replace(settings, eq=eq))
        for eq in ("none", "diffuse-field")
    }
    limit = int(EQ_ENGINE_SECONDS * BENCH_SAMPLERATE)
    blocks: list[npt.NDArray[np.float32]] = []
    with StemReader(plans["none"].stem) as reader:
        for block in reader.blocks(settings.block_size):
            blocks.append(block)
            if len(blocks) * settings.block_size >= limit:
                break

    def run(eq: str) -> Figures:
        engine = engine_for(plans[eq], settings.block_size)
        times: list[float] = []
        try:
            for block in blocks:
                t0 = time.perf_counter()
                engine.process(block)
                times.append(time.perf_counter() - t0)
        finally:
            engine.close()
        return {"seconds": sum(times), "blocks": times}

    runs = interleaved(
        {"off": lambda: run("none"), "on": lambda: run("diffuse-field")}, EQ_ENGINE_ROUNDS
    )
    best = {k: float(np.min([r["blocks"] for r in v], axis=0).sum()) for k, v in runs.items()}
    return {
        "blocks": len(blocks),
        "rounds": EQ_ENGINE_ROUNDS,
        "off_seconds": round(best["off"], 5),
        "on_seconds": round(best["on"], 5),
        "ratio": best["on"] / best["off"],
    }


def _case_delivery(stem: str, layout: str, out: str, room: str) -> Figures:
    runs = interleaved(
        {
            "raw": lambda: _case_ours(stem, layout, out, room),
            "default": lambda: _case_delivered(stem, layout, out, room),
            "loud": lambda: _case_delivered(stem, layout, out, room, LOUD_TARGET_LUFS),
        },
        DELIVERY_ROUNDS,
    )
    return {
        **_summary(runs["default"], runs["raw"]),
        "raw": _summary(runs["raw"]),
        "loud": {
            **_summary(runs["loud"], runs["raw"]),
            "target_lufs": LOUD_TARGET_LUFS,
            "samples_limited": runs["loud"][0]["samples_limited"],
        },
    }


#: Rounds of a scene's per-channel comparison with :data:`SCENE_REFERENCE_LAYOUT`.
SCENE_ROUNDS = 7

#: The loudspeaker layout a scene is compared with per input channel (issue 17).
SCENE_REFERENCE_LAYOUT = "7.1.4"


def _case_scene_pair(stem: str, layout: str, out: str, room: str) -> Figures:
    """A scene and a 7.1.4 noise stem of the same length, rendered raw in interleaved
    rounds in this one process; each round's ratio of their speeds per input channel
    (the scene's channels per second over 7.1.4's), and the median of those ratios
    (above 1: the scene renders faster per input channel)."""
    from pathlib import Path

    from ..io import probe_stem
    from ..layouts import get_layout

    info = probe_stem([stem])
    reference = get_layout(SCENE_REFERENCE_LAYOUT)
    channels = get_layout(layout).channels
    other = str(Path(stem).with_name(f"scene-pair-{reference.name}.wav"))
    make_noise_stem(other, reference.channels, info.frames / info.samplerate)
    try:
        runs = interleaved(
            {
                "scene": lambda: _case_ours(stem, layout, out, room),
                "reference": lambda: _case_ours(other, reference.name, out, room),
            },
            SCENE_ROUNDS,
        )
    finally:
        os.remove(other)
    ratios = [
        (channels / s["seconds"]) / (reference.channels / r["seconds"])
        for s, r in zip(runs["scene"], runs["reference"], strict=True)
    ]
    return {
        **_summary(runs["scene"]),
        "reference": {**_summary(runs["reference"]), "layout": reference.name},
        "channels": channels,
        "reference_channels": reference.channels,
        "channel_ratios": [round(x, 4) for x in ratios],
        "median_channel_ratio": float(np.median(ratios)),
    }


CASES: dict[str, Callable[..., Figures]] = {
    "earfold": _case_ours,
    "delivery": _case_delivery,
    "earfold_exact": _case_ours_exact,
    "baseline": _case_baseline,
    "io_floor": _case_io_floor,
    "eq_pair": _case_eq_pair,
    "scene_pair": _case_scene_pair,
}
#: Cases that repeat themselves (their own interleaved rounds) instead of REPEATS times.
SELF_REPEATING = {"eq_pair", "delivery", "scene_pair"}
#: Cases run only for an Ambisonic scene's row.
SCENE_CASES = {"scene_pair"}
#: Cases run only by the memory check.
MEMORY_CASES: dict[str, Callable[..., Figures]] = {"earfold_delivered": _case_delivered}
