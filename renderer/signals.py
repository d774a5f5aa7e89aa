"""Small signal-processing helpers that more than one wing needs."""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

__all__ = ["minimum_phase_spectrum", "sos_response"]


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
