"""The loudspeaker and the layout: an ordered set of loudspeakers.

A :class:`Layout` is an ordered tuple of :class:`Speaker` s; its order is the layout's
default channel order in a file (file channel *i* carries speaker *i* unless a channel
order, a WAV channel mask or the stems' file names say otherwise). Directions follow
:mod:`earfold.renderer.geometry`: degrees, azimuth positive to the LEFT, elevation up, as in
ITU-R BS.2051.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt

from ..errors import LayoutError, shown
from ..geometry import direction_to_vector
from ._labels import BS2051_NAME, FALLBACKS, label_key, layer_of, wrap_azimuth

__all__ = ["Layout", "Speaker"]


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
    spread : tuple of (float, float)
        Directions (azimuth, elevation in degrees) of the loudspeakers that reproduce
        this one channel together, each fed at ``1 / sqrt(n)`` of it (-3 dB for two, so
        the channel's power is kept); empty (the usual case): the channel has a
        loudspeaker of its own at ``azimuth``/``elevation``. The mono surround ``S`` of
        ITU-R BS.775's 3/1 system is such a channel (see the layout catalogue).
    """

    label: str
    azimuth: float
    elevation: float
    distance: float | None = None
    lfe: bool = False
    spread: tuple[tuple[float, float], ...] = ()

    @property
    def directions(self) -> tuple[tuple[float, float], ...]:
        """Where the channel is reproduced: ``spread``, or the speaker's own direction."""
        return self.spread or ((self.azimuth, self.elevation),)

    @property
    def spread_gain(self) -> float:
        """The gain of each of the channel's directions: ``1 / sqrt(len(directions))``."""
        return float(1.0 / np.sqrt(len(self.directions)))

    @property
    def vector(self) -> npt.NDArray[np.float64]:
        """Unit direction vector (x front, y left, z up), shape ``(3,)``."""
        vector: npt.NDArray[np.float64] = direction_to_vector(self.azimuth, self.elevation)
        return vector


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
            raise LayoutError(f"layout {shown(self.name)} has no speakers")
        keys = [label_key(s.label) for s in self.speakers]
        if len(set(keys)) != len(keys):
            dupes = sorted({s.label for s, k in zip(self.speakers, keys) if keys.count(k) > 1})
            raise LayoutError(f"layout {shown(self.name)} has duplicate labels: {', '.join(dupes)}")

    @property
    def labels(self) -> tuple[str, ...]:
        """Channel labels in default order."""
        return tuple(s.label for s in self.speakers)

    @property
    def channels(self) -> int:
        """Number of channels (loudspeakers, LFE included)."""
        return len(self.speakers)

    @property
    def orders(self) -> dict[str, tuple[str, ...]]:
        """The layout's named channel orders: name -> labels in file order.

        ``wav`` is always there: the layout's own (default) order, which for the built-in
        layouts is the WAV channel-mask order (SMPTE practice). ``film`` is there when the
        layout has ``L`` and ``R``: ``L C R``, then the other ear-level loudspeakers from
        front to back (left before right), then the LFE channel(s), then the remaining
        (height and bottom) loudspeakers in the default order, the order film and post
        production sessions use (common practice): 5.1 as ``L C R Ls Rs LFE``, 7.1.4 as
        ``L C R Ls Rs Lrs Rrs LFE Ltf Rtf Ltr Rtr``.
        """
        orders = {"wav": self.labels}
        film = self._film_order()
        if film is not None:
            orders["film"] = film
        return orders

    def _film_order(self) -> tuple[str, ...] | None:
        left, right, centre = self._find("L"), self._find("R"), self._find("C")
        if left is None or right is None:
            return None
        front = [i for i in (left, centre, right) if i is not None]
        rest = [i for i in range(self.channels) if i not in front]
        lfe = [i for i in rest if self.speakers[i].lfe]
        ear = [
            i
            for i in rest
            if not self.speakers[i].lfe and layer_of(self.speakers[i].elevation) == "M"
        ]
        # Front to back; at one distance from the front the left one (positive azimuth) first.
        ear.sort(key=lambda i: (abs(self.speakers[i].azimuth), -self.speakers[i].azimuth, i))
        others = [i for i in rest if i not in lfe and i not in ear]
        return tuple(self.labels[i] for i in (*front, *ear, *lfe, *others))

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
                f"{shown(label)} is not a channel of layout {shown(self.name)}; its channels are "
                f"{', '.join(self.labels)}"
            )
        return found

    def _find(self, label: str) -> int | None:
        """Position of the speaker ``label`` names, or None (see :meth:`index`)."""
        if not isinstance(label, str):
            return None
        labels = self.labels
        if label in labels:
            return labels.index(label)
        keys = [label_key(x) for x in labels]
        key = label_key(label.strip())
        if key in keys:
            return keys.index(key)
        fallback = FALLBACKS.get(key)
        if fallback is not None and fallback in keys:
            # Only when the layout lacks the label itself (checked above).
            return keys.index(fallback)
        return self._find_by_position(key)

    def _find_by_position(self, key: str) -> int | None:
        m = BS2051_NAME.fullmatch(key)
        if m is None:
            return None
        layer, azimuth = m.group(1), wrap_azimuth(float(m.group(2) + m.group(3)))
        for i, s in enumerate(self.speakers):
            if s.lfe or layer_of(s.elevation) != layer:
                continue
            # T+000 is the zenith: its azimuth is arbitrary.
            if layer == "T" or abs(wrap_azimuth(s.azimuth - azimuth)) < 0.5:
                return i
        return None

    @property
    def kind(self) -> str:
        """``"loudspeakers"``; an Ambisonic scene (:class:`~._scene.SceneLayout`) says
        ``"scene"``."""
        return "loudspeakers"

    def listing(self) -> dict[str, Any]:
        """The layout as catalogues list it: :meth:`to_dict` plus ``orders`` (name -> labels)
        and ``kind`` (``"loudspeakers"``)."""
        return {
            **self.to_dict(),
            "orders": {k: list(v) for k, v in self.orders.items()},
            "kind": self.kind,
        }

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form, in the schema :func:`layout_from_dict` reads."""
        speakers = []
        for s in self.speakers:
            entry: dict[str, Any] = {
                "label": s.label,
                "azimuth": s.azimuth,
                "elevation": s.elevation,
            }
            if s.distance is not None:
                entry["distance"] = s.distance
            entry["lfe"] = s.lfe
            if s.spread:
                entry["spread"] = [{"azimuth": a, "elevation": e} for a, e in s.spread]
            speakers.append(entry)
        return {
            "name": self.name,
            "description": self.description,
            "source": self.source,
            "speakers": speakers,
        }
