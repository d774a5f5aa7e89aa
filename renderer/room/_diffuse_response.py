"""A short binaural response that makes a mono signal sound diffuse, free field.

An ADM object's ``diffuse`` share (ITU-R BS.2076-2) is a part of its sound that comes
from no one direction. With a room it feeds the room's shared late tail; without one it
goes through :func:`diffuse_response`: a short burst of two-ear noise made as the late
tail's noise is (:mod:`._late_tail`, step 1), with no room in it:

1. **Ears.** Two independent Gaussian noises (``numpy.random.Generator`` with PCG64, so
   one seed gives bit-identical output) are mixed per frequency bin as
   ``L = a n1 + b n2``, ``R = a n1 - b n2`` with ``a = sqrt((1 + g) / 2)``,
   ``b = sqrt((1 - g) / 2)``, which gives the ears the coherence ``g`` (common practice);
   ``g(f)`` is the HRIR set's diffuse-field coherence and each ear is coloured by the
   set's diffuse-field power response (:func:`~._diffuse.diffuse_field`). A signal
   through it reaches the ears as a diffuse field through this head does: the same
   spectrum per ear, coherent below a few hundred hertz and incoherent above.
2. **Length.** :data:`DIFFUSE_RESPONSE_SECONDS` (20 ms) by default. Long enough that
   the ears can be decorrelated where a head's diffuse coherence falls, in the 250 Hz and
   500 Hz octaves (a burst of ``T`` seconds resolves ``1 / T`` Hz: 50 Hz at 20 ms, a few
   bins per band there); short enough to stay within the time over which hearing fuses a
   sound with what follows it (the precedence effect's echo threshold, some 5 to 40 ms
   by signal: J. Blauert, *Spatial Hearing*, 1997, section 3.1; from memory), so a
   diffuse part is heard as a wide version of the sound, neither an echo nor a room.
3. **Envelope.** Flat, with a short cosine fade at the end so it stops without a step.
   A decaying envelope would keep transients sharper but shorten the burst in effect,
   and with it the frequency resolution of the decorrelation: at 20 dB of decay over
   20 ms the 125 Hz and 250 Hz octaves' coherence came out 0.61 and 0.42 against the
   KEMAR set's 0.89 and 0.60; flat, 0.81 and 0.58 (measured, 16 seeds).
4. **Level.** The response's energy (both ears) equals the mean energy of the set's
   HRIR pairs over the sphere (weighted by the solid angle of each measured direction,
   as the diffuse field is): a signal through it has the loudness of the same signal
   through a pair of an average direction, so the direct and diffuse parts of a split
   object (amplitudes ``sqrt(1 - d)`` and ``sqrt(d)``) add up to the object's loudness.

Build it from the same set the direct part's pairs come from; any filter after the sum
(the diffuse-field equalisation) then applies to both alike.
"""

from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt

from ..errors import RoomError, shown
from ..hrtf import HrirSet
from ._diffuse import MIN_DIFFUSE_DIRECTIONS, _direction_weights, diffuse_field

__all__ = [
    "DIFFUSE_FADE_S",
    "DIFFUSE_RESPONSE_SECONDS",
    "MAX_DIFFUSE_RESPONSE_SECONDS",
    "diffuse_response",
    "mean_pair_energy",
]

FloatArray = npt.NDArray[np.float64]

DIFFUSE_RESPONSE_SECONDS = 0.02
"""Default length (s) of :func:`diffuse_response` (see the module's notes, step 2)."""

MAX_DIFFUSE_RESPONSE_SECONDS = 0.2
"""Longest response asked for (s): past some 50 ms a burst is heard as a room."""

DIFFUSE_FADE_S = 0.001
"""Cosine fade (s) over the response's last samples."""


