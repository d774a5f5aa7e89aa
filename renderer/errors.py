"""Every error type of the renderer, in one place.

Every error the renderer raises on bad input derives from :class:`RendererError`, and
also from the matching built-in type, so callers may catch either. Messages name the
file or value that was wrong and, where there is a fixed set, the valid choices.

A cancelled render is not bad input: :class:`RenderCancelled` is its own kind, outside
:class:`RendererError`, so that code which reports bad input never reports a cancel as one.
"""

from __future__ import annotations

__all__ = [
    "describe_value",
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


def describe_value(value: object) -> str:
    """A value as an error message shows it: plain words, never an array's or bytes' repr.

    Strings, numbers and other small values appear as their ``repr``; numpy scalars as the
    Python number they hold; bytes decoded (as Latin-1, which never fails); arrays and
    other sized containers by their size, since their contents would bury the message.

    Examples
    --------
    >>> import numpy as np
    >>> describe_value(np.zeros(3))
    'an array of 3 values'
    >>> describe_value(np.zeros((2, 3)))
    'an array of shape (2, 3)'
    >>> describe_value(b"RIFF"), describe_value(np.float64(0.5)), describe_value("x")
    ("'RIFF'", '0.5', "'x'")
    """
    shape = getattr(value, "shape", None)
    if isinstance(value, (bytes, bytearray)):
        return repr(bytes(value).decode("latin-1"))
    if isinstance(shape, tuple) and hasattr(value, "dtype"):
        if shape == ():  # a numpy scalar or a 0-d array: the number it holds
            item = getattr(value, "item", None)
            return repr(item()) if callable(item) else repr(value)
        if len(shape) == 1:
            return f"an array of {shape[0]} value{'' if shape[0] == 1 else 's'}"
        return f"an array of shape {tuple(int(n) for n in shape)!r}"
    if isinstance(value, (list, tuple, set, frozenset, dict)) and len(value) > 8:
        return f"a {type(value).__name__} of {len(value)} items"
    return repr(value)
