"""The diffuse-field covariance constraint for any linear binaural decoder.

Zaunschirm, Schoerkhuber and Hoeldrich (JASA 143(6) 3616, 2018): in a diffuse field the
two ears' signals have a 2 x 2 covariance per frequency (their powers and their coherence);
a decoder of limited order gets it wrong (too little high-frequency power, too much
interaural coherence). Per bin, the ears' output is mixed by the 2 x 2 matrix that gives
the set's own diffuse-field covariance while changing the signals least (Vilkamo,
Baeckstroem and Kuntz, "Optimized covariance domain framework for time-frequency
processing of spatial audio", J. Audio Eng. Soc. 61(6), 2013, with the identity as
prototype).
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from ._harmonics import acn_degrees

__all__ = ["constrain_diffuse", "covariance_mixing", "decoder_covariance", "set_covariance"]

FloatArray = npt.NDArray[np.float64]
ComplexArray = npt.NDArray[np.complex128]

#: Diagonal loading (relative to the trace) of the 2 x 2 covariances before their Cholesky
#: factors are taken: a bin where a decoder is silent must not divide by zero.
_LOADING = 1e-9


def covariance_mixing(have: ComplexArray, want: ComplexArray) -> ComplexArray:
    """The 2 x 2 mixings ``M`` (..., 2, 2) with ``M have M^H = want`` that change least.

    Vilkamo, Baeckstroem and Kuntz (2013), with the identity as prototype: ``M = K_w V
    U^H K_h^-1`` from the Cholesky factors ``K K^H`` of the covariances and the SVD
    ``K_h^H K_w = U S V^H``.
    """
    eye = np.eye(have.shape[-1])
    load_h = _LOADING * np.trace(have, axis1=-2, axis2=-1).real[..., None, None] * eye + 1e-300
    load_w = _LOADING * np.trace(want, axis1=-2, axis2=-1).real[..., None, None] * eye + 1e-300
    k_h = np.linalg.cholesky(have + load_h)
    k_w = np.linalg.cholesky(want + load_w)
    u, _, vh = np.linalg.svd(np.conj(np.swapaxes(k_h, -1, -2)) @ k_w)
    p = np.conj(np.swapaxes(vh, -1, -2)) @ np.conj(np.swapaxes(u, -1, -2))
    mixing: ComplexArray = k_w @ p @ np.linalg.inv(k_h)
    return mixing


def set_covariance(spectra: ComplexArray, weights: FloatArray) -> ComplexArray:
    """The set's diffuse-field ear covariance (F, 2, 2): ``sum_i w_i h_i h_i^H`` per bin."""
    h = np.moveaxis(spectra, -1, 0)  # (F, M, 2)
    result: ComplexArray = np.einsum("m,fme,fmg->feg", weights, h, np.conj(h))
    return result


def decoder_covariance(responses: ComplexArray, order: int) -> ComplexArray:
    """Ear covariance (F, 2, 2) of a decoder (C, 2, F) for SN3D input in a diffuse field.

    A diffuse field's SN3D signals are uncorrelated with power ``1 / (2n + 1)`` per degree
    ``n`` (the mean square of an SN3D harmonic over the sphere); the ears' signals
    ``z = D^T b`` then have ``E[z z^H] = D^T diag(1 / (2n + 1)) conj(D)``.
    """
    power = 1.0 / (2.0 * acn_degrees(order) + 1.0)
    d = np.moveaxis(responses, -1, 0)  # (F, C, 2)
    result: ComplexArray = np.einsum("c,fce,fcg->feg", power, d, np.conj(d))
    return result


def constrain_diffuse(
    responses: ComplexArray, spectra: ComplexArray, weights: FloatArray, order: int
) -> ComplexArray:
    """Decoder responses (C, 2, F), SN3D input, mixed per bin to the set's diffuse covariance.

    ``spectra`` (M, 2, F) are the set's measured responses on the same bins and ``weights``
    their quadrature weights (sum 1).
    """
    mixing = covariance_mixing(
        decoder_covariance(responses, order), set_covariance(spectra, weights)
    )
    d = np.moveaxis(responses, -1, 0) @ np.swapaxes(mixing, -1, -2)  # z' = M z: D' = D M^T
    result: ComplexArray = np.moveaxis(d, 0, -1)
    return result
