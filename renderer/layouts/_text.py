"""How a value a caller gave appears in an error message."""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

__all__ = ["shown"]

#: Longest rendering of a value in a message; longer ones are cut with "...".
MAX_SHOWN = 120


def shown(value: object) -> str:
    """``value`` as an error message shows it: as Python writes numbers, strings, lists and
    objects (``3``, ``'x'``, ``[4, 3]``), but an array by its shape and dtype and bytes by
    their length, never their repr; numpy scalars as plain numbers. Cut at
    :data:`MAX_SHOWN` characters.
    """
    text = _shown(value)
    return text if len(text) <= MAX_SHOWN else text[: MAX_SHOWN - 3] + "..."


def _shown(value: object) -> str:
    if isinstance(value, (bytes, bytearray, memoryview)):
        return f"{type(value).__name__} of length {len(value)}"
    if isinstance(value, np.ndarray):
        shape = " x ".join(str(n) for n in value.shape) or "0-d"
        return f"a {shape} array of {value.dtype}"
    if isinstance(value, np.generic):
        return repr(value.item())
    if isinstance(value, list):
        return "[" + ", ".join(_shown(v) for v in value) + "]"
    if isinstance(value, tuple):
        inner = ", ".join(_shown(v) for v in value)
        return f"({inner},)" if len(value) == 1 else f"({inner})"
    if isinstance(value, Mapping):
        return "{" + ", ".join(f"{_shown(k)}: {_shown(v)}" for k, v in value.items()) + "}"
    return repr(value)
