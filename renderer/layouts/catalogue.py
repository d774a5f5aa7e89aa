"""Loudspeaker layouts, channel labels and channel orders.

A :class:`Layout` is an ordered tuple of :class:`Speaker` s; its order is the layout's
default channel order in a file (file channel *i* carries speaker *i* unless a channel
order, a WAV channel mask or the stems' file names say otherwise). Directions follow
:mod:`earfold.renderer.geometry`: degrees, azimuth positive to the LEFT, elevation up, as in
ITU-R BS.2051.

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

Labels. Our canonical labels are ``L R C LFE Ls Rs Lrs Rrs Lw Rw Ltf Rtf Ltm Rtm Ltr Rtr``
plus ``Lc Rc`` (left/right of centre), ``Bc`` (back centre), ``Tc`` (top centre),
``Tfc`` and ``Trc`` (top front and rear centre), ``LFE1 LFE2``, and BS.2051 position
names such as ``M+030`` or ``U-135``. :func:`canonical_label` maps common spellings
(WAV mask names such as ``FL`` or ``TBL``, SMPTE-style ``Lss``/``Lsr``, ...) to them,
case-insensitively. A layout looks a label up with :meth:`Layout.index`, which also
takes a BS.2051 name for any speaker at that position.

Custom layouts are JSON files (see :func:`layout_from_dict` for the schema and limits);
their labels may be free text.
"""

from __future__ import annotations

import math
import os
import re
import types
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import LayoutError
from ..files import read_json_file
from ..geometry import direction_to_vector

__all__ = [
    "LAYOUTS",
    "MAX_LABEL_LENGTH",
    "MAX_LAYOUT_FILE_BYTES",
    "MAX_SPEAKERS",
    "Layout",
    "Speaker",
    "canonical_label",
    "get_layout",
    "labels_from_filenames",
    "layout_from_dict",
    "load_layout_file",
    "resolve_channel_order",
    "suggest_layout",
]

MAX_SPEAKERS = 64
"""Most loudspeakers a custom layout may have (22.2 has 24; 64 leaves room for large
installations and stops a mistaken file from planning thousands of convolutions)."""

MAX_LABEL_LENGTH = 16
"""Longest channel label accepted in a custom layout, in characters."""

MAX_LAYOUT_FILE_BYTES = 1 << 20
"""Largest layout JSON file read (1 MiB; 64 speakers need a few kilobytes)."""

_SPEAKER_KEYS = ("label", "azimuth", "elevation", "distance", "lfe")
_LAYOUT_KEYS = ("name", "description", "source", "speakers")


@dataclass(frozen=True)
class Speaker:
    """One loudspeaker of a layout.

    Attributes
    ----------
    label : str
        Channel label, e.g. ``"L"``, ``"Ltf"``, ``"M+030"`` or a custom layout's own text.
    azimuth : float
        Degrees, counter-clockwise from the front (positive LEFT), in (-180, 180].
    elevation : float
        Degrees above the horizontal plane, in [-90, 90].
    distance : float or None
        Distance from the listener in metres, when known.
    lfe : bool
        True for a low-frequency effects channel (not rendered through HRIRs).
    """

    label: str
    azimuth: float
    elevation: float
    distance: float | None = None
    lfe: bool = False

    @property
    def vector(self) -> np.ndarray:
        """Unit direction vector (x front, y left, z up), shape ``(3,)``."""
        return direction_to_vector(self.azimuth, self.elevation)


