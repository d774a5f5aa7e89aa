"""Every error type of the renderer, in one place.

Every error the renderer raises on bad input derives from :class:`RendererError`, and
also from the matching built-in type, so callers may catch either. Messages name the
file or value that was wrong and, where there is a fixed set, the valid choices.

A cancelled render is not bad input: :class:`RenderCancelled` is its own kind, outside
:class:`RendererError`, so that code which reports bad input never reports a cancel as one.
"""

from __future__ import annotations

__all__ = [
    "AudioError",
    "DeliveryError",
    "EqualisationError",
    "HeadphoneEqError",
    "HrirError",
    "LayoutError",
    "OptionError",
    "RenderCancelled",
    "RendererError",
    "RoomError",
    "SofaError",
]


class RendererError(Exception):
    """Base class of every error the renderer raises on bad input."""


class SofaError(RendererError, ValueError):
    """A SOFA (AES69) file cannot be read or cannot be used for rendering."""


class HrirError(RendererError, ValueError):
    """An HRIR set cannot serve a request (e.g. a direction or rate it cannot give)."""


class LayoutError(RendererError, ValueError):
    """A loudspeaker layout, a channel label or a channel order is invalid."""


class AudioError(RendererError, ValueError):
    """An audio file cannot be read, or a set of stems does not fit together."""


class RoomError(RendererError, ValueError):
    """A room description is invalid, or a loudspeaker does not fit in the room."""


class EqualisationError(RendererError, ValueError):
    """An equalisation cannot be built (unknown choice, unusable set)."""


class HeadphoneEqError(RendererError, ValueError):
    """A headphone-EQ file or band list cannot be used."""


class DeliveryError(RendererError, ValueError):
    """A loudness target or true-peak ceiling is not usable."""


class OptionError(RendererError, ValueError):
    """A render option has a value outside its declared type, choices or range."""


class RenderCancelled(Exception):
    """The render was cancelled by its caller; no output was left behind.

    Not a :class:`RendererError`: nothing was wrong with the input.
    """
