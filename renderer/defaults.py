"""Constants that more than one part of the renderer reads: each has its home here.

Values that are a fact of the trade are marked "common practice"; the others name their
source.
"""

from __future__ import annotations

__all__ = [
    "DEFAULT_LOUDNESS_LUFS",
    "DEFAULT_TRUE_PEAK_DBTP",
    "LOUDNESS_RANGE_LUFS",
    "SPEED_OF_SOUND",
    "TRUE_PEAK_RANGE_DBTP",
]

SPEED_OF_SOUND = 343.0
"""Speed of sound in m/s: dry air at about 20 degrees C (common practice; the ideal-gas
estimate 331.3 * sqrt(1 + T / 273.15) gives 343.2 m/s at 20 degrees C)."""

DEFAULT_LOUDNESS_LUFS = -23.0
"""Default integrated loudness target of a delivery: -23 LUFS, the EBU R 128 programme
level."""

LOUDNESS_RANGE_LUFS = (-70.0, 0.0)
"""Open interval of accepted loudness targets in LUFS: from the BS.1770 absolute gate
(-70 LUFS) to full scale."""

DEFAULT_TRUE_PEAK_DBTP = -1.0
"""Default ceiling of the true-peak limiter: -1 dBTP, the maximum EBU R 128 allows."""

TRUE_PEAK_RANGE_DBTP = (-30.0, 0.0)
"""Closed interval of accepted true-peak ceilings in dBTP (0 dBTP is full scale; under
-30 dBTP a limiter would be shaping the programme, not catching overs)."""