@dataclass(frozen=True)
class Layout:
    """An ordered set of loudspeakers; the order is the default file channel order.

    Attributes
    ----------
    name : str
        Name, e.g. ``"7.1.4"``.
    speakers : tuple of Speaker
        Loudspeakers in default channel order.
    description : str
        One line for people.
    source : str
        Where the positions come from (e.g. the BS.2051 system letter).
    """

    name: str
    speakers: tuple[Speaker, ...]
    description: str = ""
    source: str = ""

    def __post_init__(self) -> None:
        if not self.speakers:
            raise LayoutError(f"layout {self.name!r} has no speakers")
        keys = [_label_key(s.label) for s in self.speakers]
        if len(set(keys)) != len(keys):
            dupes = sorted({s.label for s, k in zip(self.speakers, keys) if keys.count(k) > 1})
            raise LayoutError(f"layout {self.name!r} has duplicate labels: {', '.join(dupes)}")

    @property
    def labels(self) -> tuple[str, ...]:
        """Channel labels in default order."""
        return tuple(s.label for s in self.speakers)

    @property
    def channels(self) -> int:
        """Number of channels (loudspeakers, LFE included)."""
        return len(self.speakers)

    @property
    def lfe_indices(self) -> tuple[int, ...]:
        """Positions of the LFE channels in the default order."""
        return tuple(i for i, s in enumerate(self.speakers) if s.lfe)

    def index(self, label: str) -> int:
        """Position of the speaker that ``label`` names.

        Tried in turn: the exact label; the same label after :func:`canonical_label` on
        both sides (so case and aliases do not matter: ``"fl"`` finds ``L``, ``"TBL"``
        finds ``Ltr``); a rear surround (``Lrs``/``Rrs``, ``BL``/``BR``) is the surround
        of a layout that has no rear pair (5.1's surrounds are at the back); ``LFE`` and
        ``LFE1`` stand for each other; a BS.2051 name (``M+110``) finds the speaker at
        that azimuth in that layer.

        Raises
        ------
        LayoutError
            If no speaker matches; the message lists the layout's labels.
        """
        found = self._find(label)
        if found is None:
            raise LayoutError(
                f"{label!r} is not a channel of layout {self.name!r}; its channels are "
                f"{', '.join(self.labels)}"
            )
        return found

    def _find(self, label: str) -> int | None:
        if not isinstance(label, str):
            return None
        labels = self.labels
        if label in labels:
            return labels.index(label)
        keys = [_label_key(x) for x in labels]
        key = _label_key(label.strip())
        if key in keys:
            return keys.index(key)
        fallback = _FALLBACKS.get(key)
        if fallback is not None and fallback in keys:
            # Only when the layout lacks the label itself (checked above).
            return keys.index(fallback)
        return self._find_by_position(key)

    def _find_by_position(self, key: str) -> int | None:
        m = _BS2051_NAME.fullmatch(key)
        if m is None:
            return None
        layer, azimuth = m.group(1), _wrap_azimuth(float(m.group(2) + m.group(3)))
        for i, s in enumerate(self.speakers):
            if s.lfe or _layer_of(s.elevation) != layer:
                continue
            # T+000 is the zenith: its azimuth is arbitrary.
            if layer == "T" or abs(_wrap_azimuth(s.azimuth - azimuth)) < 0.5:
                return i
        return None

    def to_dict(self) -> dict:
        """JSON-ready form, in the schema :func:`layout_from_dict` reads."""
        speakers = []
        for s in self.speakers:
            entry: dict = {"label": s.label, "azimuth": s.azimuth, "elevation": s.elevation}
            if s.distance is not None:
                entry["distance"] = s.distance
            entry["lfe"] = s.lfe
            speakers.append(entry)
        return {
            "name": self.name,
            "description": self.description,
            "source": self.source,
            "speakers": speakers,
        }


# -- labels ----------------------------------------------------------------------------

_BS2051_NAME = re.compile(r"([MUTB])([+-])(\d{1,3})")

# Lower-case spelling -> canonical label. WAV mask names (Microsoft dwChannelMask), the
# SMPTE-style surround names and BS.2051-era top-layer names are common practice.
_ALIASES: dict[str, str] = {}


def _alias(canonical: str, *spellings: str) -> None:
    for s in (canonical, *spellings):
        _ALIASES[s.lower()] = canonical


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
_alias("Bc", "BC", "Cs", "Cb")
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
_FALLBACKS = {"Lrs": "Ls", "Rrs": "Rs", "LFE": "LFE1", "LFE1": "LFE"}


def _wrap_azimuth(azimuth: float) -> float:
    """Azimuth wrapped to (-180, 180]."""
    a = math.fmod(float(azimuth), 360.0)
    if a > 180.0:
        a -= 360.0
    elif a <= -180.0:
        a += 360.0
    return a + 0.0  # turns -0.0 into 0.0


