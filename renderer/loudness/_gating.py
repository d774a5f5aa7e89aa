"""Block loudness kept in bounded memory: the gating histograms and the plot series.

Memory is bounded whatever the length of the programme: two histograms (0.01 LU bins
from -140 LUFS, the absolute gate less :data:`MAX_RESULT_GAIN_DB`, to +40 LUFS, grown
upwards in steps when a block is louder, up to the loudest power a float64 holds, about
+3080 LUFS; each bin holding a count and the sum of block powers) serve the gated average and the
loudness-range percentiles, and the plot series are capped at :data:`SERIES_MAX_POINTS`
points each. The gated mean is exact except for the blocks that fall in the one bin
that holds the relative gate (they are in or out together), an error far below
0.01 LU. The percentiles are read to the bin centre (within 0.005 LU).
"""

from __future__ import annotations

import math
from typing import cast

import numpy as np
from numpy.typing import NDArray

from ..errors import AudioError
from ._levels import power_lufs

__all__ = [
    "ABSOLUTE_GATE_LUFS",
    "LRA_PERCENTILES",
    "LRA_RELATIVE_GATE_LU",
    "MAX_RESULT_GAIN_DB",
    "RELATIVE_GATE_LU",
    "SERIES_FLOOR_LUFS",
    "SERIES_MAX_POINTS",
    "BlockHistogram",
    "LoudnessSeries",
]

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

MAX_RESULT_GAIN_DB = 70.0
"""Largest gain :meth:`LoudnessMeter.result` can apply to a measurement: blocks down to
this far under the absolute gate are kept, so that any gain up to it finds every block
the gate would pass. (A loudness target is under 0 LUFS and a render with any block
above -70 LUFS measures above it, so a delivery gain is always smaller.)"""

_HIST_LO = ABSOLUTE_GATE_LUFS - MAX_RESULT_GAIN_DB
_HIST_HI = 40.0
_HIST_STEP = 0.01
_HIST_BINS = int(round((_HIST_HI - _HIST_LO) / _HIST_STEP))
_HIST_GROW = 1000
# Bins added at a time (10 LU) when a block is louder than the top bin. Float stems may
# sit far above full scale (a float32 sample reaches 3.4e38, +770 dBFS): the histogram
# follows them instead of piling them into its top bin, where the gates would drop them.


class BlockHistogram:
    """Block loudness as counts and power sums in 0.01 LU bins, from -140 LUFS up.

    The bins reach +40 LUFS and grow upwards as louder blocks arrive, so any finite
    block power is counted in its own bin.

    The gates are applied when the histogram is read, to the blocks' loudness plus a
    ``shift`` in LU: the same audio scaled by that gain (block powers scale exactly;
    a block is taken at its bin's centre, as for the relative gate).
    """

    def __init__(self) -> None:
        self.counts = np.zeros(_HIST_BINS, dtype=np.int64)
        self.power = np.zeros(_HIST_BINS)

    def add(self, power: NDArray[np.float64]) -> None:
        """Count blocks of these powers (K-weighted, channel-weighted mean squares)."""
        loud = power_lufs(power)
        if not np.all(np.isfinite(power)):
            raise AudioError(
                "a block's power is not finite (the audio holds NaN or infinity, or a level "
                "whose square overflows a float64, above about 1e154); it cannot be measured"
            )
        keep = loud > _HIST_LO
        if not np.any(keep):
            return
        idx = ((loud[keep] - _HIST_LO) / _HIST_STEP).astype(np.int64)
        top = int(idx.max())
        if top >= self.counts.size:
            grow = (top - self.counts.size) // _HIST_GROW * _HIST_GROW + _HIST_GROW
            self.counts = np.concatenate([self.counts, np.zeros(grow, dtype=np.int64)])
            self.power = np.concatenate([self.power, np.zeros(grow)])
        # Only the span of bins hit is counted and added to: the same sums as over all
        # bins (adding 0.0 changes nothing), without touching 18 000 bins per block.
        lo = int(idx.min())
        idx -= lo
        span = int(idx.max()) + 1
        self.counts[lo : lo + span] += np.bincount(idx, minlength=span)
        self.power[lo : lo + span] += np.bincount(idx, weights=power[keep], minlength=span)

    def _centres(self, shift: float) -> NDArray[np.float64]:
        centres = _HIST_LO + (np.arange(self.counts.size) + 0.5) * _HIST_STEP + shift
        return cast(NDArray[np.float64], centres)

    def relative_mask(self, gate_lu: float, shift: float = 0.0) -> NDArray[np.bool_] | None:
        """Bins above both gates (None if nothing passed the absolute gate)."""
        centres = self._centres(shift)
        absolute = (centres > ABSOLUTE_GATE_LUFS) & (self.counts > 0)
        total = int(self.counts[absolute].sum())
        if total == 0:
            return None
        gate = power_lufs(self.power[absolute].sum() * _gain_power(shift) / total) + gate_lu
        return cast(NDArray[np.bool_], absolute & (centres > gate))

    def gated_loudness(self, gate_lu: float, shift: float = 0.0) -> float | None:
        """Power mean of the blocks above both gates (None if none passes)."""
        mask = self.relative_mask(gate_lu, shift)
        if mask is None or not np.any(mask):
            return None
        return float(
            power_lufs(self.power[mask].sum() * _gain_power(shift) / self.counts[mask].sum())
        )

    def loudness_range(self, shift: float = 0.0) -> float | None:
        """EBU Tech 3342 loudness range of the blocks (None if none passes the gates)."""
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


class LoudnessSeries:
    """A plot series capped at SERIES_MAX_POINTS by pairwise maxima.

    Readings are kept as they are (minus infinity for silence); the floor is applied
    when the series is read, after any shift.
    """

    def __init__(self) -> None:
        self.values: list[float] = []
        self.factor = 1
        self._acc = -math.inf
        self._n = 0

    def extend(self, loudness: NDArray[np.float64]) -> None:
        """Append readings (LUFS), halving the series whenever it reaches the cap."""
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
        """The series so far, shifted by ``shift`` LU and floored at the silence value."""
        values = self.values + ([self._acc] if self._n else [])
        return tuple(max(v + shift, SERIES_FLOOR_LUFS) for v in values)
