"""The report's ``plots`` section: compact curves for the web page to draw.

Three kinds of curve, each bounded in size whatever the length of the render:

* **Loudness over time** -- momentary (400 ms) and short-term (3 s) loudness of the
  delivered file (BS.1770-4 / EBU Tech 3341), at most :data:`LOUDNESS_POINTS` points per
  series. When the delivery stage ran, its meter's 10 Hz series are reused and thinned by
  taking the maximum of each group of consecutive readings (so a peak stays visible);
  without a delivery stage the file is metered here.
* **The two ears' spectra** -- long-term average level of the left and right ear signal
  in one-third-octave bands, base-10 centres ``1000 * 10**(k / 10)`` Hz with edges
  ``fc * 10**(+-1/20)`` (IEC 61260-1), from Welch's averaged periodogram (Hann window,
  50 % overlap; Welch, IEEE Trans. Audio Electroacoust. 15, 1967). A band's figure is
  ``10 log10`` of its mean-square level, so a full-scale sine reads -3.01 dB.
* **The room's energy decay** per octave band -- Schroeder's backward integral of the
  squared impulse response (Schroeder, JASA 37, 409, 1965), summed over both ears, in dB
  re its value at time 0, for the binaural room response of one loudspeaker (the same
  one whose RT60 the room section reports). Only when a room was used.

:func:`plot_section` builds the whole section; :func:`earfold.renderer.render.render`
calls it last. After a delivery stage it reads nothing: the loudness series are the
delivery's and the spectrum was fed the delivered samples as they were written
(:class:`OutputSpectrum`). Without one, it reads the output file once.
"""

from __future__ import annotations

import math
import os
import time
from collections.abc import Callable
from typing import TYPE_CHECKING, Any

import numpy as np
import scipy.fft
from numpy.typing import NDArray

from ..loudness import LoudnessMeter
from ._decay import DECAY_FLOOR_DB, DECAY_POINTS, energy_decay, schroeder_db

if TYPE_CHECKING:
    from .plan import RenderPlan

__all__ = [
    "DECAY_FLOOR_DB",
    "DECAY_POINTS",
    "LOUDNESS_POINTS",
    "OutputSpectrum",
    "SpectrumMeter",
    "energy_decay",
    "plot_section",
    "schroeder_db",
    "thin_series",
    "third_octave_bands",
]

LOUDNESS_POINTS = 1200
"""Most points per loudness series: about one per pixel of a wide plot; 2 hours of
programme then plot at 6 s per point (each the loudest reading of its 6 s)."""

SPECTRUM_LEVEL_FLOOR_DB = -200.0
"""Level reported for a band with no energy at all (digital silence)."""

SPECTRUM_SEGMENTS = 96
"""Most segments the report's spectrum analyses (about 65 s of audio at 48 kHz, evenly
spread over the render): the long-term average of a longer render is estimated from that
many, so the plots cost the same whatever the length (common practice for display
spectra; Welch's estimate converges as 1/sqrt(segments))."""

_LOWEST_BAND_HZ = 20.0
_READ_FRAMES = 1 << 16


def third_octave_bands(
    samplerate: float,
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """One-third-octave bands from 20 Hz to the highest whose upper edge is below Nyquist.

    Returns
    -------
    centres, lower, upper : ndarray
        Exact base-10 centre frequencies ``1000 * 10**(k / 10)`` and band edges
        ``fc * 10**(-1/20)``, ``fc * 10**(1/20)`` (IEC 61260-1), in Hz.
    """
    k = np.arange(-17, 14)  # 19.95 Hz ... 19.95 kHz
    centres = 1000.0 * 10.0 ** (k / 10.0)
    lower, upper = centres * 10.0 ** (-1 / 20), centres * 10.0 ** (1 / 20)
    keep = (centres >= _LOWEST_BAND_HZ * 0.99) & (upper < samplerate / 2)
    return centres[keep], lower[keep], upper[keep]


def periodic_hann(n: int) -> NDArray[np.float64]:
    """The periodic Hann window of ``n`` points, ``0.5 - 0.5 cos(2 pi k / n)``: the
    DFT-even window of Welch's method (Harris, Proc. IEEE 66(1), 1978), equal to
    ``scipy.signal.get_window("hann", n)`` (a test compares them), in numpy alone."""
    return 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(n) / n)


