"""The built-in layouts (:data:`LAYOUTS`) and the layout a stem most likely uses
(:func:`suggest_layout`).

Built-in layouts (positions from ITU-R BS.2051, "Advanced sound system for programme
production", where it defines the system; default orders as the WAV/SMPTE practice):

======  ======  =======================================================================
name    system  default order and positions (azimuth/elevation)
======  ======  =======================================================================
2.0     A       L +30, R -30
5.1     B       L +30, R -30, C 0, LFE, Ls +110, Rs -110
5.1.2   C       5.1 + Ltf +30/+30, Rtf -30/+30
5.1.4   D       5.1 + Ltf +30/+30, Rtf -30/+30, Ltr +110/+30, Rtr -110/+30
7.1     I       L, R, C, LFE, Lrs +135, Rrs -135, Ls +90, Rs -90 (the WAV mask order
                FL FR FC LFE BL BR SL SR: backs before sides)
7.1.2   --      7.1 + Ltf +45/+30, Rtf -45/+30 (our definition, see below)
7.1.4   J       7.1 + Ltf +45/+30, Rtf -45/+30, Ltr +135/+30, Rtr -135/+30
9.1.6   --      7.1 + Lw +60, Rw -60, Ltf +45/+30, Rtf -45/+30, Ltm +90/+30,
                Rtm -90/+30, Ltr +135/+30, Rtr -135/+30 (our definition, see below)
22.2    H       BS.2051 order and names: M+060 M-060 M+000 LFE1 M+135 M-135 M+030
                M-030 M+180 LFE2 M+090 M-090 U+045 U-045 U+000 T+000 U+135 U-135
                U+090 U-090 U+180 B+000 B+045 B-045 (upper layer +30, top +90,
                bottom -30)
======  ======  =======================================================================

7.1.2 and 9.1.6 are not BS.2051 systems. 7.1.2 is system I with the front pair of
system J's upper layer (+-45/+30). 9.1.6 is system J widened: front wides at +-60/0 added
to the ear-level bed, and a middle pair at +-90/+30 between system J's front and rear
tops. Its order keeps the 7.1 bed first, wides next, then the tops front to back; no WAV
channel mask can describe 9.1.6 (the mask has no wide or top-middle bits), so such files
need ``--channel-order`` or labelled file names when they are not in this order.

The 22.2 order is that of the Recommendation's table for system H, the same as SMPTE
ST 2036-2 (both from memory). The LFE channel has no direction that matters: it is not
rendered through HRIRs. It is placed at 0/0, except in 22.2 where BS.2051 gives LFE1
+45/-30 and LFE2 -45/-30 (from memory of the Recommendation's table).
"""

from __future__ import annotations

import types
from collections.abc import Mapping, Sequence

from ..errors import LayoutError
from ._model import Layout, Speaker
from ._order import resolve_channel_order

__all__ = ["LAYOUTS", "suggest_layout"]


def _spk(label: str, azimuth: float = 0.0, elevation: float = 0.0) -> Speaker:
    return Speaker(label, float(azimuth), float(elevation), lfe=label.startswith("LFE"))


def _pair(left: str, azimuth: float, elevation: float = 0.0) -> tuple[Speaker, Speaker]:
    return _spk(left, azimuth, elevation), _spk("R" + left[1:], -azimuth, elevation)


_FRONT = (*_pair("L", 30), _spk("C"), _spk("LFE"))
_BED_51 = (*_FRONT, *_pair("Ls", 110))
_BED_71 = (*_FRONT, *_pair("Lrs", 135), *_pair("Ls", 90))

_BS2051 = "ITU-R BS.2051 system"


def _layout(name: str, speakers: Sequence[Speaker], description: str, source: str) -> Layout:
    return Layout(name, tuple(speakers), description, source)


