"""The stereo fold-down: a layout's channels mixed to two loudspeaker channels, as
ITU-R BS.775 downmixes a 3/2 mix to 2/0, for comparing a binaural render with the plain
two-channel reference.

The coefficients are data (:data:`BS775_DOWNMIX`, from ITU-R BS.775's table of downmix
equations, from memory of the Recommendation; the 3/2 case matches the formula quoted
everywhere: Lo = L + 0.7071 C + 0.7071 Ls, Ro = R + 0.7071 C + 0.7071 Rs). The LFE
channel is left out, as BS.775 does. Every other layout folds by one rule that gives
exactly the BS.775 equations for the systems BS.775 defines (a test checks this; the rule
itself is common practice):

* a loudspeaker on the centre line (azimuth 0 or 180, or the zenith) goes to both sides
  at 0.7071 (-3 dB);
* an ear-level loudspeaker in front, within 45 degrees of the centre line (L, R and
  anything between), goes to its own side at 1;
* every other loudspeaker (surrounds, backs, wides, heights, the bottom layer) goes to
  its own side at 0.7071;
* a channel spread over several loudspeakers (:attr:`~earfold.renderer.layouts.Speaker.
  spread`, as LCRS's ``S``) adds each loudspeaker's share at its spread gain, so BS.775's
  3/1 surround folds at 0.5 (-6 dB) to each side.

The fold-down is rendered by the same engine and delivery stage as a binaural render
(:func:`fold_feeds` gives one-tap :class:`~earfold.renderer.render.feeds.ChannelFeed` s):
loudness management, limiter and report alike, so the two are level-matched; there is no
HRTF, no HRTF equalisation and no room.
"""

from __future__ import annotations

import math
import types
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from ..layouts import Layout, Speaker
from .feeds import ChannelFeed

__all__ = [
    "BS775_DOWNMIX",
    "FOLD_CHOICES",
    "FOLD_SOURCE",
    "FOLD_RULE",
    "fold_coefficients",
    "fold_feeds",
    "fold_section",
]

#: Values of the ``fold`` option: the binaural render, or the stereo fold-down.
FOLD_CHOICES = ("binaural", "stereo")

#: -3 dB as BS.775 writes it.
_K = 0.7071

#: Where the fold-down's coefficients come from.
FOLD_SOURCE = "ITU-R BS.775, downmix equations to 2/0 (from memory of the Recommendation)"

#: How layouts BS.775 does not define are folded (common practice).
FOLD_RULE = (
    "LFE left out; centre line to both sides at 0.7071; ear-level front loudspeakers "
    "within 45 degrees to their side at 1; all others (surrounds, wides, heights) to "
    "their side at 0.7071; a channel spread over several loudspeakers adds their shares"
)

BS775_DOWNMIX: Mapping[str, Mapping[str, tuple[float, float]]] = types.MappingProxyType(
    {
        # system: {channel: (to Lo, to Ro)}
        "3/2": {
            "L": (1.0, 0.0),
            "R": (0.0, 1.0),
            "C": (_K, _K),
            "Ls": (_K, 0.0),
            "Rs": (0.0, _K),
        },
        "3/1": {"L": (1.0, 0.0), "R": (0.0, 1.0), "C": (_K, _K), "S": (0.5, 0.5)},
        "3/0": {"L": (1.0, 0.0), "R": (0.0, 1.0), "C": (_K, _K)},
        "2/2": {"L": (1.0, 0.0), "R": (0.0, 1.0), "Ls": (_K, 0.0), "Rs": (0.0, _K)},
    }
)
"""ITU-R BS.775's downmix equations to 2/0 (Lo, Ro) per source system, from memory of the
Recommendation's table (3/2 checked against the widely quoted formula)."""


def _direction_gains(azimuth: float, elevation: float) -> tuple[float, float]:
    """(left, right) gain of one loudspeaker direction by the rule of the module."""
    az = (float(azimuth) + 180.0) % 360.0 - 180.0  # in [-180, 180)
    if elevation >= 89.5 or abs(az) < 0.5 or abs(az) > 179.5:
        return _K, _K
    # Ear level: within the BS.2051 middle layer's band (below 15 degrees either way).
    front = abs(elevation) < 15.0 and abs(az) <= 45.0
    gain = 1.0 if front else _K
    return (gain, 0.0) if az > 0 else (0.0, gain)


def _speaker_gains(speaker: Speaker) -> tuple[float, float]:
    if speaker.lfe:
        return 0.0, 0.0
    left = right = 0.0
    for azimuth, elevation in speaker.directions:
        gl, gr = _direction_gains(azimuth, elevation)
        left += speaker.spread_gain * gl
        right += speaker.spread_gain * gr
    # 0.7071 x 0.7071 is 0.5 to the four places BS.775 writes.
    return round(left, 4), round(right, 4)


def fold_coefficients(layout: Layout) -> tuple[tuple[float, float], ...]:
    """(to left, to right) of each of the layout's loudspeakers, in the layout's order."""
    return tuple(_speaker_gains(s) for s in layout.speakers)


def fold_feeds(layout: Layout, order: Sequence[int]) -> tuple[ChannelFeed, ...]:
    """One-tap feeds of the stereo fold-down, one per file channel in file order."""
    gains = fold_coefficients(layout)
    feeds = []
    for channel, index in enumerate(order):
        spk = layout.speakers[index]
        left, right = gains[index]
        entry: dict[str, Any] = {"channel": channel, "label": spk.label}
        if spk.lfe:
            entry.update(lfe=True, method="left out (ITU-R BS.775)", left=0.0, right=0.0)
        else:
            entry.update(
                azimuth=spk.azimuth,
                elevation=spk.elevation,
                method="fold",
                left=left,
                right=right,
            )
        feeds.append(
            ChannelFeed(
                label=spk.label,
                filters=np.array([[left], [right]], dtype=np.float64),
                lfe=spk.lfe,
                report=entry,
            )
        )
    return tuple(feeds)


def fold_section(layout: Layout) -> dict[str, Any]:
    """The report's ``fold`` section of a stereo fold-down."""
    gains = fold_coefficients(layout)
    return {
        "mode": "stereo",
        "source": FOLD_SOURCE,
        "rule": FOLD_RULE,
        "coefficients": [
            {
                "label": s.label,
                "left": g[0],
                "right": g[1],
                "left_db": None if g[0] == 0 else round(20 * math.log10(g[0]), 2),
                "right_db": None if g[1] == 0 else round(20 * math.log10(g[1]), 2),
            }
            for s, g in zip(layout.speakers, gains)
        ],
    }