class SpectrumMeter:
    """Long-term average spectrum of a multichannel signal, fed block by block.

    Welch's method: Hann-windowed segments of ``nfft`` frames with 50 % overlap, whose
    periodograms are averaged; the periodic Hann window at 50 % overlap weighs every
    sample alike. Block sizes do not change the result. A signal shorter than one
    segment is analysed as a single Hann-windowed segment of its own length.

    Parameters
    ----------
    samplerate : float
    channels : int
    nfft : int, optional
        Segment length; by default the power of two at or above 0.68 s of audio (32768 at
        44.1 and 48 kHz: 1.5 Hz bins, so the narrowest band, at 20 Hz, spans 3 bins).
    stride : int, optional
        Analyse every ``stride``-th segment only (1, the default: all of them, which is
        Welch's method exactly). :meth:`for_length` picks it from a known length.
    """

    @classmethod
    def for_length(
        cls, samplerate: float, channels: int, frames: int, max_segments: int = SPECTRUM_SEGMENTS
    ) -> SpectrumMeter:
        """A meter that analyses at most ``max_segments`` segments of ``frames``, evenly spread."""
        meter = cls(samplerate, channels)
        total = (frames - meter.nfft) // meter._hop + 1 if frames >= meter.nfft else 0
        meter.stride = max(1, -(-total // max_segments))
        return meter

    def needs(self, first: int, stop: int) -> bool:
        """Whether frames ``first`` to ``stop`` of the stream (from its start, not from
        what was fed so far) fall in a segment the meter analyses; frames no such segment
        holds never enter the result, so they may be fed as silence."""
        if stop <= first:
            return False
        span = self.stride * self._hop  # frames between the starts of analysed segments
        # The first analysed segment that ends after `first`, and whether it starts
        # before `stop`.
        k = max(0, (first - self.nfft) // span + 1)
        return k * span < stop

    def __init__(
        self, samplerate: float, channels: int, nfft: int | None = None, stride: int = 1
    ) -> None:
        self.samplerate = float(samplerate)
        self.channels = int(channels)
        self.nfft = int(nfft or 1 << int(math.ceil(math.log2(0.68 * samplerate))))
        self._window = periodic_hann(self.nfft)
        self._window32 = self._window.astype(np.float32)
        self._hop = self.nfft // 2
        self._buffer = np.zeros((0, self.channels), dtype=np.float32)
        self._power = np.zeros((self.nfft // 2 + 1, self.channels))
        self._segments = 0  # segments analysed
        self._seen = 0  # segments passed, analysed or not
        self.stride = max(1, int(stride))
        self.frames = 0

    def process(self, block: NDArray[np.floating[Any]]) -> None:
        """Add a ``(n, channels)`` block."""
        x = np.asarray(block, dtype=np.float32).reshape(-1, self.channels)
        self.frames += len(x)
        buf = np.concatenate([self._buffer, x]) if len(self._buffer) else x
        n_seg = (len(buf) - self.nfft) // self._hop + 1 if len(buf) >= self.nfft else 0
        if n_seg > 0:
            # Segments as strided views of the buffer: (segments, channels, nfft).
            view = np.lib.stride_tricks.sliding_window_view(buf, self.nfft, axis=0)
            # The segments of this call whose overall index is a multiple of the stride.
            first = -self._seen % self.stride
            picked = range(first, n_seg, self.stride)
            if len(picked):
                starts = slice(
                    first * self._hop, (n_seg - 1) * self._hop + 1, self.stride * self._hop
                )
                segs = view[starts] * self._window32
                # float32 FFTs (scipy keeps single precision, numpy would not): level
                # figures to 0.01 dB need far less than float32's 1e-7; sums in float64.
                spec = scipy.fft.rfft(segs, axis=-1)
                power = spec.real**2 + spec.imag**2
                self._power += power.sum(axis=0, dtype=np.float64).T
                self._segments += len(picked)
            self._seen += n_seg
            buf = buf[n_seg * self._hop :]
        self._buffer = buf.copy()

    def mean_square(self) -> tuple[NDArray[np.floating[Any]], NDArray[np.floating[Any]]]:
        """Frequencies (Hz) and the mean-square level per rfft bin, one column per channel.

        The bins of a column sum to the signal's mean square (Parseval, one-sided: every
        bin but DC and Nyquist counted twice).
        """
        if self._segments:
            power, window, n = self._power / self._segments, self._window, self.nfft
        elif len(self._buffer):
            n_own = len(self._buffer)
            window = periodic_hann(n_own) if n_own > 1 else np.ones(1)
            power = (
                np.abs(
                    np.fft.rfft(
                        self._buffer.astype(np.float64) * window[:, None], n=self.nfft, axis=0
                    )
                )
                ** 2
            )
            n = self.nfft
        else:
            return np.fft.rfftfreq(self.nfft, 1 / self.samplerate), np.zeros_like(self._power)
        scale = np.full(power.shape[0], 2.0)
        scale[0] = 1.0
        if self.nfft % 2 == 0:
            scale[-1] = 1.0
        # sum_n (w x)^2 = (1/N) sum_k |X_k|^2, and the window's own energy is sum w^2.
        ms = power * scale[:, None] / (n * np.sum(window**2))
        return np.fft.rfftfreq(self.nfft, 1 / self.samplerate), ms

    def band_levels(self) -> dict[str, Any]:
        """One-third-octave band levels (dB of mean square) per channel, JSON-ready."""
        freqs, ms = self.mean_square()
        centres, lower, upper = third_octave_bands(self.samplerate)
        levels = []
        for lo, hi in zip(lower, upper):
            band = (freqs >= lo) & (freqs < hi)
            p = ms[band].sum(axis=0)
            levels.append([_db10(v) for v in p])
        per_channel = np.array(levels).T if levels else np.zeros((self.channels, 0))
        return {
            "centres_hz": [round(float(c), 2) for c in centres],
            "levels_db": [[round(float(v), 2) for v in row] for row in per_channel],
        }


def thin_series(
    values: list[float] | tuple[float, ...], interval_s: float, max_points: int = LOUDNESS_POINTS
) -> tuple[list[float], float]:
    """At most ``max_points`` values: the maximum of each group of ``k`` consecutive ones.

    Returns the thinned values and their new interval (``k * interval_s``).
    """
    vals = list(values)
    k = max(1, math.ceil(len(vals) / max_points)) if vals else 1
    if k == 1:
        return [round(float(v), 1) for v in vals], interval_s
    out = [round(float(max(vals[i : i + k])), 1) for i in range(0, len(vals), k)]
    return out, round(interval_s * k, 6)


def _loudness(
    series: dict[str, Any], delivery: dict[str, Any] | None, integrated: float | None
) -> dict[str, Any]:
    m, m_dt = thin_series(series["momentary_lufs"], series["momentary_interval_s"])
    s, s_dt = thin_series(series["short_term_lufs"], series["short_term_interval_s"])
    return {
        "what": "delivered file, both ears (BS.1770-4); each point the loudest reading of "
        "its interval",
        "momentary_lufs": m,
        "momentary_interval_s": m_dt,
        "momentary_start_s": series.get("momentary_start_s", 0.4),
        "short_term_lufs": s,
        "short_term_interval_s": s_dt,
        "short_term_start_s": series.get("short_term_start_s", 3.0),
        "integrated_lufs": integrated,
        "target_lufs": None if delivery is None else delivery.get("target_lufs"),
    }


class OutputSpectrum:
    """The report's spectrum of a file, fed with its samples as they are written.

    Called with blocks of any length as the file holds them and the function that
    decodes them (the delivery stage's ``observe``), it hands the meter the same blocks
    :func:`plot_section` would read from the finished file, so the figures are those of
    reading it, bit for bit, and the file need not be read. Blocks no analysed segment
    holds go in as silence, not decoded (they never count).

    Parameters
    ----------
    samplerate : float
    channels : int
    frames : int
        The file's length (the segments analysed depend on it).
    """

    def __init__(self, samplerate: float, channels: int, frames: int) -> None:
        self.meter = SpectrumMeter.for_length(samplerate, channels, frames)
        self.frames = int(frames)
        self._held: list[NDArray[Any]] = []
        self._count = 0  # frames held
        self._done = 0  # frames handed to the meter
        self._decode: Callable[[NDArray[Any]], NDArray[np.float32]] | None = None

    def __call__(
        self, block: NDArray[Any], decode: Callable[[NDArray[Any]], NDArray[np.float32]]
    ) -> None:
        """Take the next frames of the file, as written, and the function that decodes
        them into the samples reading the file gives."""
        self._decode = decode
        self._held.append(block)
        self._count += len(block)
        while self._count >= _READ_FRAMES:
            self._hand(_READ_FRAMES)

    def finish(self) -> SpectrumMeter | None:
        """Hand over the last frames and return the meter, which then holds the whole
        file's figures; None if the frames fed were not the file's length (then the
        file is to be read instead)."""
        if self._count:
            self._hand(self._count)
        return self.meter if self._done == self.frames else None

    def _hand(self, n: int) -> None:
        whole = self._held[0] if len(self._held) == 1 else np.concatenate(self._held)
        block, rest = whole[:n], whole[n:]
        self._held = [rest] if len(rest) else []
        self._count -= n
        if self.meter.needs(self._done, self._done + n):
            assert self._decode is not None
            self.meter.process(self._decode(block))
        else:
            self.meter.process(np.zeros(block.shape, dtype=np.float32))
        self._done += n


def plot_section(
    plan: RenderPlan,
    output: str | os.PathLike[str],
    delivery: dict[str, Any] | None,
    spectrum: OutputSpectrum | None = None,
) -> dict[str, Any]:
    """The report's ``plots`` section for a finished render.

    Parameters
    ----------
    plan : RenderPlan
        The render's plan (for the room response).
    output : path-like
        The delivered file (two channels); read once, in blocks.
    delivery : dict or None
        The report's delivery section; its loudness series are reused when present.
    spectrum : OutputSpectrum, optional
        The output's spectrum, fed while the file was written; with it and the
        delivery's series the file is not read at all.

    Returns
    -------
    dict
        ``loudness``, ``spectra`` (``ears``: left, right), ``room_decay`` (None without a
        room) and ``seconds`` (time spent here).
    """
    from ..io import StemReader, probe_stem

    t0 = time.perf_counter()
    info = probe_stem([output])
    series = None if delivery is None else delivery.get("output", {}).get("series")
    meter = (
        None
        if series is not None
        else LoudnessMeter(info.samplerate, info.channels, measure_true_peak=False)
    )
    fed = None if meter is not None or spectrum is None else spectrum.finish()
    if fed is not None and (fed.frames, fed.channels) == (info.frames, info.channels):
        spectrum_meter = fed
    else:
        spectrum_meter = SpectrumMeter.for_length(info.samplerate, info.channels, info.frames)
        # With the loudness series from the delivery stage, only the segments the
        # spectrum analyses are read: at most SPECTRUM_SEGMENTS, a third of a 600 s
        # render.
        wanted = spectrum_meter.needs if meter is None else None
        with StemReader(info) as reader:
            for block in reader.blocks(_READ_FRAMES, reuse=True, wanted=wanted):
                spectrum_meter.process(block)
                if meter is not None:
                    meter.process(block)
    if meter is not None:
        measured = meter.result()
        series = measured.to_dict()["series"]
        integrated = (
            None if measured.integrated_lufs is None else round(measured.integrated_lufs, 2)
        )
    else:
        assert delivery is not None  # the series came from it
        integrated = delivery["output"].get("integrated_lufs")
    bands = spectrum_meter.band_levels()
    decay = plan.room_decay
    assert series is not None
    return {
        "loudness": _loudness(series, delivery, integrated),
        "spectra": {
            "what": "long-term average level per one-third-octave band (IEC 61260-1 "
            "centres), dB of mean square re full scale (a full-scale sine reads "
            "-3.01 dB); Welch, Hann, 50 % overlap, at most "
            f"{SPECTRUM_SEGMENTS} segments evenly spread",
            "ears": ["left", "right"][: info.channels],
            "nfft": spectrum_meter.nfft,
            "segments": spectrum_meter._segments,
            **bands,
        },
        "room_decay": decay,
        "seconds": round(time.perf_counter() - t0, 4),
    }


def _db10(power: float) -> float:
    return 10.0 * math.log10(power) if power > 0 else SPECTRUM_LEVEL_FLOOR_DB