def _bs2051_22_2() -> tuple[Speaker, ...]:
    order = [
        ("M+060", 60, 0),
        ("M-060", -60, 0),
        ("M+000", 0, 0),
        ("LFE1", 45, -30),
        ("M+135", 135, 0),
        ("M-135", -135, 0),
        ("M+030", 30, 0),
        ("M-030", -30, 0),
        ("M+180", 180, 0),
        ("LFE2", -45, -30),
        ("M+090", 90, 0),
        ("M-090", -90, 0),
        ("U+045", 45, 30),
        ("U-045", -45, 30),
        ("U+000", 0, 30),
        ("T+000", 0, 90),
        ("U+135", 135, 30),
        ("U-135", -135, 30),
        ("U+090", 90, 30),
        ("U-090", -90, 30),
        ("U+180", 180, 30),
        ("B+000", 0, -30),
        ("B+045", 45, -30),
        ("B-045", -45, -30),
    ]
    return tuple(_spk(label, az, el) for label, az, el in order)


LAYOUTS: Mapping[str, Layout] = types.MappingProxyType(
    {
        layout.name: layout
        for layout in (
            _layout("2.0", _pair("L", 30), "stereo", f"{_BS2051} A (0+2+0)"),
            _layout("5.1", _BED_51, "5.1 surround", f"{_BS2051} B (0+5+0)"),
            _layout(
                "5.1.2",
                (*_BED_51, *_pair("Ltf", 30, 30)),
                "5.1 with two front tops",
                f"{_BS2051} C (2+5+0)",
            ),
            _layout(
                "5.1.4",
                (*_BED_51, *_pair("Ltf", 30, 30), *_pair("Ltr", 110, 30)),
                "5.1 with four tops",
                f"{_BS2051} D (4+5+0)",
            ),
            _layout("7.1", _BED_71, "7.1 surround (sides and backs)", f"{_BS2051} I (0+7+0)"),
            _layout(
                "7.1.2",
                (*_BED_71, *_pair("Ltf", 45, 30)),
                "7.1 with two front tops",
                f"{_BS2051} I (0+7+0) plus the front tops of system J (earfold's definition)",
            ),
            _layout(
                "7.1.4",
                (*_BED_71, *_pair("Ltf", 45, 30), *_pair("Ltr", 135, 30)),
                "7.1 with four tops",
                f"{_BS2051} J (4+7+0)",
            ),
            _layout(
                "9.1.6",
                (
                    *_BED_71,
                    *_pair("Lw", 60),
                    *_pair("Ltf", 45, 30),
                    *_pair("Ltm", 90, 30),
                    *_pair("Ltr", 135, 30),
                ),
                "7.1 with front wides and six tops",
                f"{_BS2051} J (4+7+0) plus wides at +-60 and tops at +-90/+30 "
                "(earfold's definition; not a BS.2051 system)",
            ),
            _layout(
                "22.2", _bs2051_22_2(), "22.2 (three layers, two LFE)", f"{_BS2051} H (9+10+3)"
            ),
        )
    }
)
"""Built-in layouts by name, in the default channel order documented in the module."""

# How many channels most often mean which layout, for counts shared by several (8 and
# 10): the flat 7.1 is commoner than 5.1.2, and 5.1.4 than 7.1.2 (common practice).
_PREFERRED_BY_COUNT = {
    2: "2.0",
    6: "5.1",
    8: "7.1",
    10: "5.1.4",
    12: "7.1.4",
    16: "9.1.6",
    24: "22.2",
}


def suggest_layout(channels: int, labels: Sequence[str] | None = None) -> Layout | None:
    """The built-in layout a stem most likely uses, or None if none fits.

    With ``labels`` (from file names or a channel mask), the first built-in layout of
    that channel count to which they map one-to-one. Without, the layout the count most
    often means: 2 -> 2.0, 6 -> 5.1, 8 -> 7.1 (not 5.1.2), 10 -> 5.1.4 (not 7.1.2),
    12 -> 7.1.4, 16 -> 9.1.6, 24 -> 22.2.
    """
    if labels is not None:
        if len(labels) != channels:
            return None
        for layout in LAYOUTS.values():
            if layout.channels != channels:
                continue
            try:
                resolve_channel_order(layout, labels)
            except LayoutError:
                continue
            return layout
        return None
    name = _PREFERRED_BY_COUNT.get(channels)
    return LAYOUTS[name] if name else None
