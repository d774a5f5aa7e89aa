"""Measuring files: one streaming pass per file, and the summary the command line prints."""

from __future__ import annotations

import os
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import NDArray

from ._kweighting import channel_weights
from ._meter import LoudnessMeter, LoudnessResult

if TYPE_CHECKING:
    from ..io import StemInfo
    from ..layouts import Layout

__all__ = [
    "LayoutMeasurement",
    "format_measurement",
    "measure_file",
    "measure_for_layout",
]

_Paths = str | os.PathLike[str] | Sequence[str | os.PathLike[str]]


def measure_file(
    path: _Paths,
    weights: Sequence[float] | NDArray[np.floating[Any]] | None = None,
    blocksize: int = 65536,
) -> LoudnessResult:
    """Measure a file (or the mono files of one stem) in one streaming pass.

    Parameters
    ----------
    path : path-like or sequence of path-like
        One file, or several mono files read as the channels of one stem
        (:func:`earfold.renderer.io.probe_stem`).
    weights : sequence of float, optional
        Channel weights (:func:`channel_weights`); 1.0 per channel by default.
    blocksize : int
        Frames per read; memory depends on it, not on the file's length.

    Returns
    -------
    LoudnessResult

    Raises
    ------
    AudioError
        If the file cannot be read, or the weights do not fit its channels.

    Examples
    --------
    ITU-R BS.1770-4 states that a 0 dB FS 1 kHz sine on one channel (left, centre or
    right) reads -3.01 LKFS. The -0.691 of its loudness formula cancels the K-weighting's
    gain at 997 Hz, the usual "1 kHz" test-tone frequency, where the meter reads exactly
    that; at 1000 Hz itself the K-weighting is 0.007 dB higher:

    >>> import tempfile
    >>> from pathlib import Path
    >>> import numpy as np
    >>> from earfold.renderer.io import write_audio
    >>> t = np.arange(5 * 48000) / 48000
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     readings = []
    ...     for hz in (997, 1000):
    ...         sine = np.sin(2 * np.pi * hz * t).astype(np.float32)[:, None]
    ...         path = Path(folder) / f"sine-{hz}.wav"
    ...         write_audio(path, sine, 48000, subtype="FLOAT")
    ...         readings.append(round(measure_file(path).integrated_lufs, 2))
    >>> readings
    [-3.01, -3.0]
    """
    from ..io import probe_stem

    info = probe_stem(path)
    return _measure(info, weights, blocksize)


@dataclass(frozen=True)
class LayoutMeasurement:
    """A file's measurement, and whether a layout's channel weights were applied to it.

    Attributes
    ----------
    result : LoudnessResult
    layout : str or None
        Name of the layout asked for (None: none was).
    layout_channels : int or None
        Its channel count.
    weighted : bool
        True when the layout's weights (:func:`channel_weights`) were applied; False when
        the file was measured with plain weights, 1.0 per channel.
    """

    result: LoudnessResult
    layout: str | None
    layout_channels: int | None
    weighted: bool

    @property
    def weights_text(self) -> str:
        """One line saying which weights were applied, and why."""
        if self.weighted:
            return f"layout {self.layout} (BS.1770 channel weights)"
        if self.layout is None:
            return "plain, 1.0 per channel"
        files = self.result.channels
        return (
            f"plain, 1.0 per channel ({files} channel{'s' if files != 1 else ''}, "
            f"not the {self.layout_channels} of layout {self.layout})"
        )

    def to_dict(self, series: bool = True) -> dict[str, Any]:
        """JSON-ready: the weights used (``"layout"`` or ``"plain"``) and the measurement.

        ``weights_layout`` names the layout whose weights were applied (None for plain).
        """
        return {
            "channel_weights": "layout" if self.weighted else "plain",
            "weights_layout": self.layout if self.weighted else None,
            **self.result.to_dict(series=series),
        }


def measure_for_layout(
    path: _Paths, layout: Layout | str | None, blocksize: int = 65536
) -> LayoutMeasurement:
    """Measure a file with a layout's channel weights where they fit it.

    The layout's weights apply only to a file with as many channels as the layout (a
    loudspeaker stem of it); any other file, such as the two-channel render of that
    stem, is measured with plain weights, 1.0 per channel, which is right for mono,
    stereo and binaural signals.

    Parameters
    ----------
    path : path-like or sequence of path-like
        As for :func:`measure_file`.
    layout : Layout, str or None
        A layout or a layout name (:func:`earfold.renderer.layouts.get_layout`); None
        measures with plain weights.
    blocksize : int
        Frames per read.

    Returns
    -------
    LayoutMeasurement

    Raises
    ------
    AudioError
        If the file cannot be read.
    LayoutError
        If the layout is unknown.
    """
    from ..io import probe_stem
    from ..layouts import get_layout

    chosen = get_layout(layout) if isinstance(layout, str) else layout
    info = probe_stem(path)
    if chosen is None:
        return LayoutMeasurement(_measure(info, None, blocksize), None, None, False)
    weighted = info.channels == chosen.channels
    weights = channel_weights(chosen) if weighted else None
    return LayoutMeasurement(
        _measure(info, weights, blocksize), chosen.name, chosen.channels, weighted
    )


def _measure(
    info: StemInfo,
    weights: Sequence[float] | NDArray[np.floating[Any]] | None,
    blocksize: int,
) -> LoudnessResult:
    from ..io import StemReader

    meter = LoudnessMeter(info.samplerate, info.channels, weights)
    with StemReader(info) as reader:
        for block in reader.blocks(blocksize, reuse=True):
            meter.process(block)
    return meter.result()


def format_measurement(result: LoudnessResult, weights: str | None = None) -> str:
    """A few aligned lines summarising a measurement, for the command line.

    Parameters
    ----------
    result : LoudnessResult
    weights : str, optional
        Which channel weights were applied (:attr:`LayoutMeasurement.weights_text`); a
        line of its own when given.
    """

    def level(value: float | None, unit: str, missing: str) -> str:
        return f"{value:7.1f} {unit}" if value is not None else f"    n/a ({missing})"

    short = "under 3 s of audio" if result.duration_s < 3.0 else "all gated"
    lines = [
        ("integrated", level(result.integrated_lufs, "LUFS", "silent or under 0.4 s")),
        ("loudness range", level(result.loudness_range_lu, "LU", short)),
        ("momentary max", level(result.momentary_max_lufs, "LUFS", "under 0.4 s of audio")),
        ("short-term max", level(result.short_term_max_lufs, "LUFS", "under 3 s of audio")),
        ("true peak", level(result.true_peak_dbtp, "dBTP", "digital silence")),
        ("sample peak", level(result.sample_peak_dbfs, "dBFS", "digital silence")),
        (
            "duration",
            f"{result.duration_s:7.1f} s ({result.samplerate:g} Hz, "
            f"{result.channels} channel{'s' if result.channels != 1 else ''})",
        ),
    ]
    if weights is not None:
        lines.append(("channel weights", weights))
    width = max(len(name) for name, _ in lines)
    return "\n".join(f"{name:<{width}}  {text}" for name, text in lines)
