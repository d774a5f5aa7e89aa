"""How the eq wing's error messages show the values they refuse."""

from __future__ import annotations

from typing import Any

import numpy as np

__all__ = ["shown"]


def shown(value: object) -> str:
    """A value as an error message shows it.

    Numbers and text as written; arrays, bytes, mappings and sequences by their kind and
    size, never their contents (a message must stay one readable line).
    """
    # numpy scalars first: np.float64 is a float, but its repr names numpy.
    if isinstance(value, np.generic):
        item: Any = value.item()
        return repr(item) if isinstance(item, (bool, int, float, str)) else type(value).__name__
    if isinstance(value, (bool, int, float, str)) or value is None:
        return repr(value)
    if isinstance(value, np.ndarray):
        return f"an array of shape {value.shape} ({value.dtype})"
    if isinstance(value, (bytes, bytearray, memoryview)):
        return f"{len(value)} bytes"
    if isinstance(value, (list, tuple, dict)):
        return f"a {type(value).__name__} of {len(value)} items"
    return f"a value of type {type(value).__name__}"
