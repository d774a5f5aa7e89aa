"""An HRIR set's response to a diffuse field: each ear's power and the ears' coherence.

The late tail (:mod:`._late_tail`) colours its noise with the power and mixes its two
ears to the coherence, so that the tail sounds through the same ears as the early part.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from ..defaults import SPEED_OF_SOUND
from ..hrtf import HrirSet

__all__ = [
    "EAR_DISTANCE",
    "MAX_CELL_RATIO",
    "MIN_DIFFUSE_DIRECTIONS",
    "DiffuseField",
    "diffuse_coherence",
    "diffuse_field",
    "sphere_coherence",
]

FloatArray = npt.NDArray[np.float64]

EAR_DISTANCE = 0.175
"""Distance (m) between the ears of the sphere-model fallback (two points 2 x 8.75 cm
apart; the Woodworth head radius, common practice)."""

#: Directions below this count cannot sample a diffuse field; the sphere model is used.
MIN_DIFFUSE_DIRECTIONS = 12

#: Largest solid-angle weight as a multiple of the median cell: a measured direction next
#: to an unmeasured region (the hole under a set measured down to -40 degrees) would
#: otherwise stand in for the whole region.
MAX_CELL_RATIO = 3.0


@dataclass(frozen=True, eq=False)
class DiffuseField:
    """An HRIR set's response to a diffuse field, at given frequencies.

    Attributes
    ----------
    freqs : ndarray, shape (F,)
        Hz.
    power : ndarray, shape (2, F)
        Direction-averaged power response of the left and right ear.
    coherence : ndarray, shape (F,)
        Real interaural coherence in [-1, 1].
    method : str
        How it was obtained (weights used, or the sphere model).
    """

    freqs: FloatArray
    power: FloatArray
    coherence: FloatArray
    method: str


def sphere_coherence(
    freqs: npt.ArrayLike, distance: float = EAR_DISTANCE, speed_of_sound: float = SPEED_OF_SOUND
) -> FloatArray:
    """Coherence ``sin(kd) / (kd)`` of two points ``d`` apart in a 3-D diffuse field.

    Cook, Waterhouse, Berendt, Edelman and Thompson (1955), JASA 27, 1072 (from memory).
    The fallback when an HRIR set has too few directions to average over.
    """
    f = np.asarray(freqs, dtype=float)
    coherence: FloatArray = np.sinc(2.0 * f * distance / speed_of_sound)  # sin(pi x) / (pi x)
    return coherence


def _direction_weights(directions: FloatArray) -> tuple[FloatArray, str]:
    m = len(directions)
    centred = directions - directions.mean(axis=0)
    if np.linalg.matrix_rank(centred, tol=1e-6) == 3:
        from scipy.spatial import QhullError, SphericalVoronoi

        try:
            areas = SphericalVoronoi(directions, radius=1.0, threshold=1e-6).calculate_areas()
        except (ValueError, QhullError):
            areas = None
        if areas is not None and np.all(np.isfinite(areas)) and np.all(areas > 0):
            areas = np.minimum(areas, MAX_CELL_RATIO * np.median(areas))
            return areas / areas.sum(), "measured directions, solid-angle (Voronoi) weights"
    return np.full(m, 1.0 / m), "measured directions, uniform weights"


_SPECTRA_CHUNK = 64  # directions transformed at once by diffuse_field


def diffuse_field(hset: HrirSet, freqs: npt.ArrayLike) -> DiffuseField:
    """Diffuse-field power and coherence of an HRIR set, interpolated to ``freqs``.

    ``P_e = sum_i w_i |H_e,i|^2`` and ``g = Re(sum_i w_i H_L,i conj(H_R,i)) / sqrt(P_L P_R)``
    over the measured directions ``i`` with solid-angle weights ``w_i`` (the areas of the
    directions' cells on the unit sphere, :class:`scipy.spatial.SphericalVoronoi`, capped
    at :data:`MAX_CELL_RATIO` times the median), or uniform weights for directions on one
    circle. The imaginary part of the cross-spectrum (zero for a left-right symmetric
    head and grid) is dropped, since the noise mixing can only make real coherence. With
    fewer than :data:`MIN_DIFFUSE_DIRECTIONS` directions, :func:`sphere_coherence` and the
    plain mean power are used.
    """
    f = np.asarray(freqs, dtype=float)
    nfft = max(512, 1 << int(math.ceil(math.log2(2 * hset.taps))))
    grid = np.fft.rfftfreq(nfft, 1.0 / hset.samplerate)
    if hset.measurements < MIN_DIFFUSE_DIRECTIONS:
        w = np.full(hset.measurements, 1.0 / hset.measurements)
        method = f"sphere model sin(kd)/kd, d = {EAR_DISTANCE:g} m (too few directions)"
    else:
        w, method = _direction_weights(hset.directions)
    # In chunks of directions: a whole equalised set's spectra at once (710 directions,
    # 8192-point transforms) took some 170 MB at the peak of a room's planning.
    power = np.zeros((2, len(grid)))
    cross = np.zeros(len(grid))
    for start in range(0, hset.measurements, _SPECTRA_CHUNK):
        spectra = np.fft.rfft(hset.ir[start : start + _SPECTRA_CHUNK], n=nfft, axis=-1)
        wk = w[start : start + _SPECTRA_CHUNK]
        power += np.einsum("m,mef->ef", wk, np.abs(spectra) ** 2)
        cross += np.einsum("m,mf->f", wk, (spectra[:, 0] * np.conj(spectra[:, 1])).real)
    power_f = np.stack([np.interp(f, grid, power[e]) for e in range(2)])
    if hset.measurements < MIN_DIFFUSE_DIRECTIONS:
        coherence = sphere_coherence(f)
    else:
        cross_f = np.interp(f, grid, cross)
        denom = np.sqrt(power_f[0] * power_f[1])
        floor = 1e-12 * max(float(denom.max()), 1e-300)
        coherence = np.divide(cross_f, denom, out=np.zeros_like(cross_f), where=denom > floor)
        coherence = np.clip(coherence, -1.0, 1.0)
    return DiffuseField(f, power_f, coherence, method)


def diffuse_coherence(hset: HrirSet, freqs: npt.ArrayLike) -> FloatArray:
    """Interaural coherence of a diffuse field heard through ``hset`` at ``freqs``.

    See :func:`diffuse_field`. Returns an array of shape ``freqs.shape`` in [-1, 1].
    """
    return diffuse_field(hset, freqs).coherence
