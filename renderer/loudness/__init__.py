"""Loudness and delivery: the BS.1770 meter and true peak, the limiter, the delivery stage."""

from __future__ import annotations

from ._gating import SERIES_FLOOR_LUFS
from ._kweighting import (
    K_WEIGHTING_48K,
    channel_weights,
    k_weighting_parameters,
    k_weighting_sos,
)
from ._meter import LoudnessMeter, LoudnessResult
from ._targets import DeliveryOptions, parse_loudness, parse_true_peak
from ._true_peak import PeakInterpolator, TruePeakMeter, interpolation_taps, true_peak
from .delivery import deliver
from .limiter import TARGET_MARGIN_DB, TruePeakLimiter
from .measure import LayoutMeasurement, format_measurement, measure_file, measure_for_layout

__all__ = [
    "DeliveryOptions",
    "K_WEIGHTING_48K",
    "LayoutMeasurement",
    "LoudnessMeter",
    "LoudnessResult",
    "PeakInterpolator",
    "SERIES_FLOOR_LUFS",
    "TARGET_MARGIN_DB",
    "TruePeakLimiter",
    "TruePeakMeter",
    "channel_weights",
    "deliver",
    "format_measurement",
    "interpolation_taps",
    "k_weighting_parameters",
    "k_weighting_sos",
    "measure_file",
    "measure_for_layout",
    "parse_loudness",
    "parse_true_peak",
    "true_peak",
]
