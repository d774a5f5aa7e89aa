"""Levels of a stem, per channel, in one streaming pass: peak, RMS, an overview of both
over time, and the share of the energy below 120 Hz.

What a listener checks before rendering: which channels carry signal, how loud, where
in time, and whether low frequencies sit where the layout expects them (LFE content in
a main channel, or a full-range LFE channel, shows as a ``low_share`` far from the usual).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import AudioError
from ..signals import scipy_signal
from ._probe import StemInfo
from ._reader import StemReader

__all__ = [
    "LEVELS_BLOCK_FRAMES",
    "LOW_SHARE_HZ",
    "OVERVIEW_POINTS",
    "ChannelLevels",
    "StemLevels",
    "measure_levels",
]

OVERVIEW_POINTS = 240
"""Windows of the overview over the whole stem (one per 2 px of a 480 px strip)."""

LOW_SHARE_HZ = 120.0
"""Edge of the "low" band of ``low_share`` (Hz): the LFE low-pass of common practice."""

_LOW_ORDER = 8
"""Order of the Butterworth low-pass that splits off the low band. Steep (48 dB per
octave), so that the share reads what lies below the edge rather than the filter's
skirt: a tone an octave above passes at -48 dB, 1.6e-5 of its energy."""

LEVELS_BLOCK_FRAMES = 65536
"""Frames per read: memory depends on this and the channel count, not on the length."""


def _db(power: float) -> float | None:
    """``10 log10(power)`` rounded to 0.01 dB, or None for silence (never -inf)."""
    return round(10.0 * math.log10(power), 2) if power > 0.0 else None


@dataclass(frozen=True)
class ChannelLevels:
    """Levels of one channel.

    Attributes
    ----------
    index : int
        Channel in file order, from 0.
    label : str or None
        The channel's label, where the caller knew it.
    peak_dbfs, rms_dbfs : float or None
        Sample peak ``20 log10 max|x|`` and RMS ``10 log10 mean(x^2)`` in dB relative to
        full scale (1.0), None for a silent channel. A sine of amplitude A reads
        ``20 log10 A`` and ``20 log10 (A / sqrt 2)`` (RMS of a sine: A / sqrt 2).
    low_share : float or None
        Share of the channel's energy below :data:`LOW_SHARE_HZ` (0 to 1), None when
        silent.
    overview : tuple of (peak dB, RMS dB) pairs
        :data:`OVERVIEW_POINTS` consecutive windows over the whole stem, each pair None
        where the window is silent.
    """

    index: int
    label: str | None
    peak_dbfs: float | None
    rms_dbfs: float | None
    low_share: float | None
    overview: tuple[tuple[float | None, float | None], ...]


@dataclass(frozen=True)
class StemLevels:
    """What :func:`measure_levels` found: ``frames``, ``sample_rate``, ``points`` and one
    :class:`ChannelLevels` per channel."""

    frames: int
    sample_rate: int
    points: int
    channels: tuple[ChannelLevels, ...]

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready: silent values are None (null), never infinite."""
        return {
            "frames": self.frames,
            "sample_rate": self.sample_rate,
            "points": self.points,
            "channels": [
                {
                    "index": c.index,
                    "label": c.label,
                    "peak_dbfs": c.peak_dbfs,
                    "rms_dbfs": c.rms_dbfs,
                    "low_share": c.low_share,
                    "overview": [list(p) for p in c.overview],
                }
                for c in self.channels
            ],
        }


