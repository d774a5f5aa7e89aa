"""Loudspeaker layouts (ITU-R BS.2051 positions), channel labels and orders, WAV channel masks."""

from __future__ import annotations

from .catalogue import (
    LAYOUTS,
    MAX_SPEAKERS,
    Layout,
    Speaker,
    canonical_label,
    get_layout,
    labels_from_filenames,
    layout_from_dict,
    load_layout_file,
    resolve_channel_order,
    suggest_layout,
)
from .channel_mask import SPEAKER_BITS, labels_from_mask, mask_for_labels, mask_to_speakers

__all__ = [
    "LAYOUTS",
    "Layout",
    "MAX_SPEAKERS",
    "SPEAKER_BITS",
    "Speaker",
    "canonical_label",
    "get_layout",
    "labels_from_filenames",
    "labels_from_mask",
    "layout_from_dict",
    "load_layout_file",
    "mask_for_labels",
    "mask_to_speakers",
    "resolve_channel_order",
    "suggest_layout",
]
