"""Programme loudness, loudness range and true peak, measured in one streaming pass.

Methods
-------
* Loudness: ITU-R BS.1770-4. K-weighting (a high-frequency shelf, then a high-pass),
  mean square per channel, channel weights, ``L = -0.691 + 10 log10(sum_i G_i z_i)``.
  Integrated loudness gates 400 ms blocks stepped by 100 ms (75 % overlap): absolute gate
  -70 LKFS, then a relative gate 10 LU below the power mean of the blocks that passed;
  the result is the power mean of the blocks that pass both.
* Momentary (400 ms) and short-term (3 s) loudness every 100 ms, as in EBU Tech 3341.
* Loudness range: EBU Tech 3342. Short-term loudness every 100 ms (10 Hz), absolute gate
  -70 LUFS, relative gate 20 LU below the power mean of what passed, LRA = 95th minus
  10th percentile of the remaining values.
* True peak: BS.1770-4 Annex 2, oversampling by an interpolating FIR filter. We use our
  own filter (see :func:`interpolation_taps`), not the Annex's table.

Memory is bounded whatever the length of the programme: the meter keeps the last 3 s of
100 ms sub-block energies, plus two fixed histograms (0.01 LU bins from -70 to +40 LUFS,
each bin holding a count and the sum of block powers) for the gated average and the
loudness-range percentiles, and the plot series capped at :data:`SERIES_MAX_POINTS`
points each. The gated mean is exact except for the blocks that fall in the one bin that
holds the relative gate (they are in or out together), an error far below 0.01 LU. The
percentiles are read to the bin centre (within 0.005 LU).
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from scipy import signal
from scipy.ndimage import correlate1d

from ..blocks import check_block
from ..errors import AudioError

if TYPE_CHECKING:
    from ..layouts import Layout

__all__ = [
    "ABSOLUTE_GATE_LUFS",
    "K_WEIGHTING_48K",
    "MAX_RESULT_GAIN_DB",
    "SERIES_FLOOR_LUFS",
    "SERIES_MAX_POINTS",
    "TAPS_PER_PHASE",
    "LoudnessMeter",
    "LoudnessResult",
    "PeakInterpolator",
    "TruePeakMeter",
    "channel_weights",
    "interpolation_taps",
    "k_weighting_sos",
    "k_weighting_parameters",
    "measure_file",
    "oversampling_factor",
    "true_peak",
]

K_WEIGHTING_48K = {
    "shelf": (
        (1.53512485958697, -2.69169618940638, 1.19839281085285),
        (1.0, -1.69065929318241, 0.73248077421585),
    ),
    "highpass": ((1.0, -2.0, 1.0), (1.0, -1.99004745483398, 0.99007225036621)),
}
"""The K-weighting biquads at 48 kHz as published in ITU-R BS.1770-4 (Tables 1 and 2),
``(b, a)`` per stage."""

ABSOLUTE_GATE_LUFS = -70.0
"""Absolute gate of BS.1770-4 and EBU Tech 3342, in LUFS."""

RELATIVE_GATE_LU = -10.0
"""Relative gate of the integrated loudness (BS.1770-4), in LU."""

LRA_RELATIVE_GATE_LU = -20.0
"""Relative gate of the loudness range (EBU Tech 3342), in LU."""

LRA_PERCENTILES = (10.0, 95.0)
"""Percentiles whose difference is the loudness range (EBU Tech 3342)."""

SERIES_MAX_POINTS = 20000
"""Most points kept per plot series. At 10 Hz that is 33 minutes undecimated; beyond, the
series is halved (each point the maximum of two) as often as needed, so an hours-long
programme still yields between 10 000 and 20 000 points per series."""

SERIES_FLOOR_LUFS = -120.0
"""Value plotted for blocks of digital silence (their loudness is minus infinity, which
JSON cannot carry)."""

TAPS_PER_PHASE = 12
"""Taps per phase of the true-peak interpolator (48 taps in 4 phases, as in BS.1770-4
Annex 2)."""

_KAISER_BETA = 8.0
# Kaiser beta of the interpolator, chosen among 4 to 8 with scipy (computed here): with 8
# every phase is within 0.001 dB of unity up to fs/4, where the EBU true-peak test tones
# sit, and sines up to 20 kHz read at most 0.34 dB under their peak (0.27 dB with beta 5;
# the spacing of the points, not the filter, dominates). The largest phase gain sum(|h|)
# is 1.70 against 1.84 with beta 5, which roughly halves the oversampling work on noise:
# a chunk is skipped when its peak is 1.70 (4.6 dB) below the maximum so far.

_SUB_BLOCKS_MOMENTARY = 4  # 400 ms in 100 ms steps
_SUB_BLOCKS_SHORT_TERM = 30  # 3 s
MAX_RESULT_GAIN_DB = 70.0
"""Largest gain :meth:`LoudnessMeter.result` can apply to a measurement: blocks down to
this far under the absolute gate are kept, so that any gain up to it finds every block
the gate would pass. (A loudness target is under 0 LUFS and a render with any block
above -70 LUFS measures above it, so a delivery gain is always smaller.)"""

_HIST_LO = ABSOLUTE_GATE_LUFS - MAX_RESULT_GAIN_DB
_HIST_HI = 40.0
_HIST_STEP = 0.01
_HIST_BINS = int(round((_HIST_HI - _HIST_LO) / _HIST_STEP))
_DENSE_FRACTION = 0.3
# Above this share of chunks to oversample, every point is computed with one compiled
# correlation per phase instead of gathering chunks (measured break-even about 0.3).
_CHUNK = 8
# Frames per chunk when deciding which part of a block needs oversampling: small chunks
# skip more (on noise, about 7 % of 8-frame chunks are oversampled against 20 % of
# 32-frame ones), and the selected chunks are gathered whole, which stays cheap.


def _lufs(power: np.ndarray | float) -> np.ndarray | float:
    with np.errstate(divide="ignore"):
        return -0.691 + 10.0 * np.log10(power)


# --------------------------------------------------------------------------- K-weighting


def k_weighting_parameters() -> dict:
    """Analogue prototype parameters of the K-weighting, derived from the 48 kHz biquads.

    Each published biquad is a bilinear transform, pre-warped at its corner frequency
    ``f0`` (``K = tan(pi f0 / fs)``), of the analogue section

    * shelf: ``H(s) = (Vh S^2 + Vb S / Q + 1) / (S^2 + S / Q + 1)``, ``S = s / (2 pi f0)``;
    * high-pass: ``H(s) = g S^2 / (S^2 + S / Q + 1)``.

    This inverts that transform in closed form on the published coefficients
    (:data:`K_WEIGHTING_48K`): with normalised ``a1, a2``,
    ``K^2 = (1 + a1 + a2) / (1 - a1 + a2)``, ``a0 = 4 / (1 - a1 + a2)``,
    ``K / Q = a0 (1 - a2) / 2``, ``Vh = a0 (b0 - b1 + b2) / 4``,
    ``Vb = a0 (b0 - b2) / (2 K / Q)``, ``g = a0 b0`` (our derivation; the same form is
    used by open implementations of BS.1770, whose fitted values, recalled from the
    libebur128 source, are f0 = 1681.97 Hz, Q = 0.70718, gain 4.00 dB for the shelf and
    f0 = 38.135 Hz, Q = 0.50033 for the high-pass).

    Returns
    -------
    dict
        ``{"shelf": {"f0", "q", "vh", "vb"}, "highpass": {"f0", "q", "gain"}}``.
    """
    fs = 48000.0
    out: dict = {}
    for stage in ("shelf", "highpass"):
        b, a = (np.asarray(c, dtype=float) for c in K_WEIGHTING_48K[stage])
        k2 = (1 + a[1] + a[2]) / (1 - a[1] + a[2])
        a0 = 4.0 / (1 - a[1] + a[2])
        k = math.sqrt(k2)
        k_over_q = a0 * (1 - a[2]) / 2.0
        params = {"f0": fs / math.pi * math.atan(k), "q": k / k_over_q}
        if stage == "shelf":
            params["vh"] = a0 * (b[0] - b[1] + b[2]) / 4.0
            params["vb"] = a0 * (b[0] - b[2]) / (2.0 * k_over_q)
        else:
            params["gain"] = a0 * b[0]
        out[stage] = params
    return out


_K_PARAMS = k_weighting_parameters()


def k_weighting_sos(samplerate: float) -> np.ndarray:
    """K-weighting as second-order sections for any sample rate.

    The analogue prototype of :func:`k_weighting_parameters` is transformed again with
    the bilinear transform pre-warped at each corner frequency. At 48 kHz this gives back
    the coefficients published in BS.1770-4 (to about 1e-15). From 44.1 kHz up the
    response stays within 0.01 dB of the analogue one to 10 kHz; at low rates the
    transform's frequency warping grows (about 0.2 dB around 1-2 kHz at 8 kHz).

    Returns
    -------
    numpy.ndarray
        Shape ``(2, 6)``, for :func:`scipy.signal.sosfilt`: shelf, then high-pass.
    """
    fs = float(samplerate)
    sh, hp = _K_PARAMS["shelf"], _K_PARAMS["highpass"]

    k = math.tan(math.pi * sh["f0"] / fs)
    kq = k / sh["q"]
    a0 = 1 + kq + k * k
    shelf = [
        (sh["vh"] + sh["vb"] * kq + k * k) / a0,
        2 * (k * k - sh["vh"]) / a0,
        (sh["vh"] - sh["vb"] * kq + k * k) / a0,
        1.0,
        2 * (k * k - 1) / a0,
        (1 - kq + k * k) / a0,
    ]

    k = math.tan(math.pi * hp["f0"] / fs)
    kq = k / hp["q"]
    a0 = 1 + kq + k * k
    g = hp["gain"] / a0
    highpass = [g, -2 * g, g, 1.0, 2 * (k * k - 1) / a0, (1 - kq + k * k) / a0]
    return np.array([shelf, highpass])


def channel_weights(layout: Layout | str) -> np.ndarray:
    """BS.1770 channel weights for a loudspeaker layout, from the speaker positions.

    LFE channels weigh 0 (excluded); a speaker with ``|elevation| < 30`` and
    ``60 <= |azimuth| <= 120`` degrees weighs 1.41 (+1.5 dB); every other speaker 1.0.
    For 5.1 this is the Recommendation's table (L, R, C 1.0; Ls, Rs 1.41). The position
    rule for other layouts is as seen in open implementations of BS.1770 (confirm in the
    Recommendation).

    Parameters
    ----------
    layout : Layout or str
        A :class:`earfold.renderer.layouts.catalogue.Layout` or a layout name.

    Returns
    -------
    numpy.ndarray
        One weight per channel, in the layout's default order.
    """
    if isinstance(layout, str):
        from ..layouts import get_layout

        layout = get_layout(layout)
    weights = []
    for spk in layout.speakers:
        if spk.lfe:
            weights.append(0.0)
        elif abs(spk.elevation) < 30.0 and 60.0 <= abs(spk.azimuth) <= 120.0:
            weights.append(1.41)
        else:
            weights.append(1.0)
    return np.array(weights)


# ---------------------------------------------------------------------------- true peak


def oversampling_factor(samplerate: float) -> int:
    """Oversampling of the true-peak meter: 4x below 96 kHz, 2x below 192 kHz, else 1x.

    As BS.1770-4 Annex 2 suggests for higher rates (from memory of the Annex).
    """
    if samplerate < 96000:
        return 4
    if samplerate < 192000:
        return 2
    return 1


def interpolation_taps(factor: int) -> np.ndarray:
    """Our true-peak interpolator: ``factor * 12`` taps, ``factor`` phases of 12.

    A windowed-sinc low-pass designed with :func:`scipy.signal.firwin` (Kaiser window,
    beta 5) with its cutoff at the original Nyquist frequency, scaled by ``factor`` so
    that each phase has unity gain at DC. For 4x this is 48 taps in 4 phases, the size
    of the BS.1770-4 Annex 2 filter; the coefficients are our own design, not the
    Annex's. The phases sit between the input samples (the filter length is even), so
    the meter takes the input samples themselves into account as well.
    """
    if factor == 1:
        return np.ones(1)
    return (
        signal.firwin(factor * TAPS_PER_PHASE, 1.0 / factor, window=("kaiser", _KAISER_BETA))
        * factor
    )


class PeakInterpolator:
    """Interpolated peak values of a multichannel signal, skipping what cannot matter.

    A *point* ``q`` gathers the interpolated values whose newest input sample is ``q``
    (``factor`` of them) together with the sample ``x[q]`` itself; it depends on the
    input samples ``q - history .. q``. Used by :class:`TruePeakMeter` and by the
    true-peak limiter, so both see the same peaks.

    Attributes
    ----------
    factor : int
        Oversampling factor (:func:`oversampling_factor`).
    history : int
        Input frames before a point that it depends on (11, or 0 without oversampling).
    bound_gain : float
        The largest phase's ``sum(|h|)`` (at least 1): no point can exceed this times
        the largest input magnitude in its window (triangle inequality), which lets
        :meth:`point_peaks` skip whole chunks rigorously.
    """

    def __init__(self, samplerate: float) -> None:
        self.factor = oversampling_factor(samplerate)
        taps = interpolation_taps(self.factor)
        self.history = 0 if self.factor == 1 else TAPS_PER_PHASE - 1
        # Column p holds phase p's taps oldest-first, to meet windows x[q-11 .. q].
        phases = taps.reshape(-1, self.factor).T if self.factor > 1 else taps[None, :]
        self._matrix = np.ascontiguousarray(phases[:, ::-1].T)  # (history + 1, factor)
        self.bound_gain = float(max(1.0, np.abs(phases).sum(axis=1).max()))
        self._buffers: dict[str, np.ndarray] = {}

    def point_peaks(
        self, block: np.ndarray, threshold: float = 0.0, context: np.ndarray | None = None
    ) -> np.ndarray:
        """Peak magnitude of every point of a block, over channels, phases and the sample.

        Parameters
        ----------
        block : numpy.ndarray
            ``(n, C)`` float frames whose points are wanted. Computed in the block's
            precision (float32 is enough for metering and twice as fast).
        threshold : float
            Chunks of a channel whose rigorous bound is at most this are not computed.
        context : numpy.ndarray, optional
            ``(history, C)`` frames just before the block (silence if omitted).

        Returns
        -------
        numpy.ndarray
            ``(n,)`` float64, a new array. Every value above ``threshold`` is exact; a
            point whose value is at most ``threshold`` may read lower (0 where nothing
            was computed).

        Notes
        -----
        Working arrays are kept from call to call (blocks of a stream mostly have one
        size), since on this kind of work a fresh large array costs more in page faults
        than the arithmetic done in it. So an instance serves one thread at a time.
        """
        x = np.asarray(block)
        e = self.history
        n = x.shape[0]
        out = np.zeros(-(-n // _CHUNK) * _CHUNK)
        if n == 0:
            return out
        c = x.shape[1]
        if self.factor == 1:
            mag = np.abs(x).max(axis=1)
            return np.where(mag > threshold, mag, 0.0).astype(np.float64)
        # Channel-major copy, padded so that the window (e + 1 frames) of every point lies
        # in `span` whole chunks; numpy is fast along long contiguous rows only.
        span = -(-(_CHUNK + e) // _CHUNK)
        chunks = out.size // _CHUNK
        total = (chunks + span - 1) * _CHUNK
        xt = self._scratch("signal", (c, total), x.dtype)
        if context is not None and e:
            xt[:, :e] = np.asarray(context)[-e:].T
        else:
            xt[:, :e] = 0.0
        xt[:, e : e + n] = x.T
        xt[:, e + n :] = 0.0
        level = np.abs(xt, out=self._scratch("level", (c, total), x.dtype))
        width = 1
        while width < _CHUNK:  # pairwise maxima down to one value per chunk
            half = self._scratch(f"level/{2 * width}", (c, level.shape[1] // 2), x.dtype)
            level = np.maximum(level[:, 0::2], level[:, 1::2], out=half)
            width *= 2
        window_max = self._scratch("window", (c, chunks), x.dtype)
        window_max[...] = level[:, :chunks]
        for k in range(1, span):
            np.maximum(window_max, level[:, k : k + chunks], out=window_max)
        chans, rows = np.nonzero(self.bound_gain * window_max > threshold)
        if rows.size == 0:
            return out[:n]
        if rows.size > _DENSE_FRACTION * window_max.size:
            peak = np.zeros(n, dtype=x.dtype)
            y = self._scratch("phase", (c, e + n), x.dtype)
            for p in range(self.factor):
                correlate1d(
                    xt[:, : e + n],
                    self._matrix[:, p],
                    axis=1,
                    mode="constant",
                    origin=-((e + 1) // 2),
                    output=y,
                )  # y[j] uses xt[j .. j + e]
                np.abs(y, out=y)
                for ch in range(c):
                    np.maximum(peak, y[ch, :n], out=peak)
            np.maximum(out[:n], peak, out=out[:n])
            for ch in range(c):
                np.maximum(out[:n], np.abs(xt[ch, e : e + n]), out=out[:n])
            return out[:n]
        framed = xt.reshape(c, -1, _CHUNK)
        segments = np.concatenate([framed[chans, rows + k] for k in range(span)], axis=1)
        coef = self._matrix.astype(x.dtype)
        peak = np.zeros((rows.size, _CHUNK), dtype=x.dtype)
        term = np.empty_like(peak)
        for p in range(self.factor):
            acc = segments[:, 0:_CHUNK] * coef[0, p]
            for k in range(1, e + 1):
                np.multiply(segments[:, k : k + _CHUNK], coef[k, p], out=term)
                acc += term
            np.maximum(peak, np.abs(acc, out=acc), out=peak)
        # The samples themselves (the last frames of each window: the chunk's own frames),
        # then the channels' maxima per chunk; rows are unique within a channel.
        np.maximum(peak, np.abs(segments[:, e : e + _CHUNK]), out=peak)
        point = out.reshape(chunks, _CHUNK)
        for ch in range(c):
            sel = chans == ch
            if np.any(sel):
                r = rows[sel]
                point[r] = np.maximum(point[r], peak[sel])
        return out[:n]

    def _scratch(self, name: str, shape: tuple[int, int], dtype: np.dtype) -> np.ndarray:
        """A working array of this shape kept for the next call (contents undefined)."""
        size = shape[0] * shape[1]
        buf = self._buffers.get(name)
        if buf is None or buf.dtype != dtype or buf.size < size:
            buf = np.empty(max(size, 1), dtype=dtype)
            self._buffers[name] = buf
        return buf[:size].reshape(shape)


class TruePeakMeter:
    """Streaming true-peak meter (BS.1770-4 Annex 2 method, our interpolator).

    Parameters
    ----------
    samplerate : float
        Sample rate in Hz (sets the oversampling, :func:`oversampling_factor`).
    channels : int
        Channels per frame.

    Notes
    -----
    The reading includes the interpolated values around the last samples (the signal is
    taken as silent after its end, as in a file) and never reads below the sample peak.
    Blocks are processed whole; a chunk of 8 frames of a channel whose window peak
    times :attr:`PeakInterpolator.bound_gain` cannot exceed the maximum so far is not
    oversampled at all, which makes the meter cheap on programme material.
    """

    def __init__(self, samplerate: float, channels: int) -> None:
        self.samplerate = float(samplerate)
        self.channels = _check_channels(channels)
        self.interpolator = PeakInterpolator(samplerate)
        self._history = np.zeros((self.interpolator.history, self.channels))
        self._peak = 0.0
        self._sample_peak = 0.0
        self.frames = 0

    def process(self, block: np.ndarray) -> None:
        """Meter a ``(n, channels)`` block of float samples."""
        x = check_block(block, self.channels)
        n = x.shape[0]
        if n == 0:
            return
        sample_peak = max(float(x.max()), -float(x.min()))
        self._sample_peak = max(self._sample_peak, sample_peak)
        self._peak = max(self._peak, sample_peak)
        peaks = self.interpolator.point_peaks(x, threshold=self._peak, context=self._history)
        self._peak = max(self._peak, float(peaks.max()))
        e = self.interpolator.history
        if e:
            if n >= e:
                self._history = np.array(x[-e:], dtype=np.float64)
            else:
                self._history = np.concatenate([self._history, x])[-e:]
        self.frames += n

    @property
    def peak(self) -> float:
        """True peak so far as a linear magnitude, including the end's interpolation."""
        e = self.interpolator.history
        if not e:
            return self._peak
        peaks = self.interpolator.point_peaks(
            np.zeros((e, self.channels)), threshold=self._peak, context=self._history
        )
        return max(self._peak, float(peaks.max()))

    @property
    def sample_peak(self) -> float:
        """Largest absolute sample value so far."""
        return self._sample_peak

    @property
    def true_peak_dbtp(self) -> float:
        """True peak in dBTP (minus infinity for digital silence)."""
        return _db(self.peak)


