"""The one audio block convention: frames x channels, floating point."""

from __future__ import annotations

import numpy as np

from .errors import AudioError


def check_block(block: np.ndarray, channels: int) -> np.ndarray:
    """``block`` as an array of shape ``(frames, channels)`` with float samples.

    Raises :class:`~earfold.renderer.errors.AudioError` naming the expected and actual shape or
    dtype. No copy is made.
    """
    x = np.asarray(block)
    if x.ndim != 2 or x.shape[1] != channels:
        raise AudioError(f"expected a block of shape (frames, {channels}), got {x.shape!r}")
    if not np.issubdtype(x.dtype, np.floating):
        raise AudioError(f"expected float samples, got dtype {str(x.dtype)!r}")
    return x