def measure_levels(
    info: StemInfo,
    *,
    labels: Sequence[str] | None = None,
    points: int = OVERVIEW_POINTS,
    check_finite: bool = False,
    blocksize: int = LEVELS_BLOCK_FRAMES,
) -> StemLevels:
    """Measure a probed stem's levels in one pass over it, in blocks.

    Parameters
    ----------
    info : StemInfo
        From :func:`probe_stem`.
    labels : sequence of str, optional
        Channel labels in file order, copied into the result and used in messages.
    points : int
        Windows of the overview; window ``k`` holds frames ``floor(k n / points)`` up
        to ``floor((k + 1) n / points)`` of the ``n`` frames (empty, so None, when the
        stem is shorter than ``points`` frames).
    check_finite : bool
        Refuse a NaN or infinite sample (:class:`AudioError` naming file, channel and
        frame), so a float stem's check and its levels share one read.
    blocksize : int
        Frames per read.

    Returns
    -------
    StemLevels

    Notes
    -----
    ``low_share`` is the energy of the channel through a Butterworth low-pass of order
    8 at :data:`LOW_SHARE_HZ` (-3 dB there), run forwards with its state carried from
    block to block, divided by the channel's energy. A stem sampled at 240 Hz or less
    has no band above the edge: its share is 1.

    Examples
    --------
    >>> import numpy as np, tempfile, os
    >>> from earfold.renderer.io import probe_stem, write_audio
    >>> path = os.path.join(tempfile.mkdtemp(), "tone.wav")
    >>> t = np.arange(48000) / 48000
    >>> write_audio(path, (0.5 * np.sin(2 * np.pi * 1000 * t))[:, None], 48000, subtype="FLOAT")
    >>> levels = measure_levels(probe_stem([path]))
    >>> levels.channels[0].peak_dbfs, levels.channels[0].rms_dbfs
    (-6.02, -9.03)
    """
    if isinstance(points, bool) or not isinstance(points, int) or points < 1:
        raise AudioError(f"points must be a positive integer, not {points!r}")
    n, channels, fs = info.frames, info.channels, info.samplerate
    edges = [(k * n) // points for k in range(points + 1)]
    win_peak = np.zeros((points, channels))
    win_energy = np.zeros((points, channels))
    low_energy = np.zeros(channels)
    signal = scipy_signal()  # here, not at the top: listings must not load scipy.signal

    if fs > 2 * LOW_SHARE_HZ:
        sos = signal.butter(_LOW_ORDER, LOW_SHARE_HZ, fs=fs, output="sos")
        state = np.zeros((sos.shape[0], 2, channels))
    else:
        sos = None
    done = 0
    window = 0
    with StemReader(info, labels=labels, check_finite=check_finite) as reader:
        for block in reader.blocks(blocksize, reuse=True):
            x = block.astype(np.float64)
            start = 0
            while start < len(x):
                while edges[window + 1] <= done + start:
                    window += 1  # skip empty windows (a stem shorter than ``points``)
                stop = min(len(x), edges[window + 1] - done)
                part = x[start:stop]
                win_peak[window] = np.maximum(win_peak[window], np.abs(part).max(axis=0))
                win_energy[window] += np.einsum("ij,ij->j", part, part)
                start = stop
            if sos is not None:
                low, state = signal.sosfilt(sos, x, axis=0, zi=state)
                low_energy += np.einsum("ij,ij->j", low, low)
            done += len(x)
    total = win_energy.sum(axis=0)
    if sos is None:
        low_energy = total.copy()
    sizes = np.diff(edges)
    out = []
    for c in range(channels):
        overview = tuple(
            (
                _db(float(win_peak[k, c]) ** 2) if sizes[k] else None,
                _db(float(win_energy[k, c]) / sizes[k]) if sizes[k] else None,
            )
            for k in range(points)
        )
        energy = float(total[c])
        out.append(
            ChannelLevels(
                index=c,
                label=labels[c] if labels is not None and c < len(labels) else None,
                peak_dbfs=_db(float(win_peak[:, c].max()) ** 2),
                rms_dbfs=_db(energy / n) if n else None,
                low_share=round(min(float(low_energy[c]) / energy, 1.0), 4) if energy else None,
                overview=overview,
            )
        )
    return StemLevels(frames=n, sample_rate=fs, points=points, channels=tuple(out))