def true_peak(x: np.ndarray, samplerate: float) -> float:
    """True peak of a whole ``(frames, channels)`` (or 1-D) signal in dBTP.

    Minus infinity for digital silence. See :class:`TruePeakMeter`.
    """
    a = np.asarray(x)
    if a.ndim == 1:
        a = a[:, None]
    meter = TruePeakMeter(samplerate, a.shape[1] if a.ndim == 2 else 0)
    meter.process(a)
    return meter.true_peak_dbtp


# ----------------------------------------------------------------------------- loudness


@dataclass(frozen=True)
class LoudnessResult:
    """What :class:`LoudnessMeter` measured.

    Loudness values are ``None`` where there is nothing to report: integrated loudness
    when no 400 ms block passes the gates (silence, or less than 400 ms of audio),
    momentary maximum under 400 ms, short-term maximum and loudness range under 3 s
    (or when every short-term value is gated), any of them for digital silence, peaks
    for digital silence. ``None`` rather than minus infinity, so the values go into JSON
    as they are.

    Attributes
    ----------
    samplerate : float
    channels : int
    frames : int
    integrated_lufs : float or None
        Gated programme loudness (BS.1770-4).
    momentary_max_lufs, short_term_max_lufs : float or None
        Largest momentary (400 ms) and short-term (3 s) loudness, 10 Hz readings.
    loudness_range_lu : float or None
        EBU Tech 3342 loudness range.
    true_peak_dbtp, sample_peak_dbfs : float or None
    momentary_series, short_term_series : tuple of float
        Readings for plots. Point ``i`` is the maximum of ``series_factor`` consecutive
        10 Hz readings; the first reading is the block that ends at 0.4 s (momentary)
        or 3 s (short-term). Silence reads :data:`SERIES_FLOOR_LUFS`.
    momentary_interval_s, short_term_interval_s : float
        Seconds between points of each series (0.1 unless decimated).
    """

    samplerate: float
    channels: int
    frames: int
    integrated_lufs: float | None
    momentary_max_lufs: float | None
    short_term_max_lufs: float | None
    loudness_range_lu: float | None
    true_peak_dbtp: float | None
    sample_peak_dbfs: float | None
    momentary_series: tuple[float, ...] = ()
    short_term_series: tuple[float, ...] = ()
    momentary_interval_s: float = 0.1
    short_term_interval_s: float = 0.1

    @property
    def duration_s(self) -> float:
        """Length of the measured audio in seconds."""
        return self.frames / self.samplerate if self.samplerate else 0.0

    def to_dict(self, series: bool = True) -> dict:
        """JSON-ready summary: loudness to 0.01 LU, peaks to 0.01 dB, series to 0.1 LU.

        Parameters
        ----------
        series : bool
            Include the plot series (``"series"`` key).
        """
        out = {
            "integrated_lufs": _round(self.integrated_lufs),
            "momentary_max_lufs": _round(self.momentary_max_lufs),
            "short_term_max_lufs": _round(self.short_term_max_lufs),
            "loudness_range_lu": _round(self.loudness_range_lu),
            "true_peak_dbtp": _round(self.true_peak_dbtp),
            "sample_peak_dbfs": _round(self.sample_peak_dbfs),
            "duration_s": round(self.duration_s, 3),
            "samplerate": self.samplerate,
            "channels": self.channels,
        }
        if series:
            out["series"] = {
                "momentary_lufs": [round(v, 1) for v in self.momentary_series],
                "momentary_interval_s": self.momentary_interval_s,
                "momentary_start_s": 0.4,
                "short_term_lufs": [round(v, 1) for v in self.short_term_series],
                "short_term_interval_s": self.short_term_interval_s,
                "short_term_start_s": 3.0,
            }
        return out


