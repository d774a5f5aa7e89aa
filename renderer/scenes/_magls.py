"""The magnitude-least-squares binaural decoder with the diffuse-field covariance constraint.

Method (Schoerkhuber, Zaunschirm and Hoeldrich, "Binaural rendering of Ambisonic signals via
magnitude least squares", DAGA 2018; Zaunschirm, Schoerkhuber and Hoeldrich, "Binaural
rendering of Ambisonic signals by head-related impulse response time alignment and a
diffuseness constraint", JASA 143(6) 3616, 2018), solved on the set's own measurement grid:

1. Harmonics ``Y`` (N3D, M x C) of the M measured directions, quadrature weights ``w``
   (:func:`._weights.grid_weights`, sum 1) and the Tikhonov-regularised weighted
   pseudo-inverse ``P = (Y^T W Y + lambda I)^-1 Y^T W``. ``lambda`` is
   :data:`REGULARISATION` (relative to the Gram matrix's unit diagonal): it keeps the
   harmonics that live in an unmeasured cap (below -40 degrees on many sets) from growing
   without bound, and changes nothing where the grid covers the sphere.
2. At and below the cutoff ``f_c`` (:func:`._weights.crossover_frequency`: ``k a = N``),
   least squares on the complex responses: ``D(f) = P H(f)``. Interaural time differences,
   which the ear reads below about 1.5 kHz, are fitted as they are.
3. Above it, magnitude least squares: the phase of the previous bin's decoded responses
   ``Y D(f_prev)`` is given to the measured magnitudes, ``D(f) = P (|H(f)| e^{i phi})``
   (one iteration per bin, as the DAGA paper does): the fit spends the few harmonics on
   the magnitudes, which is what the ear reads up there, instead of on a phase it cannot
   follow.
4. The diffuse-field covariance constraint (JASA 2018, after Vilkamo, Baeckstroem and
   Kuntz, J. Audio Eng. Soc. 61(6), 2013): per bin, the 2 x 2 covariance of the ears'
   signals in a diffuse field, ``D^H D`` for N3D input, is made equal to the set's own,
   ``sum_i w_i h_i h_i^H``, by the 2 x 2 mixing that changes the signals least.

The result is expressed for ACN/SN3D input and cut to FIR filters (:mod:`._fir`).
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from ._covariance import constrain_diffuse
from ._harmonics import acn_degrees, real_harmonics
from ._weights import grid_weights, max_re_weights

__all__ = ["REGULARISATION", "magls_spectra"]

FloatArray = npt.NDArray[np.float64]
ComplexArray = npt.NDArray[np.complex128]

#: Tikhonov regularisation of the weighted least-squares fit, relative to the unit
#: diagonal of the N3D Gram matrix on a grid that covers the sphere. Tried from 1e-4 to
#: 1e-1 on the KEMAR grid (nothing measured below -40 degrees): 1e-2 gave the lowest
#: spectral distortion at the measured directions at orders 5 and 7 (2.28 and 2.20 dB),
#: and kept plane waves from the unmeasured cap within about 3 dB of the level from the
#: horizon, where 1e-4 let them rise 9 dB above it at order 7.
REGULARISATION = 1e-2


def magls_spectra(
    spectra: ComplexArray,
    directions: FloatArray,
    order: int,
    freqs: npt.ArrayLike,
    cutoff: float,
    *,
    delay: float = 0.0,
    max_re: bool = False,
    constrain: bool = True,
) -> tuple[ComplexArray, str]:
    """Decoder responses (C, 2, F) for SN3D input from measured spectra (M, 2, F).

    ``delay`` (seconds) is the set's common arrival time: it is taken out of the spectra
    before the fit and put back after, so that above the cutoff, where each bin takes the
    previous bin's phase, the responses keep arriving at that time instead of at time zero
    (a set measured at a distance carries its travel time in every response; left in, the
    high band of the filters would come that much before the low band, and wrap around).

    ``max_re`` weights the degrees by :func:`._weights.max_re_weights` above the cutoff
    (before the covariance constraint restores the diffuse-field level). Returns the
    responses and how the grid was weighted.
    """
    freqs = np.asarray(freqs, dtype=float)
    shift = np.exp(2j * np.pi * freqs * delay)
    spectra = spectra * shift
    w, how = grid_weights(directions)
    y = real_harmonics(directions, order, "n3d")  # (M, C)
    channels = y.shape[1]
    gram = y.T @ (w[:, None] * y)
    pinv = np.linalg.solve(gram + REGULARISATION * np.eye(channels), y.T * w)  # (C, M)

    # Bins first and contiguous: the loop below runs once per bin on small matrices,
    # and real matrix products on real and imaginary parts avoid converting Y and P to
    # complex in every bin.
    by_bin = np.ascontiguousarray(np.moveaxis(spectra, -1, 0))  # (F, M, 2)
    target = np.abs(by_bin)
    out = np.empty((len(freqs), channels, 2), dtype=complex)
    below = freqs <= cutoff
    start = int(np.count_nonzero(below))
    out[:start] = np.einsum("cm,fme->fce", pinv, by_bin[:start])
    if start == 0:  # a cutoff below the first bin: the DC bin has no previous bin
        out[0] = pinv @ by_bin[0]
    for k in range(max(start, 1), len(freqs)):
        prev = out[k - 1]
        decoded = (y @ prev.real) + 1j * (y @ prev.imag)  # (M, 2)
        size = np.abs(decoded)
        unit = np.divide(decoded, size, out=np.ones_like(decoded), where=size > 0)
        wanted = target[k] * unit  # the measured magnitude with the decoded phase
        out[k] = (pinv @ wanted.real) + 1j * (pinv @ wanted.imag)
    out = np.moveaxis(out, 0, -1)  # (C, 2, F)

    if max_re:
        taper = max_re_weights(order)[acn_degrees(order)]
        out[:, :, ~below] *= taper[:, None, None]

    # Back to SN3D input: b_n3d = sqrt(2n + 1) b_sn3d, so D_sn3d = diag(sqrt(2n + 1)) D_n3d.
    scale = np.sqrt(2.0 * acn_degrees(order) + 1.0)
    result: ComplexArray = out * scale[:, None, None]
    if constrain:
        result = constrain_diffuse(result, spectra, w, order)
    return result * np.conj(shift), how
