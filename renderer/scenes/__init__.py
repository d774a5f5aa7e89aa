"""Ambisonic scenes: AmbiX harmonics, normalisations, rotation and binaural decoders.

Modules, each one concept: ``_harmonics`` (real spherical harmonics in ACN/SN3D, N3D and
FuMa, channel counts), ``_rotation`` (yaw, pitch, roll; real-harmonic rotation matrices),
``_designs`` (spherical t-designs; ``_design_table`` holds the stored ones), ``_weights``
(max-rE, the order's crossover frequency, grid quadrature), ``_covariance`` (the
diffuse-field covariance constraint), ``_magls`` and ``_virtual`` (the two decoders),
``_fir`` (responses to FIR filters) and ``_decoder`` (:func:`scene_decoder`, the surface
the render plan uses).

Conventions: directions are unit vectors (x front, y left, z up; azimuth counter-clockwise
from the front, elevation up, as :mod:`earfold.renderer.geometry`); scenes are ACN/SN3D
inside, other normalisations are converted at the boundary; filters are
``(channels, 2, taps)``, left ear first.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
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
    from ._virtual import decode_speaker_filters, speaker_decoding, speaker_gains
    from ._weights import crossover_frequency, max_re_weights

#: Where each name of the wing's surface lives. The wing is loaded a module at a time, as
#: names are asked for (PEP 562): a render that needs only a spherical design's
#: directions does not load the decoders (and the filter design they import).
_WHERE: dict[str, str] = {
    "DECODER_METHODS": "_decoder",
    "SceneDecoder": "_decoder",
    "default_method": "_decoder",
    "fold_matrix": "_decoder",
    "scene_decoder": "_decoder",
    "t_design": "_designs",
    "virtual_layout": "_designs",
    "MAX_ORDER": "_harmonics",
    "MIN_ORDER": "_harmonics",
    "NORMALISATIONS": "_harmonics",
    "acn_degrees": "_harmonics",
    "channel_count": "_harmonics",
    "check_order": "_harmonics",
    "conversion_matrix": "_harmonics",
    "encode": "_harmonics",
    "order_for_channels": "_harmonics",
    "real_harmonics": "_harmonics",
    "to_sn3d": "_harmonics",
    "rotation_matrix": "_rotation",
    "scene_rotation": "_rotation",
    "sh_rotation": "_rotation",
    "decode_speaker_filters": "_virtual",
    "speaker_decoding": "_virtual",
    "speaker_gains": "_virtual",
    "crossover_frequency": "_weights",
    "max_re_weights": "_weights",
}


def __getattr__(name: str) -> Any:
    module = _WHERE.get(name)
    if module is None:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(importlib.import_module(f"{__name__}.{module}"), name)
    globals()[name] = value
    return value


__all__ = [
    "DECODER_METHODS",
    "SceneDecoder",
    "crossover_frequency",
    "decode_speaker_filters",
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