class _Histogram:
    """Block loudness as counts and power sums in 0.01 LU bins, from :data:`_HIST_LO` up.

    The gates are applied when the histogram is read, to the blocks' loudness plus a
    ``shift`` in LU: the same audio scaled by that gain (block powers scale exactly;
    a block is taken at its bin's centre, as for the relative gate).
    """

    def __init__(self) -> None:
        self.counts = np.zeros(_HIST_BINS, dtype=np.int64)
        self.power = np.zeros(_HIST_BINS)

    def add(self, power: np.ndarray) -> None:
        loud = _lufs(power)
        keep = loud > _HIST_LO
        if not np.any(keep):
            return
        idx = np.clip(((loud[keep] - _HIST_LO) / _HIST_STEP).astype(np.int64), 0, _HIST_BINS - 1)
        # Only the span of bins hit is counted and added to: the same sums as over all
        # bins (adding 0.0 changes nothing), without touching 18 000 bins per block.
        lo = int(idx.min())
        idx -= lo
        span = int(idx.max()) + 1
        self.counts[lo : lo + span] += np.bincount(idx, minlength=span)
        self.power[lo : lo + span] += np.bincount(idx, weights=power[keep], minlength=span)

    @staticmethod
    def _centres(shift: float) -> np.ndarray:
        return _HIST_LO + (np.arange(_HIST_BINS) + 0.5) * _HIST_STEP + shift

    def relative_mask(self, gate_lu: float, shift: float = 0.0) -> np.ndarray | None:
        """Bins above both gates (None if nothing passed the absolute gate)."""
        centres = self._centres(shift)
        absolute = (centres > ABSOLUTE_GATE_LUFS) & (self.counts > 0)
        total = int(self.counts[absolute].sum())
        if total == 0:
            return None
        gate = _lufs(self.power[absolute].sum() * _gain_power(shift) / total) + gate_lu
        return absolute & (centres > gate)

    def gated_loudness(self, gate_lu: float, shift: float = 0.0) -> float | None:
        mask = self.relative_mask(gate_lu, shift)
        if mask is None or not np.any(mask):
            return None
        return float(_lufs(self.power[mask].sum() * _gain_power(shift) / self.counts[mask].sum()))

    def loudness_range(self, shift: float = 0.0) -> float | None:
        mask = self.relative_mask(LRA_RELATIVE_GATE_LU, shift)
        if mask is None or not np.any(mask):
            return None
        counts = np.where(mask, self.counts, 0)
        cum = np.cumsum(counts)
        n = int(cum[-1])
        centres = self._centres(0.0)
        values = []
        for pct in LRA_PERCENTILES:
            rank = int(round((n - 1) * pct / 100.0))  # nearest rank, 0-based
            values.append(centres[int(np.searchsorted(cum, rank + 1))])
        return float(values[1] - values[0])


