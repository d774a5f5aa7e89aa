"""The built-in layouts (:data:`LAYOUTS`) and the layout a stem most likely uses
(:func:`suggest_layout`).

Built-in layouts (positions from ITU-R BS.2051, "Advanced sound system for programme
production", where it defines the system, and from ITU-R BS.775, "Multichannel
stereophonic sound system with and without accompanying picture", for its 3/0, 2/2 and
3/1 systems; default orders as the WAV/SMPTE practice):

======  ======  =======================================================================
name    system  default order and positions (azimuth/elevation)
======  ======  =======================================================================
2.0     A       L +30, R -30
3.0     3/0     L +30, R -30, C 0 (BS.775 3/0; WAV mask 0x7)
4.0     2/2     L +30, R -30, Ls +110, Rs -110 (BS.775 2/2; WAV mask 0x33)
LCRS    3/1     L +30, R -30, C 0, S: one surround channel reproduced by two loudspeakers
                at +110 and -110, each at -3 dB (BS.775 3/1; WAV mask 0x107, where the
                surround is the back-centre bit)
5.0     B       5.1 without its LFE: L, R, C, Ls +110, Rs -110 (WAV mask 0x37)
5.1     B       L +30, R -30, C 0, LFE, Ls +110, Rs -110
5.0.2   C       5.1.2 without its LFE
5.1.2   C       5.1 + Ltf +30/+30, Rtf -30/+30
5.0.4   D       5.1.4 without its LFE
5.1.4   D       5.1 + Ltf +30/+30, Rtf -30/+30, Ltr +110/+30, Rtr -110/+30
7.0     I       7.1 without its LFE (WAV mask 0x637)
7.1     I       L, R, C, LFE, Lrs +135, Rrs -135, Ls +90, Rs -90 (the WAV mask order
                FL FR FC LFE BL BR SL SR: backs before sides)
7.0.2   --      7.1.2 without its LFE
7.1.2   --      7.1 + Ltf +45/+30, Rtf -45/+30 (our definition, see below)
7.0.4   J       7.1.4 without its LFE
7.1.4   J       7.1 + Ltf +45/+30, Rtf -45/+30, Ltr +135/+30, Rtr -135/+30
9.0.6   --      9.1.6 without its LFE
9.1.6   --      7.1 + Lw +60, Rw -60, Ltf +45/+30, Rtf -45/+30, Ltm +90/+30,
                Rtm -90/+30, Ltr +135/+30, Rtr -135/+30 (our definition, see below)
22.2    H       BS.2051 order and names: M+060 M-060 M+000 LFE1 M+135 M-135 M+030
                M-030 M+180 LFE2 M+090 M-090 U+045 U-045 U+000 T+000 U+135 U-135
                U+090 U-090 U+180 B+000 B+045 B-045 (upper layer +30, top +90,
                bottom -30)
======  ======  =======================================================================

The layouts without LFE (``x.0`` and ``x.0.z``) are the systems named beside them with
the LFE channel left out and the order otherwise kept, so a WAV channel mask without the
LFE bit describes them (their masks are the LFE-less ones). BS.2051 lists every system
with its LFE; leaving it out is common practice for music and for stems of a mix.

BS.775 places C at 0, L/R at +-30 and the surrounds LS/RS anywhere from +-100 to +-120
degrees (the Recommendation's Figure 1); we take +-110, the value BS.2051 gives system B,
so that 4.0, LCRS and 5.0 share their surround positions. In the 3/1 system the single
surround channel S is fed to both surround loudspeakers, each 3 dB down so that S keeps
its power (the Recommendation's note on 3/1, from memory); the LCRS layout's ``S`` is
such a channel (:attr:`Speaker.spread`), placed nominally at 180 degrees.

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

Every layout also offers named channel orders (:attr:`Layout.orders`): ``wav``, the
order above, and ``film`` (L C R, surrounds, LFE, heights) where it has L and R.
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
_TOPS_512 = _pair("Ltf", 30, 30)
_TOPS_514 = (*_TOPS_512, *_pair("Ltr", 110, 30))
_TOPS_712 = _pair("Ltf", 45, 30)
_TOPS_714 = (*_TOPS_712, *_pair("Ltr", 135, 30))
_BED_916 = (*_BED_71, *_pair("Lw", 60))
_TOPS_916 = (*_TOPS_712, *_pair("Ltm", 90, 30), *_pair("Ltr", 135, 30))

_BS2051 = "ITU-R BS.2051 system"
_BS775 = "ITU-R BS.775 system"
_NO_LFE = "without its LFE"
#: The BS.775 surround angle we use (the Recommendation allows 100 to 120 degrees).
_BS775_SURROUND = 110.0


def _without_lfe(speakers: Sequence[Speaker]) -> tuple[Speaker, ...]:
    return tuple(s for s in speakers if not s.lfe)


# BS.775 3/1: one surround channel S, fed to both surround loudspeakers.
_MONO_SURROUND = Speaker(
    "S",
    180.0,
    0.0,
    spread=((_BS775_SURROUND, 0.0), (-_BS775_SURROUND, 0.0)),
)


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
            _layout("3.0", (*_pair("L", 30), _spk("C")), "left, centre, right", f"{_BS775} 3/0"),
            _layout(
                "4.0",
                (*_pair("L", 30), *_pair("Ls", _BS775_SURROUND)),
                "quadraphonic: front and surround pairs",
                f"{_BS775} 2/2 (surrounds at +-110, within its 100 to 120)",
            ),
            _layout(
                "LCRS",
                (*_pair("L", 30), _spk("C"), _MONO_SURROUND),
                "left, centre, right and one surround channel on two loudspeakers",
                f"{_BS775} 3/1 (S on both surround loudspeakers at +-110, each -3 dB)",
            ),
            _layout("5.0", _without_lfe(_BED_51), "5.0 surround", f"{_BS2051} B (0+5+0) {_NO_LFE}"),
            _layout("5.1", _BED_51, "5.1 surround", f"{_BS2051} B (0+5+0)"),
            _layout(
                "5.0.2",
                _without_lfe((*_BED_51, *_TOPS_512)),
                "5.0 with two front tops",
                f"{_BS2051} C (2+5+0) {_NO_LFE}",
            ),
            _layout(
                "5.1.2", (*_BED_51, *_TOPS_512), "5.1 with two front tops", f"{_BS2051} C (2+5+0)"
            ),
            _layout(
                "5.0.4",
                _without_lfe((*_BED_51, *_TOPS_514)),
                "5.0 with four tops",
                f"{_BS2051} D (4+5+0) {_NO_LFE}",
            ),
            _layout("5.1.4", (*_BED_51, *_TOPS_514), "5.1 with four tops", f"{_BS2051} D (4+5+0)"),
            _layout(
                "7.0",
                _without_lfe(_BED_71),
                "7.0 surround (sides and backs)",
                f"{_BS2051} I (0+7+0) {_NO_LFE}",
            ),
            _layout("7.1", _BED_71, "7.1 surround (sides and backs)", f"{_BS2051} I (0+7+0)"),
            _layout(
                "7.0.2",
                _without_lfe((*_BED_71, *_TOPS_712)),
                "7.0 with two front tops",
                f"{_BS2051} I (0+7+0) plus the front tops of system J, {_NO_LFE} "
                "(earfold's definition)",
            ),
            _layout(
                "7.1.2",
                (*_BED_71, *_TOPS_712),
                "7.1 with two front tops",
                f"{_BS2051} I (0+7+0) plus the front tops of system J (earfold's definition)",
            ),
            _layout(
                "7.0.4",
                _without_lfe((*_BED_71, *_TOPS_714)),
                "7.0 with four tops",
                f"{_BS2051} J (4+7+0) {_NO_LFE}",
            ),
            _layout("7.1.4", (*_BED_71, *_TOPS_714), "7.1 with four tops", f"{_BS2051} J (4+7+0)"),
            _layout(
                "9.0.6",
                _without_lfe((*_BED_916, *_TOPS_916)),
                "7.0 with front wides and six tops",
                f"{_BS2051} J (4+7+0) plus wides at +-60 and tops at +-90/+30, {_NO_LFE} "
                "(earfold's definition; not a BS.2051 system)",
            ),
            _layout(
                "9.1.6",
                (*_BED_916, *_TOPS_916),
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

# The layout a channel count most often means, for counts several layouts share
# (common practice): a flat bed before one with heights (7 -> 7.0 not 5.0.2, 8 -> 7.1
# not 5.1.2), the 5.x bed with four tops before the 7.x with two (9 -> 5.0.4, 10 ->
# 5.1.4), and 4 -> the 2/2 quad 4.0 before LCRS, whose files usually say so (the WAV
# mask 0x107 or labelled file names pick LCRS).
_PREFERRED_BY_COUNT = {
    2: "2.0",
    3: "3.0",
    4: "4.0",
    5: "5.0",
    6: "5.1",
    7: "7.0",
    8: "7.1",
    9: "5.0.4",
    10: "5.1.4",
    11: "7.0.4",
    12: "7.1.4",
    15: "9.0.6",
    16: "9.1.6",
    24: "22.2",
}


def suggest_layout(channels: int, labels: Sequence[str] | None = None) -> Layout | None:
    """The built-in layout a stem most likely uses, or None if none fits.

    With ``labels`` (from file names or a channel mask), the first built-in layout of
    that channel count to which they map one-to-one. Without, the layout the count most
    often means (common practice): 2 -> 2.0, 3 -> 3.0, 4 -> 4.0 (not LCRS), 5 -> 5.0,
    6 -> 5.1, 7 -> 7.0 (not 5.0.2), 8 -> 7.1 (not 5.1.2), 9 -> 5.0.4 (not 7.0.2),
    10 -> 5.1.4 (not 7.1.2), 11 -> 7.0.4, 12 -> 7.1.4, 15 -> 9.0.6, 16 -> 9.1.6,
    24 -> 22.2.
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
