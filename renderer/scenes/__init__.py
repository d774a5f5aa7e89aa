"""Ambisonic scenes: AmbiX harmonics, normalisations, rotation and binaural decoders."""

from __future__ import annotations

from ._decoder import DECODER_METHODS, SceneDecoder, default_method, fold_matrix, scene_decoder
from ._designs import t_design, virtual_layout
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
from ._virtual import speaker_decoding, speaker_gains
from ._weights import crossover_frequency, max_re_weights

__all__ = [
    "DECODER_METHODS",
    "SceneDecoder",
    "crossover_frequency",
    "default_method",
    "fold_matrix",
    "max_re_weights",
    "scene_decoder",
    "speaker_decoding",
    "speaker_gains",
    "t_design",
    "virtual_layout",
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