def _gain_power(shift_db: float) -> float:
    return 1.0 if shift_db == 0.0 else 10.0 ** (shift_db / 10.0)


class _Series:
    """A plot series capped at SERIES_MAX_POINTS by pairwise maxima.

    Readings are kept as they are (minus infinity for silence); the floor is applied
    when the series is read, after any shift.
    """

    def __init__(self) -> None:
        self.values: list[float] = []
        self.factor = 1
        self._acc = -math.inf
        self._n = 0

    def extend(self, loudness: np.ndarray) -> None:
        for v in np.asarray(loudness, dtype=float).tolist():
            self._acc = max(self._acc, v)
            self._n += 1
            if self._n == self.factor:
                self.values.append(self._acc)
                self._acc, self._n = -math.inf, 0
                if len(self.values) >= SERIES_MAX_POINTS:
                    v2 = self.values
                    self.values = [max(v2[i], v2[i + 1]) for i in range(0, len(v2), 2)]
                    self.factor *= 2

    def snapshot(self, shift: float = 0.0) -> tuple[float, ...]:
        values = self.values + ([self._acc] if self._n else [])
        return tuple(max(v + shift, SERIES_FLOOR_LUFS) for v in values)


class LoudnessMeter:
    """Streaming BS.1770-4 / EBU R 128 meter: feed blocks, then read :meth:`result`.

    Parameters
    ----------
    samplerate : float
        Sample rate in Hz (8 kHz and up).
    channels : int
        Channels per frame.
    weights : sequence of float, optional
        BS.1770 weight per channel (:func:`channel_weights` for a layout). By default
        1.0 for every channel, which is right for mono, stereo and binaural signals.
    measure_true_peak : bool
        Measure the true peak (:class:`TruePeakMeter`, attribute ``true_peak``). When
        False, ``true_peak`` is None and :meth:`result` reports ``true_peak_dbtp`` as
        None; the sample peak is still measured.

    Notes
    -----
    Filter state is carried from block to block, so any block sizes give the same
    result as one block. 100 ms sub-blocks start at frame ``k * samplerate // 10``
    (lengths differ by a frame where 100 ms is not whole); a trailing part shorter than
    a full block does not count, as in BS.1770. The true peak is measured alongside
    (:class:`TruePeakMeter`).
    """

    def __init__(
        self,
        samplerate: float,
        channels: int,
        weights: Sequence[float] | np.ndarray | None = None,
        *,
        measure_true_peak: bool = True,
    ) -> None:
        if (
            isinstance(samplerate, bool)
            or not isinstance(samplerate, (int, float, np.number))
            or not 8000 <= samplerate <= 768000
        ):
            raise AudioError(f"sample rate must be from 8000 to 768000 Hz, not {samplerate!r}")
        self.samplerate = samplerate
        self.channels = _check_channels(channels)
        if weights is None:
            w = np.ones(self.channels)
        else:
            w = np.asarray(weights, dtype=float).ravel()
            if w.shape != (self.channels,) or not np.all(np.isfinite(w)) or np.any(w < 0):
                raise AudioError(
                    f"weights must be {self.channels} finite non-negative "
                    f"numbers, one per channel, not {weights!r}"
                )
        self.weights = w
        self._sos = k_weighting_sos(samplerate)
        self._zi = np.zeros((self._sos.shape[0], self.channels, 2))  # time-last layout
        self.frames = 0
        self._sub = 0  # completed sub-blocks
        self._part_energy = 0.0
        self._part_count = 0
        keep = _SUB_BLOCKS_SHORT_TERM - 1
        self._recent_energy = np.zeros(0)  # at most `keep` most recent sub-blocks
        self._recent_count = np.zeros(0, dtype=np.int64)
        self._keep = keep
        self._gating = _Histogram()
        self._short = _Histogram()
        self._momentary = _Series()
        self._short_series = _Series()
        self._m_max = -math.inf
        self._s_max = -math.inf
        # Without the true peak (its caller measures it elsewhere, e.g. the limiter) only
        # the sample peak is kept: the oversampling is most of the meter's cost.
        self.true_peak = TruePeakMeter(samplerate, self.channels) if measure_true_peak else None
        self._sample_peak = 0.0

    def _boundary(self, k: int) -> int:
        return int(k * self.samplerate // 10)

    def process(self, block: np.ndarray) -> None:
        """Meter a ``(n, channels)`` block of float samples."""
        x = check_block(block, self.channels)
        n = x.shape[0]
        if n == 0:
            return
        if self.true_peak is not None:
            self.true_peak.process(x)
        else:
            self._sample_peak = max(self._sample_peak, float(x.max()), -float(x.min()))
        # Filtered with time last (x.T is a view): sosfilt copies the block once into
        # float64 in that layout, and squaring in place reuses the copy.
        yt, self._zi = signal.sosfilt(self._sos, x.T, axis=-1, zi=self._zi)
        sq = np.multiply(yt, yt, out=yt)  # (C, n)

        start, stop = self.frames, self.frames + n
        # Sub-block ends inside this block, relative to its first frame.
        ends = []
        k = self._sub + 1
        while self._boundary(k) <= stop:
            ends.append(self._boundary(k) - start)
            k += 1
        self.frames = stop
        starts = [0] + [c for c in ends if c < n]
        sums_c = np.add.reduceat(sq, starts, axis=1)  # per channel, per segment
        energy = (sums_c * self.weights[:, None]).sum(axis=0)
        if not ends:
            self._part_energy += float(energy[0])
            self._part_count += n
            return
        # Segments: [0, ends[0]), [ends[0], ends[1]), ..., and a trailing partial one
        # [ends[-1], n) unless the block ends on a sub-block boundary.
        complete = len(ends)
        sums = energy[:complete].copy()
        counts = np.diff(np.array([0] + ends)).astype(np.int64)
        sums[0] += self._part_energy
        counts[0] += self._part_count
        if ends[-1] < n:
            self._part_energy = float(energy[complete])
            self._part_count = n - ends[-1]
        else:
            self._part_energy, self._part_count = 0.0, 0
        self._sub += complete
        self._add_sub_blocks(sums, counts)

    def _add_sub_blocks(self, sums: np.ndarray, counts: np.ndarray) -> None:
        e = np.concatenate([self._recent_energy, sums])
        c = np.concatenate([self._recent_count, counts])
        ce = np.concatenate([[0.0], np.cumsum(e)])
        cc = np.concatenate([[0], np.cumsum(c)])
        first_new = len(self._recent_energy)  # index in e of the first new sub-block
        for size, hist, series, attr in (
            (_SUB_BLOCKS_MOMENTARY, self._gating, self._momentary, "_m_max"),
            (_SUB_BLOCKS_SHORT_TERM, self._short, self._short_series, "_s_max"),
        ):
            # Windows of `size` sub-blocks ending at each new sub-block.
            last = np.arange(first_new, len(e)) + 1
            last = last[last >= size]
            if last.size == 0:
                continue
            power = (ce[last] - ce[last - size]) / (cc[last] - cc[last - size])
            hist.add(power)
            loud = _lufs(power)
            series.extend(loud)
            setattr(self, attr, max(getattr(self, attr), float(np.max(loud))))
        self._recent_energy = e[-self._keep :]
        self._recent_count = c[-self._keep :]

    def result(self, gain_db: float = 0.0) -> LoudnessResult:
        """The measurement so far (the meter can keep going afterwards).

        Parameters
        ----------
        gain_db : float
            Report instead the measurement of the same audio scaled by this gain, up to
            :data:`MAX_RESULT_GAIN_DB`: loudness values move by the gain, block powers
            scale exactly and both gates are applied to the scaled blocks (each taken at
            its 0.01 LU bin, as the relative gate always does), peaks scale. This is
            what metering the scaled audio reads, to float rounding.
        """
        shift = float(gain_db)
        if not math.isfinite(shift) or shift > MAX_RESULT_GAIN_DB:
            raise AudioError(
                f"gain_db must be a finite number up to {MAX_RESULT_GAIN_DB:g} dB, not {gain_db!r}"
            )
        tp = self.true_peak
        if tp is None:
            true_peak_dbtp, sample_peak = None, self._sample_peak
        else:
            true_peak_dbtp, sample_peak = _finite(_db(tp.peak) + shift), tp.sample_peak
        return LoudnessResult(
            samplerate=self.samplerate,
            channels=self.channels,
            frames=self.frames,
            integrated_lufs=self._gating.gated_loudness(RELATIVE_GATE_LU, shift),
            momentary_max_lufs=_finite(self._m_max + shift),
            short_term_max_lufs=_finite(self._s_max + shift),
            loudness_range_lu=self._short.loudness_range(shift),
            true_peak_dbtp=true_peak_dbtp,
            sample_peak_dbfs=_finite(_db(sample_peak) + shift),
            momentary_series=self._momentary.snapshot(shift),
            short_term_series=self._short_series.snapshot(shift),
            momentary_interval_s=round(0.1 * self._momentary.factor, 6),
            short_term_interval_s=round(0.1 * self._short_series.factor, 6),
        )


def measure_file(
    path: str | os.PathLike[str] | Sequence[str | os.PathLike[str]],
    weights: Sequence[float] | np.ndarray | None = None,
    blocksize: int = 65536,
) -> LoudnessResult:
    """Measure a file (or the mono files of one stem) in one streaming pass.

    Parameters
    ----------
    path : path-like or sequence of path-like
        One file, or several mono files read as the channels of one stem
        (:func:`earfold.renderer.io.audio.probe_stem`).
    weights : sequence of float, optional
        Channel weights (:func:`channel_weights`); 1.0 per channel by default.
    blocksize : int
        Frames per read; memory depends on it, not on the file's length.

    Raises
    ------
    AudioError
        If the file cannot be read, or the weights do not fit its channels.
    """
    from ..io import StemReader, probe_stem

    info = probe_stem(path)
    meter = LoudnessMeter(info.samplerate, info.channels, weights)
    with StemReader(info) as reader:
        for block in reader.blocks(blocksize, reuse=True):
            meter.process(block)
    return meter.result()


# ------------------------------------------------------------------------------ helpers


def _check_channels(channels: object) -> int:
    if isinstance(channels, bool) or not isinstance(channels, (int, np.integer)) or channels < 1:
        raise AudioError(f"channels must be a positive integer, not {channels!r}")
    return int(channels)


def _row_max(a: np.ndarray) -> np.ndarray:
    """Maximum of each row of a 2-D array, as float64.

    Column by column with np.maximum: numpy's own reduction over a short last axis is
    some fifty times slower (measured).
    """
    out = np.array(a[:, 0], dtype=np.float64)
    for k in range(1, a.shape[1]):
        np.maximum(out, a[:, k], out=out)
    return out


def _db(value: float) -> float:
    return 20.0 * math.log10(value) if value > 0 else -math.inf


def _finite(value: float) -> float | None:
    return value if math.isfinite(value) else None


def _round(value: float | None, digits: int = 2) -> float | None:
    return None if value is None else round(float(value), digits)
