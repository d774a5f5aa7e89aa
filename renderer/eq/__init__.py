"""Tone and level: diffuse-field equalisation, headphone EQ, level calibration."""

from __future__ import annotations

from .calibration import REFERENCE, calibration_gain, pink_band
from .diffuse_field import (
    MAX_BOOST_DB,
    MAX_CELL_FACTOR,
    EqualisedHrirSet,
    check_eq,
    describe,
    diffuse_field,
    equalised,
    inverse_filter,
    solid_angle_weights,
    voronoi_areas,
)
from .headphone import (
    BAND_TYPES,
    DEFAULT_Q,
    MAX_GAIN_DB,
    Q_RANGE,
    Band,
    HeadphoneEq,
    bands_sos,
    cookbook_biquad,
    load_headphone_eq,
    parse_bands,
)

__all__ = [
    "EqualisedHrirSet",
    "BAND_TYPES",
    "DEFAULT_Q",
    "MAX_GAIN_DB",
    "Q_RANGE",
    "Band",
    "HeadphoneEq",
    "MAX_BOOST_DB",
    "MAX_CELL_FACTOR",
    "REFERENCE",
    "bands_sos",
    "calibration_gain",
    "check_eq",
    "cookbook_biquad",
    "describe",
    "diffuse_field",
    "equalised",
    "inverse_filter",
    "load_headphone_eq",
    "parse_bands",
    "pink_band",
    "solid_angle_weights",
    "voronoi_areas",
]
