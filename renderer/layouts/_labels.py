"""Channel labels: our canonical spellings, their aliases, BS.2051 position names, and
labels read from file names.

Our canonical labels are ``L R C LFE Ls Rs Lrs Rrs Lw Rw Ltf Rtf Ltm Rtm Ltr Rtr``
plus ``Lc Rc`` (left/right of centre), ``Bc`` (back centre), ``Tc`` (top centre),
``Tfc`` and ``Trc`` (top front and rear centre), ``LFE1 LFE2``, and BS.2051 position
names such as ``M+030`` or ``U-135``. :func:`canonical_label` maps common spellings
(WAV mask names such as ``FL`` or ``TBL``, SMPTE-style ``Lss``/``Lsr``, ...) to them,
case-insensitively. A layout looks a label up with
:meth:`~earfold.renderer.layouts.Layout.index`, which also takes a BS.2051 name for any
speaker at that position.
"""

from __future__ import annotations

import math
import os
import re
from collections.abc import Sequence
from pathlib import Path

from ..errors import LayoutError, shown

__all__ = [
    "ALIASES",
    "BS2051_NAME",
    "FALLBACKS",
    "canonical_label",
    "known_label",
    "label_key",
    "filename_label",
    "labels_from_filenames",
    "layer_of",
    "wrap_azimuth",
]

BS2051_NAME = re.compile(r"([MUTB])([+-])(\d{1,3})")

# Lower-case spelling -> canonical label. WAV mask names (Microsoft dwChannelMask), the
# SMPTE-style surround names and BS.2051-era top-layer names are common practice.
ALIASES: dict[str, str] = {}


def _alias(canonical: str, *spellings: str) -> None:
    for s in (canonical, *spellings):
        ALIASES[s.lower()] = canonical


_alias("L", "FL", "Left")
_alias("R", "FR", "Right")
_alias("C", "FC", "Centre", "Center", "Ctr")
_alias("LFE", "Sub", "Subwoofer", "LFE0")
_alias("LFE1")
_alias("LFE2")
_alias("Ls", "SL", "Lss", "SiL", "Lsd")
_alias("Rs", "SR", "Rss", "SiR", "Rsd")
_alias("Lrs", "Lsr", "BL", "Lb", "RL", "Lbs")
_alias("Rrs", "Rsr", "BR", "Rb", "RR", "Rbs")
_alias("Lw", "FLW", "WL", "Lfw")
_alias("Rw", "FRW", "WR", "Rfw")
_alias("Lc", "FLC")
_alias("Rc", "FRC")
_alias("Bc", "BC", "Cs", "Cb", "S", "Sur")
_alias("Ltf", "TFL", "TpFL", "Lfh", "Ltfh")
_alias("Rtf", "TFR", "TpFR", "Rfh", "Rtfh")
_alias("Ltm", "TML", "TSL", "TpSiL", "Lts")
_alias("Rtm", "TMR", "TSR", "TpSiR", "Rts")
_alias("Ltr", "TBL", "TRL", "TpBL", "Ltb", "Lrh", "Ltrh")
_alias("Rtr", "TBR", "TRR", "TpBR", "Rtb", "Rrh", "Rtrh")
_alias("Tc", "TC", "TpC", "Vog")
_alias("Tfc", "TFC", "TpFC")
_alias("Trc", "TBC", "TpBC")

# Canonical label -> the label it stands for in a layout that lacks it.
FALLBACKS = {"Lrs": "Ls", "Rrs": "Rs", "LFE": "LFE1", "LFE1": "LFE"}


def wrap_azimuth(azimuth: float) -> float:
    """Azimuth wrapped to (-180, 180]."""
    a = math.fmod(float(azimuth), 360.0)
    if a > 180.0:
        a -= 360.0
    elif a <= -180.0:
        a += 360.0
    return a + 0.0  # turns -0.0 into 0.0


def layer_of(elevation: float) -> str:
    """BS.2051 layer letter of an elevation: our bands around the nominal 0/+30/+90/-30."""
    if elevation >= 60.0:
        return "T"
    if elevation >= 15.0:
        return "U"
    if elevation <= -15.0:
        return "B"
    return "M"