def _layer_of(elevation: float) -> str:
    """BS.2051 layer letter of an elevation: our bands around the nominal 0/+30/+90/-30."""
    if elevation >= 60.0:
        return "T"
    if elevation >= 15.0:
        return "U"
    if elevation <= -15.0:
        return "B"
    return "M"


def _bs2051_name(text: str) -> str | None:
    m = _BS2051_NAME.fullmatch(text.upper())
    if m is None or int(m.group(3)) > 180:
        return None
    degrees = int(m.group(3))
    # +000/-000 and +180/-180 are one direction each; BS.2051 writes them with "+".
    sign = "+" if degrees in (0, 180) else m.group(2)
    return f"{m.group(1)}{sign}{degrees:03d}"


def _known_label(label: str) -> str | None:
    text = label.strip()
    return _ALIASES.get(text.lower()) or _bs2051_name(text)


def _label_key(label: str) -> str:
    """What two labels must share to name the same channel (case-insensitive)."""
    return _known_label(label) or label.strip().casefold()


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
    known = _known_label(label) if isinstance(label, str) else None
    if known is None:
        choices = sorted(set(_ALIASES.values()), key=str.lower)
        raise LayoutError(
            f"unknown channel label {label!r}; known labels: {', '.join(choices)}, and "
            f"BS.2051 names such as 'M+030', 'U-135', 'T+000', 'B+045'"
        )
    return known


# -- built-in layouts ------------------------------------------------------------------


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


# -- custom layouts --------------------------------------------------------------------


def _where(origin: str | None) -> str:
    return f"{origin!r}: " if origin else ""


def _number(value: object, what: str, origin: str | None) -> float:
    # bool is an int in Python; true/false in a position field is a mistake.
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise LayoutError(f"{_where(origin)}{what} must be a number, got {value!r}")
    if not math.isfinite(value):
        raise LayoutError(f"{_where(origin)}{what} must be finite, got {value!r}")
    return float(value)


def _check_label(value: object, what: str, origin: str | None) -> str:
    if not isinstance(value, str):
        raise LayoutError(f"{_where(origin)}{what} label must be a string, got {value!r}")
    # Commas separate labels in --channel-order; surrounding blanks would be invisible.
    if (
        not 1 <= len(value) <= MAX_LABEL_LENGTH
        or not value.isprintable()
        or value != value.strip()
        or "," in value
    ):
        raise LayoutError(
            f"{_where(origin)}{what} label {value!r} must be 1 to {MAX_LABEL_LENGTH} "
            "printable characters without commas or surrounding spaces"
        )
    return value


def _check_keys(data: Mapping, allowed: Sequence[str], what: str, origin: str | None) -> None:
    unknown = [k for k in data if k not in allowed]
    if unknown:
        raise LayoutError(
            f"{_where(origin)}{what} has unknown field(s) {', '.join(map(repr, unknown))}; "
            f"valid fields: {', '.join(allowed)}"
        )


def _speaker_from_dict(entry: object, n: int, origin: str | None) -> Speaker:
    what = f"speaker {n}"
    if not isinstance(entry, Mapping):
        raise LayoutError(
            f"{_where(origin)}{what} must be an object with label, azimuth and elevation, "
            f"got {entry!r}"
        )
    _check_keys(entry, _SPEAKER_KEYS, what, origin)
    missing = [k for k in ("label", "azimuth", "elevation") if k not in entry]
    if missing:
        raise LayoutError(f"{_where(origin)}{what} is missing {', '.join(missing)}")
    label = _check_label(entry["label"], what, origin)
    what = f"speaker {n} ({label!r})"
    azimuth = _number(entry["azimuth"], f"{what} azimuth", origin)
    elevation = _number(entry["elevation"], f"{what} elevation", origin)
    if abs(azimuth) > 360.0:
        raise LayoutError(
            f"{_where(origin)}{what} azimuth {entry['azimuth']!r} is outside -360..360 degrees"
        )
    if abs(elevation) > 90.0:
        raise LayoutError(
            f"{_where(origin)}{what} elevation {entry['elevation']!r} is outside -90..90 degrees"
        )
    distance = entry.get("distance")
    if distance is not None:
        distance = _number(distance, f"{what} distance", origin)
        if distance <= 0.0:
            raise LayoutError(
                f"{_where(origin)}{what} distance {entry['distance']!r} must be positive "
                "(metres), or left out"
            )
    lfe = entry.get("lfe", False)
    if not isinstance(lfe, bool):
        raise LayoutError(f"{_where(origin)}{what} lfe must be true or false, got {lfe!r}")
    return Speaker(label, _wrap_azimuth(azimuth), elevation, distance, lfe)


