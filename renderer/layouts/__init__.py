"""Loudspeaker layouts (ITU-R BS.2051 positions), channel labels and orders, WAV channel masks.

Modules, each one concept: ``_labels`` (canonical labels, aliases, BS.2051 names, labels
from file names), ``_model`` (:class:`Speaker`, :class:`Layout`), ``_order`` (channel
orders), ``_catalogue`` (the built-in :data:`LAYOUTS`, :func:`suggest_layout`), ``_files``
(custom layouts as JSON, :func:`get_layout`), ``_channel_mask`` (WAV channel masks) and
``_scene`` (Ambisonic scenes as an input kind: :class:`SceneLayout`, :data:`SCENES`) and
``_vbap`` (vector base amplitude panning onto an array: :class:`VbapPanner`) and
``_spread`` (sources with a width and height on such an array: :class:`SpreadPanner`).
"""

from __future__ import annotations

from ._catalogue import LAYOUTS, suggest_layout
from ._channel_mask import SPEAKER_BITS, labels_from_mask, mask_for_labels, mask_to_speakers
from ._files import (
    MAX_LABEL_LENGTH,
    MAX_LAYOUT_FILE_BYTES,
    MAX_SPEAKERS,
    get_layout,
    layout_from_dict,
    load_layout_file,
)
from ._labels import canonical_label, filename_label, labels_from_filenames
from ._model import Layout, Speaker
from ._order import ORDER_NAMES, order_labels, order_name, resolve_channel_order
from ._scene import (
    SCENE_NORMALISATIONS,
    SCENE_SOURCE,
    SCENES,
    SceneLayout,
    scene_layout,
    stem_scene,
)
from ._spread import MAX_HEIGHT_DEG, MAX_WIDTH_DEG, SpreadPanner, diffuse_split
from ._vbap import POLE_GAP_DEG, VbapPanner

__all__ = [
    "LAYOUTS",
    "Layout",
    "MAX_LABEL_LENGTH",
    "MAX_HEIGHT_DEG",
    "MAX_LAYOUT_FILE_BYTES",
    "MAX_SPEAKERS",
    "MAX_WIDTH_DEG",
    "ORDER_NAMES",
    "POLE_GAP_DEG",
    "SCENES",
    "SCENE_NORMALISATIONS",
    "SCENE_SOURCE",
    "SPEAKER_BITS",
    "SceneLayout",
    "Speaker",
    "SpreadPanner",
    "VbapPanner",
    "canonical_label",
    "diffuse_split",
    "filename_label",
    "get_layout",
    "labels_from_filenames",
    "labels_from_mask",
    "layout_from_dict",
    "load_layout_file",
    "mask_for_labels",
    "mask_to_speakers",
    "order_labels",
    "order_name",
    "resolve_channel_order",
    "scene_layout",
    "stem_scene",
    "suggest_layout",
]
