"""WAV channel masks as channel labels: what each ``dwChannelMask`` bit means in our labels.

The mask is read from the file's header by :func:`earfold.renderer.io.read_channel_mask`.
Mapping to our labels (:func:`labels_from_mask`): FL L, FR R, FC C, LFE LFE; BL/BR are
the surrounds Ls/Rs when the mask has no SL/SR bits (5.1 = 0x3F) and the rear surrounds
Lrs/Rrs when it has (7.1 = 0x63F, where SL/SR are Ls/Rs); FLC/FRC are Lc/Rc (left and
right of centre; no built-in layout has them, custom layouts may); BC Bc; TC Tc; TFL
Ltf, TFC Tfc, TFR Rtf; TBL Ltr, TBC Trc, TBR Rtr.
"""

from __future__ import annotations

import types
from collections.abc import Mapping, Sequence

from ..errors import LayoutError, shown
from ._labels import canonical_label
from ._model import Layout

__all__ = [
    "SPEAKER_BITS",
    "labels_from_mask",
    "mask_for_labels",
    "mask_to_speakers",
]

SPEAKER_BITS: Mapping[str, int] = types.MappingProxyType(
    {
        "FL": 0x1,
        "FR": 0x2,
        "FC": 0x4,
        "LFE": 0x8,
        "BL": 0x10,
        "BR": 0x20,
        "FLC": 0x40,
        "FRC": 0x80,
        "BC": 0x100,
        "SL": 0x200,
        "SR": 0x400,
        "TC": 0x800,
        "TFL": 0x1000,
        "TFC": 0x2000,
        "TFR": 0x4000,
        "TBL": 0x8000,
        "TBC": 0x10000,
        "TBR": 0x20000,
    }
)
"""Speaker position bits of ``dwChannelMask`` (Microsoft ksmedia.h ``SPEAKER_*``)."""

_BIT_NAMES = {bit: name for name, bit in SPEAKER_BITS.items()}

_MASK_TO_LABEL = {
    "FL": "L",
    "FR": "R",
    "FC": "C",
    "LFE": "LFE",
    "FLC": "Lc",
    "FRC": "Rc",
    "BC": "Bc",
    "SL": "Ls",
    "SR": "Rs",
    "TC": "Tc",
    "TFL": "Ltf",
    "TFC": "Tfc",
    "TFR": "Rtf",
    "TBL": "Ltr",
    "TBC": "Trc",
    "TBR": "Rtr",
}
_LABEL_TO_MASK = {label: name for name, label in _MASK_TO_LABEL.items()}


# -- masks and labels ------------------------------------------------------------------


def mask_to_speakers(mask: int) -> list[str]:
    """Speaker position names of the set bits, in ascending bit (= channel) order.

    Bits without a defined position are named ``"bit18"`` ... ``"bit31"``.

    Raises
    ------
    LayoutError
        If ``mask`` is not an integer in 0 .. 2**32 - 1.
    """
    if isinstance(mask, bool) or not isinstance(mask, int) or not 0 <= mask < 1 << 32:
        raise LayoutError(
            f"a WAV channel mask is a 32-bit unsigned integer, got {shown(mask)}; "
            f"give 0 to {(1 << 32) - 1}"
        )
    return [_BIT_NAMES.get(1 << n, f"bit{n}") for n in range(32) if mask >> n & 1]


def labels_from_mask(mask: int, channels: int, layout: Layout | None = None) -> list[str] | None:
    """Our channel labels, in file order, for a channel mask.

    Parameters
    ----------
    mask : int
        ``dwChannelMask``.
    channels : int
        The file's channel count.
    layout : Layout, optional
        When given, each label is replaced by the layout's own label for that channel
        (:meth:`Layout.index`), where it has one.

    Returns
    -------
    list of str or None
        None if the mask does not describe exactly ``channels`` channels (more or fewer
        bits than channels, as files from some tools have, or bits with no defined
        position); the caller should then warn and use another source for the order.
    """
    names = mask_to_speakers(mask)
    if len(names) != channels or any(n not in SPEAKER_BITS for n in names):
        return None
    sides = "SL" in names or "SR" in names
    labels: list[str] = []
    for n in names:
        if n in ("BL", "BR"):
            labels.append(("Lrs" if sides else "Ls") if n == "BL" else ("Rrs" if sides else "Rs"))
        else:
            labels.append(_MASK_TO_LABEL[n])
    if layout is not None:
        adapted: list[str] = []
        for label in labels:
            try:
                adapted.append(layout.labels[layout.index(label)])
            except LayoutError:
                adapted.append(label)
        labels = adapted
    return labels


def mask_for_labels(labels: Sequence[str]) -> int | None:
    """The channel mask of channels labelled ``labels`` in file order, or None.

    The inverse of :func:`labels_from_mask`: ``Ls``/``Rs`` are BL/BR unless the labels
    also hold rear surrounds, when they are SL/SR (so 5.1 gives 0x3F, not 0x60F). None
    when a label has no mask bit (wides, top middles, BS.2051 names, free text), when
    two labels take one bit, or when the order is not ascending bit order (a mask cannot
    describe such a file).
    """
    canon: list[str] = []
    for label in labels:
        try:
            canon.append(canonical_label(label))
        except LayoutError:
            return None
    rears = "Lrs" in canon or "Rrs" in canon
    mask = 0
    last = 0
    for label in canon:
        if label in ("Ls", "Rs"):
            name = {"Ls": "SL", "Rs": "SR"}[label] if rears else {"Ls": "BL", "Rs": "BR"}[label]
        elif label in ("Lrs", "Rrs"):
            name = {"Lrs": "BL", "Rrs": "BR"}[label]
        else:
            found = _LABEL_TO_MASK.get(label)
            if found is None:
                return None
            name = found
        bit = SPEAKER_BITS[name]
        if bit <= last:
            return None
        mask |= bit
        last = bit
    return mask or None