def layout_from_dict(data: Mapping, *, name: str = "custom", origin: str | None = None) -> Layout:
    """Build and validate a layout from its JSON form.

    Schema::

        {"name": "...", "description": "...", "source": "...",
         "speakers": [{"label": "L", "azimuth": 30, "elevation": 0,
                       "distance": 2.0, "lfe": false}, ...]}

    ``name``, ``description``, ``source``, ``distance`` and ``lfe`` are optional. Labels
    are 1 to 16 printable characters (no commas); labels that name the same channel
    (``"L"`` and ``"fl"``) count as duplicates. Azimuth (degrees, positive left) may be
    given in -360..360 and is wrapped to (-180, 180]; elevation is in -90..90. Distance
    is in metres and positive. 1 to :data:`MAX_SPEAKERS` speakers.

    Parameters
    ----------
    data : mapping
        The parsed JSON object.
    name : str
        Name used when ``data`` has none.
    origin : str, optional
        File the data came from, named in error messages.

    Raises
    ------
    LayoutError
        For any field that is missing, of the wrong type or out of range.
    """
    if not isinstance(data, Mapping):
        raise LayoutError(
            f"{_where(origin)}a layout must be a JSON object with 'speakers', got "
            f"{type(data).__name__}"
        )
    _check_keys(data, _LAYOUT_KEYS, "the layout", origin)
    texts = {}
    for key, default in (("name", name), ("description", ""), ("source", "")):
        value = data.get(key, default)
        if not isinstance(value, str):
            raise LayoutError(f"{_where(origin)}layout {key} must be a string, got {value!r}")
        texts[key] = value
    if not texts["name"].strip():
        raise LayoutError(f"{_where(origin)}layout name must not be empty")
    if "speakers" not in data:
        raise LayoutError(f"{_where(origin)}the layout is missing 'speakers' (a list)")
    raw = data["speakers"]
    if not isinstance(raw, (list, tuple)):
        raise LayoutError(f"{_where(origin)}'speakers' must be a list, got {raw!r}")
    if not raw:
        raise LayoutError(f"{_where(origin)}the layout has no speakers")
    if len(raw) > MAX_SPEAKERS:
        raise LayoutError(
            f"{_where(origin)}the layout has {len(raw)} speakers; at most {MAX_SPEAKERS} "
            "are supported"
        )
    speakers = [_speaker_from_dict(entry, n, origin) for n, entry in enumerate(raw, 1)]
    seen: dict[str, str] = {}
    for s in speakers:
        key = _label_key(s.label)
        if key in seen:
            raise LayoutError(
                f"{_where(origin)}duplicate label {s.label!r} (same channel as "
                f"{seen[key]!r}); every speaker needs its own label"
            )
        seen[key] = s.label
    return Layout(texts["name"], tuple(speakers), texts["description"], texts["source"])


def load_layout_file(path: str | os.PathLike) -> Layout:
    """Read a custom layout from a JSON file (schema: :func:`layout_from_dict`).

    The layout's name defaults to the file name without its extension.

    Raises
    ------
    LayoutError
        If the file cannot be read, is not valid JSON (the message gives the line and
        column) or does not describe a valid layout.
    """
    data = read_json_file(path, kind="layout", max_bytes=MAX_LAYOUT_FILE_BYTES, error=LayoutError)
    return layout_from_dict(data, name=Path(path).stem, origin=str(path))


