"""Generated stems and a client-side multipart helper for the service tests."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from earfold.renderer.io import write_audio
from earfold.renderer.layouts import get_layout

FS = 48000


def noise(frames: int, channels: int, seed: int = 0, level: float = 0.05) -> np.ndarray:
    """Decorrelated white noise, frames x channels float32."""
    rng = np.random.default_rng(seed)
    return (level * rng.standard_normal((frames, channels))).astype(np.float32)


def write_stem(
    path: Path,
    frames: int,
    channels: int,
    seed: int = 0,
    subtype: str = "PCM_24",
    samplerate: int = FS,
) -> Path:
    write_audio(path, noise(frames, channels, seed), samplerate, subtype=subtype)
    return path


def write_mono_set(
    folder: Path, layout: str, frames: int, seed: int = 0, prefix: str = "mix"
) -> list[Path]:
    """One mono file per channel of ``layout``, named ``prefix.LABEL.wav``, in layout order."""
    labels = get_layout(layout).labels
    data = noise(frames, len(labels), seed)
    paths = []
    for i, label in enumerate(labels):
        p = folder / f"{prefix}.{label}.wav"
        write_audio(p, data[:, i : i + 1], FS)
        paths.append(p)
    return paths


def files_field(paths: list[Path], names: list[str] | None = None) -> list[tuple]:
    """httpx ``files=`` for repeated multipart field ``file``."""
    names = names or [p.name for p in paths]
    return [("file", (n, p.read_bytes(), "audio/wav")) for p, n in zip(paths, names)]
