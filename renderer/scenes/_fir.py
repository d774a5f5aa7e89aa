"""From a decoder's frequency responses to FIR filters of a documented length.

Decoders are designed bin by bin on an FFT grid of :func:`design_size` points, twice the
filter length or more, so that the responses' impulse responses have room to decay; then
each is transformed back, cut to ``taps`` samples, and faded out over the last
:data:`FADE_FRACTION` of them with a half Hann window (a raised-cosine taper: the cut adds
no discontinuity, hence no broadband click in the response). What the cut removed is
reported, in dB below the kept energy.
"""

from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt

from ..errors import SceneError

__all__ = ["FADE_FRACTION", "MIN_TAPS", "default_taps", "design_size", "to_fir"]

FloatArray = npt.NDArray[np.float64]

#: Share of the filter faded out at its end.
FADE_FRACTION = 1.0 / 8.0

#: Shortest filter accepted (64 taps, 1.3 ms at 48 kHz: shorter cannot hold an HRIR's
#: interaural delay and pinna response).
MIN_TAPS = 64

#: Longest filter accepted: 2**16 taps (1.4 s at 48 kHz) is far beyond any HRIR.
MAX_TAPS = 1 << 16


def default_taps(set_taps: int) -> int:
    """Default filter length for a set's responses of ``set_taps``: the power of two at or
    above their length, at least 256 (5.3 ms at 48 kHz). The decoders add little length of
    their own (the crossover's ringing is over within a few milliseconds); what the
    magnitude fit spreads before the onset is cut whatever the length, and reported."""
    return max(256, 1 << math.ceil(math.log2(set_taps)))


def design_size(taps: int) -> int:
    """FFT length the decoders are designed on: the power of two at or above ``2 taps``."""
    return 1 << math.ceil(math.log2(2 * taps))


def check_taps(taps: object) -> int:
    """``taps`` as an int within :data:`MIN_TAPS` .. :data:`MAX_TAPS`, or :class:`SceneError`."""
    if isinstance(taps, bool) or not isinstance(taps, (int, np.integer)):
        raise SceneError(f"filter length must be an integer number of taps, got {taps!r}")
    if not MIN_TAPS <= int(taps) <= MAX_TAPS:
        raise SceneError(f"filter length must be {MIN_TAPS} to {MAX_TAPS} taps, got {int(taps)}")
    return int(taps)


def to_fir(spectra: npt.NDArray[np.complex128], nfft: int, taps: int) -> tuple[FloatArray, float]:
    """Filters (..., taps) from one-sided spectra (..., nfft // 2 + 1), and the cut in dB.

    The second value is the energy beyond ``taps`` (including any that wrapped around to
    the end of the design grid) relative to the energy kept, in dB (-inf if none).
    """
    full = np.fft.irfft(spectra, n=nfft, axis=-1)
    kept = full[..., :taps].copy()
    fade = max(1, int(round(taps * FADE_FRACTION)))
    kept[..., taps - fade :] *= 0.5 * (1.0 + np.cos(np.pi * (np.arange(fade) + 0.5) / fade))
    removed = float(np.sum(full[..., taps:] ** 2))
    total = float(np.sum(full[..., :taps] ** 2))
    cut_db = 10.0 * math.log10(removed / total) if removed > 0 and total > 0 else -math.inf
    return kept, cut_db