def _bs2051_name(text: str) -> str | None:
    m = BS2051_NAME.fullmatch(text.upper())
    if m is None or int(m.group(3)) > 180:
        return None
    degrees = int(m.group(3))
    # +000/-000 and +180/-180 are one direction each; BS.2051 writes them with "+".
    sign = "+" if degrees in (0, 180) else m.group(2)
    return f"{m.group(1)}{sign}{degrees:03d}"


def known_label(label: str) -> str | None:
    """Our canonical spelling of ``label``, or None if it is none we know."""
    text = label.strip()
    return ALIASES.get(text.lower()) or _bs2051_name(text)


def label_key(label: str) -> str:
    """What two labels must share to name the same channel (case-insensitive)."""
    return known_label(label) or label.strip().casefold()


def canonical_label(label: str) -> str:
    """Our canonical spelling of a known channel label (case-insensitive).

    ``"FL"`` -> ``"L"``, ``"SL"``/``"Lss"`` -> ``"Ls"``, ``"BL"``/``"Lsr"``/``"Lb"`` ->
    ``"Lrs"`` (a rear surround; :meth:`Layout.index` lets it name 5.1's ``Ls``),
    ``"TFL"`` -> ``"Ltf"``, ``"TBL"`` -> ``"Ltr"``, ``"m+30"`` -> ``"M+030"``.

    Raises
    ------
    LayoutError
        If the label is none we know (free-text labels of custom layouts are matched by
        :meth:`Layout.index`, not here).
    """
    known = known_label(label) if isinstance(label, str) else None
    if known is None:
        choices = sorted(set(ALIASES.values()), key=str.lower)
        raise LayoutError(
            f"unknown channel label {shown(label)}; known labels: {', '.join(choices)}, and "
            f"BS.2051 names such as 'M+030', 'U-135', 'T+000', 'B+045'"
        )
    return known


_TOKEN_SEPARATORS = re.compile(r"[._\- ]")
# Checked before splitting, since a BS.2051 name contains a separator ("-").
_BS2051_TAIL = re.compile(r"(?:^|[._\- ])([MUTB][+-]\d{3})$", re.IGNORECASE)


def filename_label(path: str | os.PathLike[str]) -> tuple[str, str | None]:
    """The label token of a mono stem's file name, and our spelling of it if known.

    The token is the last one of the name before its extension, tokens being split on
    ``.``, ``_``, ``-`` and spaces; a BS.2051 name at the end (``hall_M-030.wav``) is
    taken whole.

    Returns
    -------
    (str, str or None)
        The token as written (empty if the name ends in a separator) and its canonical
        label (:func:`canonical_label`), or None if it is no label we know.
    """
    stem = Path(os.fspath(path)).stem
    tail = _BS2051_TAIL.search(stem)
    token = tail.group(1) if tail else _TOKEN_SEPARATORS.split(stem)[-1]
    return token, (known_label(token) if token else None)


def labels_from_filenames(paths: Sequence[str | os.PathLike[str]]) -> list[str] | None:
    """Channel labels read from mono stems' file names.

    The label is the last token of the name before its extension, tokens being split
    on ``.``, ``_``, ``-`` and spaces: ``mix.L.wav``, ``mix_Ls.wav``, ``scene-LFE.flac``,
    ``Mix.Rtf.wav`` and ``take3 C.wav`` give ``L``, ``Ls``, ``LFE``, ``Rtf`` and ``C``.
    A BS.2051 name at the end (``hall_M-030.wav``) is taken whole (see
    :func:`filename_label`).

    Returns
    -------
    list of str or None
        Canonical labels (:func:`canonical_label`) in the order of ``paths``, or None if
        any name ends in no known label (use :func:`filename_label` to tell a set where
        no name carries a label from one where only some do). Repeats are left for
        :func:`resolve_channel_order` to report.
    """
    labels: list[str] = []
    for path in paths:
        known = filename_label(path)[1]
        if known is None:
            return None
        labels.append(known)
    return labels
