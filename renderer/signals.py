"""Small signal-processing helpers that more than one wing needs."""

from __future__ import annotations

import importlib
import sys
import types
from collections.abc import Callable
from typing import Any

import numpy as np
import numpy.typing as npt

__all__ = ["minimum_phase_spectrum", "scipy_signal", "sos_response"]

#: Names of ``scipy.stats`` that ``scipy.signal`` takes at its import but calls only
#: inside functions: these get a stand-in that loads ``scipy.stats`` when called.
_CALLED_LATER = ("scoreatpercentile",)


def _real_stats(stand_in: types.ModuleType) -> types.ModuleType:
    if sys.modules.get("scipy.stats") is stand_in:
        del sys.modules["scipy.stats"]
    return importlib.import_module("scipy.stats")


def _deferred(stand_in: types.ModuleType, name: str) -> Callable[..., Any]:
    def call(*args: Any, **kwargs: Any) -> Any:
        return getattr(_real_stats(stand_in), name)(*args, **kwargs)

    call.__name__ = name
    return call


def scipy_signal() -> Any:
    """``scipy.signal``, imported (the first time) without importing ``scipy.stats``.

    The renderer filters with ``scipy.signal`` only where it must (preparing filters that
    the cache then keeps; a repeated render does not import it at all). Its own import
    loads all of ``scipy.stats`` for one function (``scoreatpercentile``, which only its
    wavelet peak finder calls): a tenth to a quarter of a second for a module no render
    uses. While ``scipy.signal`` imports here, ``sys.modules["scipy.stats"]`` is a
    stand-in: the names of :data:`_CALLED_LATER` are functions that load the real module
    when called; any other name loads it at once (so a change in what ``scipy.signal``
    takes costs time, never correctness). The stand-in is gone once ``scipy.signal`` is
    imported; a later ``import scipy.stats`` is the real one. When either module is
    already loaded, this is a plain import.
    """
    if "scipy.signal" in sys.modules or "scipy.stats" in sys.modules:
        return importlib.import_module("scipy.signal")
    import scipy

    stand_in = types.ModuleType("scipy.stats")

    def lookup(name: str) -> Any:
        if name in _CALLED_LATER:
            return _deferred(stand_in, name)
        if name.startswith("__"):
            raise AttributeError(name)
        return getattr(_real_stats(stand_in), name)

    stand_in.__getattr__ = lookup  # type: ignore[method-assign]
    sys.modules["scipy.stats"] = stand_in
    try:
        return importlib.import_module("scipy.signal")
    finally:
        if sys.modules.get("scipy.stats") is stand_in:
            del sys.modules["scipy.stats"]
        # (read from the package's dict: its attribute lookup would import the real module)
        if vars(scipy).get("stats") is stand_in:  # pragma: no cover - not set by the import
            delattr(scipy, "stats")


def minimum_phase_spectrum(
    magnitude: npt.ArrayLike, nfft: int, *, floor: float = 1e-12
) -> npt.NDArray[np.complex128]:
    """Minimum-phase spectrum with the given magnitude, by the real-cepstrum method.

    The homomorphic method (Oppenheim and Schafer, *Discrete-Time Signal Processing*,
    ch. 13): the real cepstrum of ``log |H|`` is folded onto positive quefrencies, which
    gives the cepstrum of the minimum-phase sequence with the same magnitude.

    Parameters
    ----------
    magnitude : array_like
        ``|H|`` on the ``nfft // 2 + 1`` bins of ``numpy.fft.rfft``; values under
        ``floor`` are raised to it (the logarithm of zero is not finite).
    nfft : int
        Transform length (even).
    floor : float
        Smallest magnitude taken.

    Returns
    -------
    ndarray of complex
        The minimum-phase spectrum on the same bins.

    Examples
    --------
    >>> import numpy as np
    >>> h = np.fft.irfft(minimum_phase_spectrum(np.ones(5), 8), n=8)
    >>> np.round(h, 12).tolist()
    [1.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0]
    """
    log_mag = np.log(np.maximum(np.asarray(magnitude, dtype=np.float64), floor))
    cepstrum = np.fft.irfft(log_mag, n=nfft)
    folded = np.zeros(nfft)
    folded[0] = cepstrum[0]
    folded[1 : nfft // 2] = 2.0 * cepstrum[1 : nfft // 2]
    folded[nfft // 2] = cepstrum[nfft // 2]
    spectrum: npt.NDArray[np.complex128] = np.exp(np.fft.rfft(folded))
    return spectrum


def sos_response(
    sos: npt.ArrayLike, freqs: npt.ArrayLike, samplerate: float
) -> npt.NDArray[np.complex128]:
    """Frequency response of a cascade of biquads at ``freqs`` (Hz), without scipy.signal.

    Each section ``[b0, b1, b2, a0, a1, a2]`` is evaluated on the unit circle,
    ``z = exp(2j pi f / fs)``: ``H(z) = (b0 + b1 z^-1 + b2 z^-2) / (a0 + a1 z^-1 + a2
    z^-2)``, and the sections multiply. The same values as
    ``scipy.signal.sosfreqz(sos, worN=freqs, fs=samplerate)[1]`` (a test compares them),
    for callers that must not pay ``scipy.signal``'s import (a render's start-up).

    Examples
    --------
    A pure delay of one sample has unit magnitude and a phase of ``-2 pi f / fs``:

    >>> import numpy as np
    >>> h = sos_response([[0.0, 1.0, 0.0, 1.0, 0.0, 0.0]], [0.0, 12000.0], 48000.0)
    >>> np.round(np.abs(h), 12).tolist(), np.round(np.angle(h), 12).tolist()
    ([1.0, 1.0], [0.0, -1.570796326795])
    """
    sections = np.atleast_2d(np.asarray(sos, dtype=np.float64))
    if sections.ndim != 2 or sections.shape[1] != 6:
        raise ValueError(f"sos must have shape (sections, 6), got {sections.shape!r}")
    zinv = np.exp(-2j * np.pi * np.asarray(freqs, dtype=np.float64) / float(samplerate))
    h = np.ones(zinv.shape, dtype=np.complex128)
    for b0, b1, b2, a0, a1, a2 in sections:
        h *= (b0 + zinv * (b1 + zinv * b2)) / (a0 + zinv * (a1 + zinv * a2))
    return h
