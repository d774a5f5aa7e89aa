"""The virtual-loudspeaker decoder: the scene decoded to a t-design, each direction heard
through the set's own HRIR pair.

* Directions: the antipodal ``(2N + 1)``-design of :func:`._designs.virtual_layout`, so the
  sampling decoder ``g = (1/L) Y diag(2n + 1) b`` (SN3D input) keeps the harmonics
  orthogonal on its points: a plane wave's gains sum to exactly 1 (its pressure) from any
  direction, and its energy is the same from any direction.
* Weights, dual band (Zotter and Frank, *Ambisonics*, Springer 2019):
  below :func:`._weights.crossover_frequency` the basic (mode-matching) weights, which
  rebuild the field around the head, hence the interaural time difference, up to
  ``k a = N``; above it, where no order can do that, max-rE weights (:func:`max_re_weights`)
  scaled for energy: the mean of ``sum_l g_l^2`` over the sphere is 1, so that a diffuse
  scene keeps its level whatever the order.
* The bands are split by a fourth-order Linkwitz-Riley pair (two cascaded second-order
  Butterworth sections each; the two bands add up to an all-pass, so nothing is lost or
  doubled at the crossover), evaluated on the design grid: causal, and the same in both
  ears, so it cannot shift an interaural time difference.
* HRIR pairs come from :meth:`HrirSet.pair` (the set's own interpolation; the nearest
  measured direction, with a warning, over a hole in the grid).

:func:`speaker_decoding` gives the same gains for other per-direction filters (a room's,
say): the room path can decode to the virtual loudspeakers and render those in the room.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt
from scipy import signal

from ..errors import SceneError
from ._fir import design_size, to_fir
from ._harmonics import acn_degrees, check_order, real_harmonics
from ._weights import crossover_frequency, max_re_weights

__all__ = ["crossover_responses", "decode_speaker_filters", "speaker_decoding", "speaker_gains"]

FloatArray = npt.NDArray[np.float64]
ComplexArray = npt.NDArray[np.complex128]


def speaker_gains(directions: FloatArray, order: int, weighting: str = "basic") -> FloatArray:
    """Gains (L, C) from an ACN/SN3D scene to loudspeakers on a ``(2N + 1)``-design.

    ``weighting`` ``"basic"``: amplitude-preserving (a plane wave's gains sum to 1);
    ``"max-re"``: max-rE weights, energy-preserving (mean ``sum_l g_l^2`` over the sphere 1).
    """
    degrees = acn_degrees(order)
    y = real_harmonics(directions, order, "sn3d")
    count = len(directions)
    if weighting == "basic":
        return y * (2.0 * degrees + 1.0) / count
    weights = max_re_weights(order)[degrees]
    # Mean over the sphere of sum_l g_l^2 is (1/L) sum_n (2n + 1) a_n^2 before scaling
    # (SN3D: sum_m y_nm^2 = 1 at any direction, mean square 1/(2n + 1)).
    energy = float(np.sum((2 * np.arange(order + 1) + 1) * max_re_weights(order) ** 2)) / count
    gains: FloatArray = y * (2.0 * degrees + 1.0) * weights / count / np.sqrt(energy)
    return gains


def crossover_responses(
    freqs: npt.ArrayLike, crossover: float, samplerate: float
) -> tuple[ComplexArray, ComplexArray]:
    """Low and high band responses of a Linkwitz-Riley 4th-order crossover at ``freqs``."""
    freqs = np.asarray(freqs, dtype=float)
    low = signal.butter(2, crossover, "lowpass", fs=samplerate, output="sos")
    high = signal.butter(2, crossover, "highpass", fs=samplerate, output="sos")
    _, h_low = signal.sosfreqz(low, worN=freqs, fs=samplerate)
    _, h_high = signal.sosfreqz(high, worN=freqs, fs=samplerate)
    return h_low**2, h_high**2


def speaker_decoding(
    speaker_spectra: ComplexArray,
    directions: FloatArray,
    order: int,
    freqs: npt.ArrayLike,
    samplerate: float,
    crossover: float | None,
) -> ComplexArray:
    """Decoder responses (C, 2, F) from per-loudspeaker spectra (L, 2, F).

    ``crossover`` None: basic weights at every frequency; otherwise basic below it and
    energy-preserving max-rE above (see the module).
    """
    basic = speaker_gains(directions, order, "basic")
    if crossover is None:
        result: ComplexArray = np.einsum("lc,lef->cef", basic, speaker_spectra)
        return result
    max_re = speaker_gains(directions, order, "max-re")
    h_low, h_high = crossover_responses(freqs, crossover, samplerate)
    result = (
        np.einsum("lc,lef->cef", basic, speaker_spectra) * h_low
        + np.einsum("lc,lef->cef", max_re, speaker_spectra) * h_high
    )
    return result


def decode_speaker_filters(
    speaker_filters: npt.ArrayLike,
    directions: npt.ArrayLike,
    order: int,
    samplerate: float,
    *,
    max_re: bool = True,
) -> FloatArray:
    """Scene filters (C, 2, T) from two-ear filters (L, 2, T) of the virtual loudspeakers.

    For a scene rendered in a room: render each direction of :func:`virtual_layout` in the
    room (its HRIR pair plus reflections, L x 2 x T), then fold them with the same gains
    and crossover as the headphone decoder. The result keeps length ``T`` (the crossover's
    ringing, a few milliseconds, fits in the fade of the last eighth).
    """
    order = check_order(order)
    f = np.asarray(speaker_filters, dtype=float)
    d = np.asarray(directions, dtype=float)
    if f.ndim != 3 or f.shape[1] != 2 or f.shape[0] != len(d):
        raise SceneError(
            f"speaker filters of shape {f.shape!r} do not fit {len(d)} directions (L, 2, T)"
        )
    nfft = design_size(f.shape[-1])
    freqs = np.fft.rfftfreq(nfft, 1.0 / samplerate)
    spectra = np.fft.rfft(f, n=nfft, axis=-1)
    crossover = crossover_frequency(order) if max_re else None
    responses = speaker_decoding(spectra, d, order, freqs, samplerate, crossover)
    filters, _ = to_fir(responses, nfft, f.shape[-1])
    return filters