def mean_pair_energy(hset: HrirSet) -> float:
    """Energy of an HRIR pair (both ears) averaged over the set's directions, each
    weighted by its solid angle as in :func:`~._diffuse.diffuse_field` (uniform weights
    for fewer than :data:`~._diffuse.MIN_DIFFUSE_DIRECTIONS` directions)."""
    energies = np.sum(np.asarray(hset.ir, dtype=np.float64) ** 2, axis=(1, 2))
    if hset.measurements < MIN_DIFFUSE_DIRECTIONS:
        return float(np.mean(energies))
    weights, _ = _direction_weights(hset.directions)
    return float(np.dot(weights, energies))


def diffuse_response(
    hset: HrirSet,
    samplerate: float,
    *,
    seed: int = 0,
    seconds: float = DIFFUSE_RESPONSE_SECONDS,
) -> FloatArray:
    """Two-ear noise through which a mono signal sounds diffuse (see the module's notes).

    Parameters
    ----------
    hset : HrirSet
        The set whose diffuse-field power, coherence and mean pair energy it follows;
        at ``samplerate``.
    samplerate : float
        Hz; must be the set's rate (resample the set first).
    seed : int, optional
        The noise's seed: one seed, one response, bit for bit.
    seconds : float, optional
        Length, from 1 ms to :data:`MAX_DIFFUSE_RESPONSE_SECONDS`; default
        :data:`DIFFUSE_RESPONSE_SECONDS`.

    Returns
    -------
    numpy.ndarray, shape (2, L), float64
        Left and right; ``L = round(seconds * samplerate)``; its energy (both ears) is
        :func:`mean_pair_energy`.

    Examples
    --------
    >>> from earfold.hrtf_sets import get_shipped
    >>> from earfold.renderer.hrtf import load_hrir_set
    >>> hset = load_hrir_set(get_shipped("mit-kemar").path, 48000.0)
    >>> h = diffuse_response(hset, 48000.0, seed=1)
    >>> h.shape, bool(np.isclose(np.sum(h**2), mean_pair_energy(hset)))
    ((2, 960), True)
    """
    fs = float(samplerate)
    if not (math.isfinite(fs) and fs > 0):
        raise RoomError(f"samplerate must be a positive number of Hz, got {shown(samplerate)}")
    if fs != hset.samplerate:
        raise RoomError(
            f"HRIR set {hset.name!r} is at {hset.samplerate:g} Hz, not {fs:g} Hz: resample "
            "it first (HrirSet.resampled)"
        )
    if not (math.isfinite(seconds) and 0.001 <= seconds <= MAX_DIFFUSE_RESPONSE_SECONDS):
        raise RoomError(
            f"seconds must be from 0.001 to {MAX_DIFFUSE_RESPONSE_SECONDS:g}, got {shown(seconds)}"
        )
    n = max(int(round(seconds * fs)), 2)
    rng = np.random.Generator(np.random.PCG64(seed))
    spectra = np.fft.rfft(rng.standard_normal((2, n)), axis=-1)
    field = diffuse_field(hset, np.fft.rfftfreq(n, 1.0 / fs))
    gain = np.sqrt(np.maximum(field.power, 0.0))
    a = np.sqrt(0.5 * (1.0 + field.coherence))
    b = np.sqrt(np.maximum(0.5 * (1.0 - field.coherence), 0.0))
    ears = np.stack(
        [gain[0] * (a * spectra[0] + b * spectra[1]), gain[1] * (a * spectra[0] - b * spectra[1])]
    )
    out: FloatArray = np.fft.irfft(ears, n=n, axis=-1)
    fade = min(int(round(DIFFUSE_FADE_S * fs)), n // 2)
    if fade > 0:
        out[:, n - fade :] *= np.cos(0.5 * np.pi * (np.arange(fade) + 0.5) / fade)
    energy = float(np.sum(out**2))
    if energy <= 0.0:
        raise RoomError(f"HRIR set {hset.name!r} has no energy to make a diffuse response of")
    out *= math.sqrt(mean_pair_energy(hset) / energy)
    return out
