"""Loudness and delivery: the BS.1770 meter and true peak, the limiter, the delivery stage."""

from __future__ import annotations

from .delivery import (
    DeliveryOptions,
    deliver,
    format_measurement,
    parse_loudness,
    parse_true_peak,
)
from .limiter import TARGET_MARGIN_DB, TruePeakLimiter
from .meter import (
    K_WEIGHTING_48K,
    LoudnessMeter,
    PeakInterpolator,
    TruePeakMeter,
    channel_weights,
    interpolation_taps,
    k_weighting_parameters,
    k_weighting_sos,
    measure_file,
    true_peak,
)

__all__ = [
    "DeliveryOptions",
    "K_WEIGHTING_48K",
    "LoudnessMeter",
    "PeakInterpolator",
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
    "parse_loudness",
    "parse_true_peak",
    "true_peak",
]
