"""Programme loudness, loudness range and true peak, measured in one streaming pass.

Methods
-------
* Loudness: ITU-R BS.1770-4. K-weighting (a high-frequency shelf, then a high-pass),
  mean square per channel, channel weights, ``L = -0.691 + 10 log10(sum_i G_i z_i)``.
  The K-weighting's two biquads are applied as their impulse response (cut where the
  rest sums to 1e-10) by overlap-save FFT convolution (:mod:`._kfilter`): no
  ``scipy.signal`` to import, and faster than the recursion; loudness within 1e-6 LU
  of it. Channels of weight 0 are not filtered.
  Integrated loudness gates 400 ms blocks stepped by 100 ms (75 % overlap): absolute gate
  -70 LKFS, then a relative gate 10 LU below the power mean of the blocks that passed;
  the result is the power mean of the blocks that pass both.
* Momentary (400 ms) and short-term (3 s) loudness every 100 ms, as in EBU Tech 3341.
* Loudness range: EBU Tech 3342. Short-term loudness every 100 ms (10 Hz), absolute gate
  -70 LUFS, relative gate 20 LU below the power mean of what passed, LRA = 95th minus
  10th percentile of the remaining values.
* True peak: BS.1770-4 Annex 2, oversampling by an interpolating FIR filter
  (:mod:`._true_peak`, our own filter, not the Annex's table).

Memory is bounded whatever the length of the programme: the meter keeps the last 3 s of
100 ms sub-block energies, and the block loudness goes into fixed histograms and capped
series (:mod:`._gating`).
"""

from __future__ import annotations

import copy
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..blocks import check_block
from ..errors import AudioError, shown
from ._gating import (
    MAX_RESULT_GAIN_DB,
    RELATIVE_GATE_LU,
    BlockHistogram,
    LoudnessSeries,
)
from ._kfilter import KWeightingSquares
from ._levels import (
    amplitude_db,
    check_channels,
    finite_or_none,
    power_lufs,
    round_or_none,
)
from ._true_peak import TruePeakMeter

__all__ = ["LoudnessMeter", "LoudnessResult"]

