"""How a value a caller gave appears in an error message."""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

__all__ = ["shown"]

#: Longest rendering of a value in a message; longer ones are cut with "...".
MAX_SHOWN = 120

#: Longest one-dimensional array of numbers shown value by value.
MAX_LISTED = 8


def shown(value: object) -> str:
    """``value`` as an error message shows it, never as the repr of an array or of bytes.

    Numbers, strings, lists and objects appear as Python writes them (``3``, ``'x'``,
    ``[4, 3]``); numpy scalars and short arrays of numbers as plain numbers; other arrays
    by their size and dtype; bytes by their length. Cut at :data:`MAX_SHOWN` characters.
    """
    text = _shown(value)
    return text if len(text) <= MAX_SHOWN else text[: MAX_SHOWN - 3] + "..."


def _shown(value: object) -> str:
    if isinstance(value, (bytes, bytearray, memoryview)):
        return f"binary data ({len(value)} byte{'' if len(value) == 1 else 's'})"
    if isinstance(value, np.ndarray):
        if value.ndim == 0:
            return _shown(value.item())
        if value.ndim == 1 and value.size <= MAX_LISTED and value.dtype.kind in "biuf":
            # A few numbers read best as the numbers themselves.
            return "[" + ", ".join(_shown(v) for v in value.tolist()) + "]"
        if value.ndim == 1:
            return f"an array of {value.size} {value.dtype} values"
        shape = " x ".join(str(n) for n in value.shape)
        return f"a {shape} array of {value.dtype} values"
    if isinstance(value, np.generic):
        item = value.item()
        return repr(item) if isinstance(item, np.generic) else _shown(item)
    if isinstance(value, list):
        return "[" + ", ".join(_shown(v) for v in value) + "]"
    if isinstance(value, tuple):
        inner = ", ".join(_shown(v) for v in value)
        return f"({inner},)" if len(value) == 1 else f"({inner})"
    if isinstance(value, Mapping):
        return "{" + ", ".join(f"{_shown(k)}: {_shown(v)}" for k, v in value.items()) + "}"
    return repr(value)
