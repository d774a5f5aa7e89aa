"""Ambisonic scenes: AmbiX harmonics, normalisations, rotation and binaural decoders."""

from __future__ import annotations

from ._harmonics import (
    MAX_ORDER,
    MIN_ORDER,
    NORMALISATIONS,
    acn_degrees,
    channel_count,
    check_order,
    conversion_matrix,
    encode,
    order_for_channels,
    real_harmonics,
    to_sn3d,
)
from ._rotation import rotation_matrix, scene_rotation, sh_rotation

__all__ = [
    "MAX_ORDER",
    "MIN_ORDER",
    "NORMALISATIONS",
    "acn_degrees",
    "channel_count",
    "check_order",
    "conversion_matrix",
    "encode",
    "order_for_channels",
    "real_harmonics",
    "rotation_matrix",
    "scene_rotation",
    "sh_rotation",
    "to_sn3d",
]
