"""Small signal-processing helpers that more than one wing needs."""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

__all__ = ["minimum_phase_spectrum"]


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
