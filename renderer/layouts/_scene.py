"""Ambisonic scenes as an input kind beside loudspeaker layouts: :class:`SceneLayout`.

A scene's channels are spherical-harmonic components, not loudspeakers. The render
still needs, per file channel, a label (the report, the stream's channel names, ``solo``)
and a loudness weight (BS.1770 input metering); :class:`SceneLayout` gives both while
keeping the one type a plan carries (:class:`~._model.Layout`). Its :attr:`speakers`
are channel placeholders: their ``azimuth``/``elevation`` are 0 and mean nothing, so
nothing that places loudspeakers may take a scene (the plan refuses the stereo fold-down
and custom channel orders for scenes, and the room renders the decoder's own virtual
loudspeakers instead), and :meth:`SceneLayout.to_dict` shows no directions.

Names (as the command line's ``--layout`` takes them): ``foa`` (first order, 4 channels)
and ``hoa2`` to ``hoa7`` ((N + 1)**2 channels), ACN channel order as AmbiX defines it
(Nachbar, Zotter, Deleflie and Sontacchi, "AmbiX - a suggested Ambisonics format",
Ambisonics Symposium 2011). Labels: ``ACN0`` ... ``ACN{C-1}``; a first-order FuMa scene
keeps its own channel order and names, ``W X Y Z``.

Loudness: a scene's input loudness is that of its omnidirectional pressure, the W
channel (BS.1770 weight 1 on W, 0 on every other channel; FuMa carries W at -3 dB, so
its W weighs 2, i.e. +3 dB in power). The render's calibration matches it
(:mod:`earfold.renderer.render.plan`, ``_scene_calibration``).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from ..errors import LayoutError, shown
from ._model import Layout, Speaker

__all__ = [
    "SCENES",
    "SCENE_NORMALISATIONS",
    "SCENE_SOURCE",
    "SceneLayout",
    "scene_layout",
    "stem_scene",
]

#: Where the scene convention comes from, as listings and reports say.
SCENE_SOURCE = (
    "AmbiX (Nachbar, Zotter, Deleflie, Sontacchi, 'AmbiX - a suggested Ambisonics format', "
    "Ambisonics Symposium 2011): ACN channel order, SN3D; N3D and FuMa converted"
)

#: Input normalisations a scene may be in (FuMa only at first order).
SCENE_NORMALISATIONS = ("sn3d", "n3d", "fuma")

_ORDERS = range(1, 8)


def _name(order: int) -> str:
    return "foa" if order == 1 else f"hoa{order}"


def _labels(order: int, normalisation: str) -> tuple[str, ...]:
    if normalisation == "fuma":
        return ("W", "X", "Y", "Z")
    return tuple(f"ACN{k}" for k in range((order + 1) ** 2))


@dataclass(frozen=True)
class SceneLayout(Layout):
    """An Ambisonic scene of one order and normalisation, in the form a plan carries.

    Attributes
    ----------
    order : int
        Ambisonic order, 1 to 7: ``(order + 1)**2`` channels.
    normalisation : str
        ``"sn3d"`` (AmbiX), ``"n3d"`` or ``"fuma"`` (first order, channels W X Y Z).

    Examples
    --------
    >>> scene = scene_layout("hoa3")
    >>> scene.channels, scene.labels[:3], scene.kind
    (16, ('ACN0', 'ACN1', 'ACN2'), 'scene')
    >>> scene_layout("foa", "fuma").labels
    ('W', 'X', 'Y', 'Z')
    """

    order: int = 1
    normalisation: str = "sn3d"

    @property
    def kind(self) -> str:
        """``"scene"`` (a loudspeaker :class:`Layout` says ``"loudspeakers"``)."""
        return "scene"

    @property
    def normalisations(self) -> tuple[str, ...]:
        """The normalisations this order may come in."""
        return SCENE_NORMALISATIONS if self.order == 1 else SCENE_NORMALISATIONS[:2]

    @property
    def orders(self) -> dict[str, tuple[str, ...]]:
        """Only the scene's own order (ACN, or W X Y Z for FuMa): no other is defined."""
        return {"wav": self.labels}

    @property
    def loudness_weights(self) -> tuple[float, ...]:
        """BS.1770 weight of each channel: the W channel's pressure alone (see module)."""
        w = 2.0 if self.normalisation == "fuma" else 1.0
        return (w,) + (0.0,) * (self.channels - 1)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form: name, kind, order, normalisation, channel labels (no
        directions: ``speakers`` is empty, a scene has none)."""
        return {
            "name": self.name,
            "kind": self.kind,
            "description": self.description,
            "source": self.source,
            "order": self.order,
            "normalisation": self.normalisation,
            "channel_order": "FuMa (W X Y Z)" if self.normalisation == "fuma" else "ACN",
            "channels": self.channels,
            "labels": list(self.labels),
            "speakers": [],
        }

    def listing(self) -> dict[str, Any]:
        """The scene as catalogues list it: :meth:`to_dict` with every normalisation it
        takes and the default one."""
        entry = self.to_dict()
        del entry["normalisation"]
        entry["channel_order"] = "ACN"
        return {
            **entry,
            "normalisations": list(self.normalisations),
            "default_normalisation": "sn3d",
            "orders": {"wav": list(self.labels)},
        }


def scene_layout(name: str, normalisation: str = "sn3d") -> SceneLayout:
    """The scene ``name`` (``foa``, ``hoa2`` ... ``hoa7``) in ``normalisation``.

    Raises
    ------
    LayoutError
        For an unknown name or normalisation, or FuMa above first order.
    """
    key = name.strip().lower() if isinstance(name, str) else name
    base = SCENES.get(key) if isinstance(key, str) else None
    if base is None:
        raise LayoutError(
            f"unknown Ambisonic scene {shown(name)}; choose one of {', '.join(SCENES)}"
        )
    if normalisation not in SCENE_NORMALISATIONS:
        raise LayoutError(
            f"unknown Ambisonic normalisation {shown(normalisation)}; choose one of "
            f"{', '.join(SCENE_NORMALISATIONS)}"
        )
    if normalisation == "fuma" and base.order != 1:
        raise LayoutError(
            f"FuMa is read for first order only (foa: W X Y Z); {base.name} "
            f"({base.channels} channels) needs ambisonic_norm sn3d or n3d"
        )
    return _scene(base.order, normalisation)


def _scene(order: int, normalisation: str) -> SceneLayout:
    channels = (order + 1) ** 2
    what = "first order" if order == 1 else f"order {order}"
    return SceneLayout(
        name=_name(order),
        speakers=tuple(Speaker(label, 0.0, 0.0) for label in _labels(order, normalisation)),
        description=f"Ambisonic scene, {what}, {channels} channels (ACN order; SN3D, N3D"
        + (" or FuMa W X Y Z)" if order == 1 else ")"),
        source=SCENE_SOURCE,
        order=order,
        normalisation=normalisation,
    )


#: The scenes by name, in SN3D: ``foa``, ``hoa2`` ... ``hoa7``.
SCENES: dict[str, SceneLayout] = {_name(n): _scene(n, "sn3d") for n in _ORDERS}


def stem_scene(scene: SceneLayout, channels: int) -> SceneLayout:
    """The scene a stem of ``channels`` channels holds when it is rendered as ``scene``.

    The stem's own order when it is ``scene``'s or higher: a higher-order stem rendered
    at a lower order keeps its first ``(order + 1)^2`` ACN channels and leaves the rest out
    (truncation of the order, common practice; how orders are compared on one master).
    FuMa is first order only.

    Raises
    ------
    LayoutError
        For a channel count that is not a full-sphere scene's of ``scene``'s order or
        higher, naming the counts that fit.

    Examples
    --------
    >>> stem_scene(scene_layout("hoa2"), 16).name, stem_scene(scene_layout("hoa2"), 9).name
    ('hoa3', 'hoa2')
    """
    root = int(round(float(channels) ** 0.5)) if channels > 0 else 0
    square = root * root == channels and 2 <= root <= max(_ORDERS) + 1
    if square and root - 1 >= scene.order and (scene.normalisation != "fuma" or root == 2):
        return scene if root - 1 == scene.order else _scene(root - 1, scene.normalisation)
    if square and scene.normalisation == "fuma":
        hint = "; FuMa is read for first order only (4 channels, W X Y Z)"
    elif square:
        hint = (
            f"; {channels} channels is an order-{root - 1} scene: choose layout "
            f"{'foa' if root == 2 else f'hoa{root - 1}'} or a lower order"
        )
    else:
        hint = "; a full-sphere scene of order N has (N + 1)^2 channels: 4, 9, 16, 25, 36, 49 or 64"
    raise LayoutError(
        f"the stem has {channels} channel(s) but layout {scene.name!r} is an order-"
        f"{scene.order} Ambisonic scene of {scene.channels} channels ((order + 1)^2, "
        f"{'W X Y Z' if scene.normalisation == 'fuma' else 'ACN order'}; a stem of a "
        f"higher order is decoded at this order){hint}"
    )