_SUB_BLOCKS_MOMENTARY = 4  # 400 ms in 100 ms steps
_SUB_BLOCKS_SHORT_TERM = 30  # 3 s


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

    def to_dict(self, series: bool = True) -> dict[str, Any]:
        """JSON-ready summary: loudness to 0.01 LU, peaks to 0.01 dB, series to 0.1 LU.

        Parameters
        ----------
        series : bool
            Include the plot series (``"series"`` key).
        """
        out: dict[str, Any] = {
            "integrated_lufs": round_or_none(self.integrated_lufs),
            "momentary_max_lufs": round_or_none(self.momentary_max_lufs),
            "short_term_max_lufs": round_or_none(self.short_term_max_lufs),
            "loudness_range_lu": round_or_none(self.loudness_range_lu),
            "true_peak_dbtp": round_or_none(self.true_peak_dbtp),
            "sample_peak_dbfs": round_or_none(self.sample_peak_dbfs),
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
    result as one block (the filter works on a fixed grid of segments; frames waiting
    for a segment are measured as the end of the signal when :meth:`result` is read).
    100 ms sub-blocks start at frame ``k * samplerate // 10`` (lengths differ by a frame
    where 100 ms is not whole); a trailing part shorter than a full block does not
    count, as in BS.1770. The true peak is measured alongside
    (:class:`TruePeakMeter`).
    """

    def __init__(
        self,
        samplerate: float,
        channels: int,
        weights: Sequence[float] | NDArray[np.floating[Any]] | None = None,
        *,
        measure_true_peak: bool = True,
    ) -> None:
        if (
            isinstance(samplerate, bool)
            or not isinstance(samplerate, (int, float, np.number))
            or not 8000 <= samplerate <= 768000
        ):
            raise AudioError(f"sample rate must be from 8000 to 768000 Hz, not {shown(samplerate)}")
        self.samplerate = samplerate
        self.channels = check_channels(channels)
        if weights is None:
            w = np.ones(self.channels)
        else:
            w = np.asarray(weights, dtype=float).ravel()
            if w.shape != (self.channels,) or not np.all(np.isfinite(w)) or np.any(w < 0):
                # The count or the kind of the values, never the array itself.
                got = (
                    f"{w.size} value{'s' if w.size != 1 else ''}"
                    if w.shape != (self.channels,)
                    else "negative or non-finite values"
                )
                raise AudioError(
                    f"weights must be {self.channels} finite non-negative "
                    f"numbers, one per channel; got {got}"
                )
        self.weights = w
        # Channels of weight 0 (LFE) add nothing to the loudness: not filtered at all.
        active = w > 0.0
        self._filter = KWeightingSquares(samplerate, active)
        self._filtered_weights = w[active]
        self.frames = 0
        self._done = 0  # frames filtered and accounted (the rest wait in the filter)
        self._sub = 0  # completed sub-blocks
        self._part_energy = 0.0
        self._part_count = 0
        keep = _SUB_BLOCKS_SHORT_TERM - 1
        self._recent_energy = np.zeros(0)  # at most `keep` most recent sub-blocks
        self._recent_count = np.zeros(0, dtype=np.int64)
        self._keep = keep
        self._gating = BlockHistogram()
        self._short = BlockHistogram()
        self._momentary = LoudnessSeries()
        self._short_series = LoudnessSeries()
        self._m_max = -math.inf
        self._s_max = -math.inf
        # Without the true peak (its caller measures it elsewhere, e.g. the limiter) only
        # the sample peak is kept: the oversampling is most of the meter's cost.
        self.true_peak = TruePeakMeter(samplerate, self.channels) if measure_true_peak else None
        self._sample_peak = 0.0

    def _boundary(self, k: int) -> int:
        return int(k * self.samplerate // 10)

    def process(self, block: NDArray[np.floating[Any]]) -> None:
        """Meter a ``(n, channels)`` block of float samples."""
        x = check_block(block, self.channels)
        n = x.shape[0]
        if n == 0:
            return
        if self.true_peak is not None:
            self.true_peak.process(x)
        else:
            self._sample_peak = max(self._sample_peak, float(x.max()), -float(x.min()))
        self.frames += n
        self._account(self._filter.push(x))

    def _account(self, sq: NDArray[np.float64]) -> None:
        """Add the squared K-weighted frames that follow those accounted so far."""
        n = sq.shape[1]
        if n == 0:
            return
        start, stop = self._done, self._done + n
        # Sub-block ends inside these frames, relative to the first.
        ends = []
        k = self._sub + 1
        while self._boundary(k) <= stop:
            ends.append(self._boundary(k) - start)
            k += 1
        self._done = stop
        starts = [0] + [c for c in ends if c < n]
        sums_c = np.add.reduceat(sq, starts, axis=1)  # per channel, per segment
        energy = (sums_c * self._filtered_weights[:, None]).sum(axis=0)
        if not ends:
            self._part_energy += float(energy[0])
            self._part_count += n
            return
        # Segments: [0, ends[0]), [ends[0], ends[1]), ..., and a trailing partial one
        # [ends[-1], n) unless the frames end on a sub-block boundary.
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

    def _add_sub_blocks(self, sums: NDArray[np.float64], counts: NDArray[np.int64]) -> None:
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
            loud = power_lufs(power)
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
                f"gain_db must be a finite number up to {MAX_RESULT_GAIN_DB:g} dB, "
                f"not {shown(gain_db)}"
            )
        # Frames still waiting for a whole hop of the filter are measured as if the
        # signal ended there, on a copy: the meter itself goes on as if not asked.
        state = self
        tail = self._filter.pending()
        if tail.shape[1]:
            state = copy.copy(self)
            for name in ("_gating", "_short", "_momentary", "_short_series"):
                setattr(state, name, copy.deepcopy(getattr(self, name)))
            state._account(tail)
        tp = self.true_peak
        if tp is None:
            true_peak_dbtp, sample_peak = None, self._sample_peak
        else:
            true_peak_dbtp, sample_peak = (
                finite_or_none(amplitude_db(tp.peak) + shift),
                tp.sample_peak,
            )
        return LoudnessResult(
            samplerate=self.samplerate,
            channels=self.channels,
            frames=self.frames,
            integrated_lufs=state._gating.gated_loudness(RELATIVE_GATE_LU, shift),
            momentary_max_lufs=finite_or_none(state._m_max + shift),
            short_term_max_lufs=finite_or_none(state._s_max + shift),
            loudness_range_lu=state._short.loudness_range(shift),
            true_peak_dbtp=true_peak_dbtp,
            sample_peak_dbfs=finite_or_none(amplitude_db(sample_peak) + shift),
            momentary_series=state._momentary.snapshot(shift),
            short_term_series=state._short_series.snapshot(shift),
            momentary_interval_s=round(0.1 * state._momentary.factor, 6),
            short_term_interval_s=round(0.1 * state._short_series.factor, 6),
        )
