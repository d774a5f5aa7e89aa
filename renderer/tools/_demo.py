"""The demo: a synthetic 7.1.4 stem, rendered, so a new user hears the whole job at once.

The scene ("harbour bells", invented for this project): a small bell walks around the
listener, one loudspeaker at a time, first on the ear-level ring (from the front, round
by the left, to the back and round by the right), then over the head on the four height
loudspeakers; the LFE answers with a soft low drum; then every loudspeaker sounds
together: a sustained chord over a wash of decorrelated noise, like surf.
"""

from __future__ import annotations

import json
import os
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import numpy.typing as npt

from ..io import write_audio
from ..layouts import get_layout

DEMO_SAMPLERATE = 48000
DEMO_LAYOUT = "7.1.4"
#: Seconds each loudspeaker sounds alone during the walk.
STEP_SECONDS = 0.55
#: Seconds of the final tutti.
TUTTI_SECONDS = 3.0
DEMO_SEED = 2051


def _bell(freq: float, seconds: float, rate: int) -> npt.NDArray[np.float64]:
    """A struck bell: a few inharmonic partials with their own decays."""
    t = np.arange(int(seconds * rate)) / rate
    partials = [(1.0, 1.0, 3.0), (2.76, 0.5, 5.0), (5.40, 0.25, 8.0), (8.93, 0.12, 12.0)]
    out = np.zeros_like(t)
    for ratio, amp, decay in partials:
        out += amp * np.sin(2 * np.pi * freq * ratio * t) * np.exp(-decay * t)
    attack = np.minimum(t / 0.002, 1.0)
    bell: npt.NDArray[np.float64] = out * attack / 1.9
    return bell


def _drum(seconds: float, rate: int) -> npt.NDArray[np.float64]:
    t = np.arange(int(seconds * rate)) / rate
    f = 45.0 + 30.0 * np.exp(-t * 25)  # a short downward pitch sweep
    phase = 2 * np.pi * np.cumsum(f) / rate
    drum: npt.NDArray[np.float64] = np.sin(phase) * np.exp(-t * 6) * np.minimum(t / 0.004, 1.0)
    return drum


def make_demo_stem(
    rate: int = DEMO_SAMPLERATE, seed: int = DEMO_SEED
) -> tuple[npt.NDArray[np.float32], list[str]]:
    """The demo stem (frames x 12, float32) and its channel labels in file order."""
    from scipy.signal import lfilter

    layout = get_layout(DEMO_LAYOUT)
    rng = np.random.default_rng(seed)
    labels = list(layout.labels)
    walk_len = int(STEP_SECONDS * rate)
    ear_level = [i for i, s in enumerate(layout.speakers) if not s.lfe and s.elevation == 0]
    heights = [i for i, s in enumerate(layout.speakers) if not s.lfe and s.elevation != 0]
    # Round the listener anticlockwise seen from above: azimuth 0 -> +180 -> -180 -> 0.
    ear_level.sort(key=lambda i: layout.speakers[i].azimuth % 360)
    heights.sort(key=lambda i: layout.speakers[i].azimuth % 360)
    walk = ear_level + heights
    lfe = list(layout.lfe_indices)
    total = walk_len * (len(walk) + len(lfe)) + int(TUTTI_SECONDS * rate) + rate // 2
    stem = np.zeros((total, layout.channels))
    pitches = 440.0 * 2 ** (np.array([0, 2, 4, 7, 9, 12, 14, 16, 19, 21, 24, 26]) / 12)
    pos = 0
    for step, ch in enumerate(walk):
        tone = _bell(pitches[step % len(pitches)], STEP_SECONDS * 1.6, rate)
        end = min(pos + len(tone), total)
        stem[pos:end, ch] += 0.5 * tone[: end - pos]
        pos += walk_len
    for ch in lfe:
        drum = _drum(STEP_SECONDS * 1.5, rate)
        stem[pos : pos + len(drum), ch] += 0.5 * drum
        pos += walk_len
    n = int(TUTTI_SECONDS * rate)
    t = np.arange(n) / rate
    envelope = np.minimum(t / 0.4, 1.0) * np.minimum((TUTTI_SECONDS - t) / 0.8, 1.0)
    chord = [220.0, 277.18, 329.63, 440.0]
    for k, ch in enumerate(walk):
        noise = rng.standard_normal(n)
        # One-pole low-pass for a softer, surf-like wash.
        wash = lfilter([0.05], [1, -0.95], noise)
        tone = np.sin(2 * np.pi * chord[k % len(chord)] * t + rng.uniform(0, 2 * np.pi))
        stem[pos : pos + n, ch] += envelope * (0.06 * tone + 0.05 * wash)
    for ch in lfe:
        stem[pos : pos + n, ch] += envelope * 0.2 * np.sin(2 * np.pi * 55.0 * t)
    return stem.astype(np.float32), labels


def run_demo(
    directory: str | os.PathLike[str] = "earfold-demo",
    *,
    progress: Callable[[float], None] | None = None,
) -> dict[str, Any]:
    """Write the demo stem into ``directory``, render it with the defaults, return the paths."""
    from ..render import RenderSettings, render

    out_dir = Path(directory)
    out_dir.mkdir(parents=True, exist_ok=True)
    stem, labels = make_demo_stem()
    stem_path = out_dir / "harbour-bells.7.1.4.wav"
    write_audio(stem_path, stem, DEMO_SAMPLERATE, subtype="PCM_24")
    output = out_dir / "harbour-bells.binaural.wav"
    report_path = out_dir / "harbour-bells.binaural.report.json"
    settings = RenderSettings(layout=DEMO_LAYOUT, channel_order=labels)
    report = render([stem_path], output, settings, progress=progress)
    report_path.write_text(json.dumps(report, indent=2) + "\n")
    return {
        "stem": str(stem_path),
        "output": str(output),
        "report": str(report_path),
        "duration_s": len(stem) / DEMO_SAMPLERATE,
        "report_data": report,
    }