def get_layout(name_or_path: str | os.PathLike) -> Layout:
    """A built-in layout by name (case-insensitive), or a custom layout from a JSON file.

    Raises
    ------
    LayoutError
        If the name is unknown and is no ``.json`` file; the message lists the names.
    """
    if isinstance(name_or_path, str):
        key = name_or_path.strip().lower()
        for layout_name, layout in LAYOUTS.items():
            if layout_name.lower() == key:
                return layout
        if not (key.endswith(".json") or os.path.isfile(name_or_path)):
            raise LayoutError(
                f"unknown layout {name_or_path!r}; choose one of {', '.join(LAYOUTS)} or "
                "give a .json layout file"
            )
    elif not isinstance(name_or_path, os.PathLike):
        raise LayoutError(f"a layout is a name or a file path, got {name_or_path!r}")
    return load_layout_file(name_or_path)


# -- channel orders --------------------------------------------------------------------


def resolve_channel_order(layout: Layout, labels: Sequence[str]) -> tuple[int, ...]:
    """Map file channels, given by label in file order, onto the layout's speakers.

    Parameters
    ----------
    layout : Layout
        The layout the stem was mixed for.
    labels : sequence of str
        Label of each file channel, in file order (aliases accepted, see
        :meth:`Layout.index`).

    Returns
    -------
    tuple of int
        ``result[i]`` is the index in ``layout.speakers`` that file channel ``i`` feeds.
        Every speaker appears exactly once.

    Raises
    ------
    LayoutError
        If the count differs, or labels are unknown, repeated or missing; one message
        names all of them and lists the layout's labels.
    """
    labels = list(labels)
    listing = f"layout {layout.name!r} has {layout.channels}: {', '.join(layout.labels)}"
    if len(labels) != layout.channels:
        raise LayoutError(
            f"the channel order names {len(labels)} channel(s) "
            f"({', '.join(map(str, labels))}) but {listing}"
        )
    order: list[int] = []
    unknown: list[str] = []
    claimed: dict[int, list[str]] = {}
    for label in labels:
        i = layout._find(label)
        if i is None:
            unknown.append(repr(label))
            continue
        order.append(i)
        claimed.setdefault(i, []).append(label)
    problems = []
    if unknown:
        problems.append(f"unknown label(s) {', '.join(unknown)}")
    dupes = [
        f"{layout.labels[i]} (given as {', '.join(map(repr, given))})"
        for i, given in claimed.items()
        if len(given) > 1
    ]
    if dupes:
        problems.append(f"repeated: {'; '.join(dupes)}")
    missing = [layout.labels[i] for i in range(layout.channels) if i not in claimed]
    if missing:
        problems.append(f"missing: {', '.join(missing)}")
    if problems:
        raise LayoutError(f"bad channel order: {'; '.join(problems)}; {listing}")
    return tuple(order)


_TOKEN_SEPARATORS = re.compile(r"[._\- ]")
# Checked before splitting, since a BS.2051 name contains a separator ("-").
_BS2051_TAIL = re.compile(r"(?:^|[._\- ])([MUTB][+-]\d{3})$", re.IGNORECASE)


def labels_from_filenames(paths: Sequence[str | os.PathLike]) -> list[str] | None:
    """Channel labels read from mono stems' file names.

    The label is the last token of the name before its extension, tokens being split
    on ``.``, ``_``, ``-`` and spaces: ``mix.L.wav``, ``mix_Ls.wav``, ``scene-LFE.flac``,
    ``Mix.Rtf.wav`` and ``take3 C.wav`` give ``L``, ``Ls``, ``LFE``, ``Rtf`` and ``C``.
    A BS.2051 name at the end (``hall_M-030.wav``) is taken whole.

    Returns
    -------
    list of str or None
        Canonical labels (:func:`canonical_label`) in the order of ``paths``, or None if
        any name ends in no known label. Repeats are left for
        :func:`resolve_channel_order` to report.
    """
    labels: list[str] = []
    for path in paths:
        stem = Path(os.fspath(path)).stem
        tail = _BS2051_TAIL.search(stem)
        token = tail.group(1) if tail else _TOKEN_SEPARATORS.split(stem)[-1]
        known = _known_label(token) if token else None
        if known is None:
            return None
        labels.append(known)
    return labels


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
