"""Every error type of the renderer, in one place.

Every error the renderer raises on bad input derives from :class:`RendererError`, and
also from the matching built-in type, so callers may catch either. Messages name the
file or value that was wrong and, where there is a fixed set, the valid choices.

A cancelled render is not bad input: :class:`RenderCancelled` is its own kind, outside
:class:`RendererError`, so that code which reports bad input never reports a cancel as one.
"""

from __future__ import annotations

__all__ = [
    "shown",
    "AdmError",
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
    "SceneError",
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


class SceneError(RendererError, ValueError):
    """An Ambisonic scene cannot be decoded as asked (order, channels, normalisation)."""


class AdmError(RendererError, ValueError):
    """An ADM broadcast WAV (BS.2076 ``axml``, BS.2088 ``chna``) cannot be read as a master."""


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


def shown(value: object) -> str:
    """``value`` as an error message shows it: words, never the repr of an array or bytes.

    Numbers, strings, short lists and mappings appear as Python writes them (``3``,
    ``'x'``, ``[4, 3]``); numpy scalars and short arrays of numbers as plain numbers; other
    arrays by their size and dtype, long lists and bytes by their length. Cut at
    :data:`MAX_SHOWN` characters.

    Examples
    --------
    >>> import numpy as np
    >>> shown(np.float64(0.5)), shown("x"), shown([4, 3])
    ('0.5', "'x'", '[4, 3]')
    >>> shown(np.array([1.0, 2.5]))
    '[1.0, 2.5]'
    >>> shown(np.zeros(12))
    'an array of 12 float64 values'
    >>> shown(np.zeros((2, 3)))
    'a 2 x 3 array of float64 values'
    >>> shown(b"RIFF")
    'binary data (4 bytes)'
    """
    text = _described(value)
    return text if len(text) <= MAX_SHOWN else text[: MAX_SHOWN - 3] + "..."


#: Longest rendering of a value in a message; longer ones are cut with "...".
MAX_SHOWN = 120

#: Longest one-dimensional array of numbers shown value by value.
MAX_LISTED = 8


def _described(value: object) -> str:
    if isinstance(value, (bytes, bytearray, memoryview)):
        return f"binary data ({len(value)} byte{'' if len(value) == 1 else 's'})"
    shape = getattr(value, "shape", None)
    dtype = getattr(value, "dtype", None)
    if isinstance(shape, tuple) and dtype is not None:  # a numpy array or scalar
        item = getattr(value, "item", None)
        if shape == () and callable(item):
            number = item()
            return repr(number) if type(number) is type(value) else _described(number)
        tolist = getattr(value, "tolist", None)
        listed = len(shape) == 1 and shape[0] <= MAX_LISTED
        if listed and getattr(dtype, "kind", "") in "biuf" and callable(tolist):
            # A few numbers read best as the numbers themselves.
            return "[" + ", ".join(_described(v) for v in tolist()) + "]"
        if len(shape) == 1:
            return f"an array of {shape[0]} {dtype} values"
        return f"a {' x '.join(str(n) for n in shape)} array of {dtype} values"
    if isinstance(value, (list, tuple)) and len(value) > MAX_LISTED:
        return f"a {type(value).__name__} of {len(value)} items"
    if isinstance(value, list):
        return "[" + ", ".join(_described(v) for v in value) + "]"
    if isinstance(value, tuple):
        inner = ", ".join(_described(v) for v in value)
        return f"({inner},)" if len(value) == 1 else f"({inner})"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{_described(k)}: {_described(v)}" for k, v in value.items()) + "}"
    return repr(value)
