"""The diffuse late tail: decaying binaural noise with a diffuse field's ear coherence.

From the mixing time on, a room's response is modelled as two ears of Gaussian noise
(``numpy.random.Generator`` with PCG64, so one seed gives bit-identical output) whose
level in each octave band decays exponentially, -60 dB in that band's RT60:

1. **Ears.** Two independent noises ``n1``, ``n2`` are mixed per frequency bin as
   ``L = a n1 + b n2``, ``R = a n1 - b n2`` with ``a = sqrt((1 + g) / 2)``,
   ``b = sqrt((1 - g) / 2)``, which gives the ears the coherence ``a^2 - b^2 = g``: the
   usual construction for a prescribed interaural coherence (common practice). ``g(f)`` is
   the diffuse-field coherence of the HRIR set (:func:`diffuse_coherence`), and each ear is
   coloured by the set's diffuse-field power response, so that the tail sounds through the
   same ears as the early part. The mixing is done per bin rather than per octave band
   because a head's coherence falls from 1 to about 0 within the 250 Hz and 500 Hz bands.
2. **Bands.** The noise is split into the octave bands of :data:`earfold.renderer.room.model.BANDS_HZ`
   by zero-phase weights in the frequency domain (:func:`band_weights`): raised-cosine
   crossfades on a log-frequency axis, half an octave either side of each crossover (the
   geometric mean of two centres), so adjacent bands overlap and the weights **sum to
   exactly 1** at every frequency. The split of stationary noise is circular, which
   leaves it stationary and Gaussian, so the weights' own length never matters; the
   crossfades make the decay rate change smoothly with frequency between band centres.
3. **Steady level.** Each band's noise is divided by its own RMS smoothed over 10-50 ms
   (:func:`_flatten_envelope`): the slow level wander of narrow-band Gaussian noise
   would otherwise move one realisation's RT60 by up to 15 % in the low bands of a small
   room; after it, every seed decays at the times asked for (measured: T30 within about
   3 % at 500 Hz and up, 7 % at 250 Hz, over 12 seeds and the three presets).
4. **Decay and level.** Band ``k``'s noise is then multiplied by
   ``sqrt(16 pi r_ref^2 / (R_k fs tau_k)) exp(-t / (2 tau_k))``, ``t`` the time since
   emission, ``tau_k = RT60_k / (6 ln 10)`` the energy decay constant and ``R_k`` the room
   constant ``A / (1 - mean alpha)``. This is statistical room acoustics (Kuttruff,
   *Room Acoustics*, ch. 5): the steady-state reverberant energy density of an
   omnidirectional source is ``4 / R`` against ``1 / (4 pi r^2)`` for its direct sound, so
   the whole reverberant response carries ``16 pi r_ref^2 / R`` times the energy of a
   direct sound of unit amplitude at ``r_ref`` metres, decaying as ``exp(-t / tau)`` from
   emission. The tail therefore starts at the energy the room is expected to hold at the
   mixing time, whatever the image sources happen to give; at the critical distance the
   direct and reverberant energies are equal (``r_c^2 = R / (16 pi)``, Schroeder's
   ``0.057 sqrt(V / T)`` for small absorption).
5. **Edges.** A sine fade-in over the crossfade (the early part fades out with the
   matching cosine: the two are uncorrelated, so their energies add to a constant), and a
   short cosine fade-out at the end. The length reaches :data:`TAIL_RANGE_DB` below the
   tail's start in the slowest band, capped at ``max_seconds``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.fft
from scipy.spatial import QhullError, SphericalVoronoi

from ..defaults import SPEED_OF_SOUND
from ..errors import RoomError
from ..hrtf import HrirSet
from .model import BANDS_HZ, Room

__all__ = [
    "BAND_TRANSITION_OCTAVES",
    "DEFAULT_CROSSFADE_S",
    "EAR_DISTANCE",
    "TAIL_RANGE_DB",
    "DiffuseField",
    "band_weights",
    "diffuse_coherence",
    "diffuse_field",
    "late_tail",
    "sphere_coherence",
    "tail_length",
]

BAND_TRANSITION_OCTAVES = 0.5
"""Half-width (octaves) of the crossfade between adjacent bands around their crossover.
At 0.5 each band's weight rises from the centre below to 1 at its own centre and falls to
0 at the centre above: the widest crossfade that still leaves every band centre pure."""

DEFAULT_CROSSFADE_S = 0.005
"""Crossfade (s) between the early part and the tail: a few milliseconds, long enough
not to click, short against any mixing time (common practice)."""

TAIL_RANGE_DB = 70.0
"""The tail lasts until its slowest band is this far below the tail's start. The tail
starts at or below the direct sound's level, so the cut lies 70 dB or more down, under
the noise floor of any listening situation; and it leaves the T30 fit (to -35 dB) its
ISO 3382-1 margin."""

TAIL_FADE_OUT_S = 0.01
"""Cosine fade (s) over the tail's last samples, so that the cut leaves no step."""

MAX_TAIL_SECONDS = 30.0
"""Longest tail generated (s) when no ``max_seconds`` is given."""

EAR_DISTANCE = 0.175
"""Distance (m) between the ears of the sphere-model fallback (two points 2 x 8.75 cm
apart; the Woodworth head radius, common practice)."""

#: Length of the envelope smoother in periods of the band's bandwidth (see
#: :func:`_flatten_envelope`): four correlation times of the band noise.
ENVELOPE_CYCLES = 4.0

#: Directions below this count cannot sample a diffuse field; the sphere model is used.
MIN_DIFFUSE_DIRECTIONS = 12

#: Largest solid-angle weight as a multiple of the median cell: a measured direction next
#: to an unmeasured region (the hole under a set measured down to -40 degrees) would
#: otherwise stand in for the whole region.
MAX_CELL_RATIO = 3.0


def band_weights(freqs: np.ndarray, bands: tuple[float, ...] = BANDS_HZ) -> np.ndarray:
    """Zero-phase weights of the octave bands at ``freqs``; they sum to 1 everywhere.

    Parameters
    ----------
    freqs : ndarray, shape (F,)
        Frequencies in Hz (>= 0).
    bands : tuple of float
        Band centres in Hz, ascending.

    Returns
    -------
    ndarray, shape (len(bands), F)
        ``w[k]`` is 1 at band ``k``'s centre; the lowest band holds everything below its
        crossover down to DC, the highest everything above its crossover.
    """
    f = np.asarray(freqs, dtype=float)
    logf = np.log2(np.maximum(f, 1e-3))
    centres = np.log2(np.asarray(bands, dtype=float))
    crossovers = 0.5 * (centres[:-1] + centres[1:])
    h = BAND_TRANSITION_OCTAVES
    # upper[k]: share that stays below crossover k (cos^2 ramp), so band k gets the part
    # of the spectrum above crossover k - 1 and below crossover k.
    u = np.clip((logf[None, :] - (crossovers[:, None] - h)) / (2 * h), 0.0, 1.0)
    below = np.cos(0.5 * np.pi * u) ** 2  # (K - 1, F)
    weights = np.empty((len(bands), f.size))
    remaining = np.ones(f.size)
    for k in range(len(bands) - 1):
        weights[k] = remaining * below[k]
        remaining = remaining * (1.0 - below[k])
    weights[-1] = remaining
    # The sum telescopes to exactly 1. With ramps at most an octave wide (h <= 0.5) they
    # do not overlap, and each weight is a plain raised cosine of log frequency.
    return weights


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

    freqs: np.ndarray
    power: np.ndarray
    coherence: np.ndarray
    method: str


def sphere_coherence(
    freqs: np.ndarray, distance: float = EAR_DISTANCE, speed_of_sound: float = SPEED_OF_SOUND
) -> np.ndarray:
    """Coherence ``sin(kd) / (kd)`` of two points ``d`` apart in a 3-D diffuse field.

    Cook, Waterhouse, Berendt, Edelman and Thompson (1955), JASA 27, 1072 (from memory).
    The fallback when an HRIR set has too few directions to average over.
    """
    f = np.asarray(freqs, dtype=float)
    return np.sinc(2.0 * f * distance / speed_of_sound)  # np.sinc(x) = sin(pi x) / (pi x)


def _direction_weights(directions: np.ndarray) -> tuple[np.ndarray, str]:
    m = len(directions)
    centred = directions - directions.mean(axis=0)
    if np.linalg.matrix_rank(centred, tol=1e-6) == 3:
        try:
            areas = SphericalVoronoi(directions, radius=1.0, threshold=1e-6).calculate_areas()
        except (ValueError, QhullError):
            areas = None
        if areas is not None and np.all(np.isfinite(areas)) and np.all(areas > 0):
            areas = np.minimum(areas, MAX_CELL_RATIO * np.median(areas))
            return areas / areas.sum(), "measured directions, solid-angle (Voronoi) weights"
    return np.full(m, 1.0 / m), "measured directions, uniform weights"


_SPECTRA_CHUNK = 64  # directions transformed at once by diffuse_field


def diffuse_field(hset: HrirSet, freqs: np.ndarray) -> DiffuseField:
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


def diffuse_coherence(hset: HrirSet, freqs: np.ndarray) -> np.ndarray:
    """Interaural coherence of a diffuse field heard through ``hset`` at ``freqs``.

    See :func:`diffuse_field`. Returns an array of shape ``freqs.shape`` in [-1, 1].
    """
    return diffuse_field(hset, freqs).coherence


def _flatten_envelope(band: np.ndarray, centre: float, fs: float) -> np.ndarray:
    """Band noise divided by its own smoothed RMS, keeping its mean power.

    Gaussian noise in a narrow band wanders in level over tens of milliseconds (about
    ``1 / bandwidth``); imposed on a decay, that wander moves the measured RT60 of one
    realisation by 5-15 % in the 125-500 Hz bands of a small room. Dividing by the RMS
    over a Hann window of :data:`ENVELOPE_CYCLES` / bandwidth (10 to 50 ms) leaves the
    noise's fine structure and removes the slow wander, so every seed decays at the RT60
    asked for. The smoothing is circular, like the band split, so the noise stays
    stationary. The window is long against the band's correlation time, so each ear's
    gain varies slowly and the interaural coherence is kept.
    """
    nfft = band.shape[-1]
    bandwidth = centre * (math.sqrt(2.0) - 1.0 / math.sqrt(2.0))
    width = min(max(ENVELOPE_CYCLES / bandwidth, 0.01), 0.05)
    taps = max(int(round(width * fs)) | 1, 3)
    window = np.zeros(nfft)
    hann = np.hanning(taps + 2)[1:-1]
    window[:taps] = hann / hann.sum()
    window = np.roll(window, -(taps // 2))  # centred: a zero-phase smoother
    power = np.fft.irfft(np.fft.rfft(band**2, axis=-1) * np.fft.rfft(window), n=nfft, axis=-1)
    power = np.maximum(power, 1e-30)
    mean = np.mean(band**2, axis=-1, keepdims=True)
    return band * np.sqrt(mean / power)


def tail_length(room: Room, samplerate: float, max_seconds: float | None = None) -> int:
    """Samples of tail: :data:`TAIL_RANGE_DB` of decay in the slowest band, capped."""
    seconds = float(np.max(room.rt60)) * TAIL_RANGE_DB / 60.0
    cap = MAX_TAIL_SECONDS if max_seconds is None else float(max_seconds)
    if not (np.isfinite(cap) and cap > 0):
        raise RoomError(f"max_seconds must be a positive number of seconds, got {max_seconds!r}")
    return max(int(math.ceil(min(seconds, cap) * samplerate)), 1)


def late_tail(
    room: Room,
    samplerate: float,
    start_s: float,
    *,
    reference_distance: float,
    diffuse: DiffuseField | None = None,
    rng: np.random.Generator | None = None,
    seed: int = 0,
    crossfade_s: float = DEFAULT_CROSSFADE_S,
    max_seconds: float | None = None,
) -> np.ndarray:
    """The room's late tail for both ears, from ``start_s`` after emission.

    Parameters
    ----------
    room : Room
        Gives RT60 (Eyring) and room constant per band.
    samplerate : float
        Hz.
    start_s : float
        Time of the tail's first sample after the sound left the source (s).
    reference_distance : float
        Distance (m) at which the direct sound has unit amplitude (sets the level).
    diffuse : DiffuseField, optional
        Power and coherence of the ears; its ``freqs`` are ignored and it is
        re-interpolated. None: one omnidirectional point (both ears identical, flat).
    rng : numpy.random.Generator, optional
        Noise source; by default ``Generator(PCG64(seed))``.
    seed : int
        Seed when no ``rng`` is given.
    crossfade_s : float
        Length of the fade-in (s).
    max_seconds : float, optional
        Cap on the length (s).

    Returns
    -------
    ndarray, shape (2, Lt), float64
    """
    fs = float(samplerate)
    n = tail_length(room, fs, max_seconds)
    nfft = scipy.fft.next_fast_len(n, real=True)
    if rng is None:
        rng = np.random.Generator(np.random.PCG64(seed))
    noise = rng.standard_normal((2, nfft))
    spectra = np.fft.rfft(noise, axis=-1)
    freqs = np.fft.rfftfreq(nfft, 1.0 / fs)
    if diffuse is None:
        gain = np.ones((2, freqs.size))
        coherence = np.ones(freqs.size)
    else:
        gain = np.sqrt(
            np.stack([np.interp(freqs, diffuse.freqs, diffuse.power[e]) for e in range(2)])
        )
        coherence = np.interp(freqs, diffuse.freqs, diffuse.coherence)
    a = np.sqrt(0.5 * (1.0 + coherence))
    b = np.sqrt(np.maximum(0.5 * (1.0 - coherence), 0.0))
    ears = np.stack(
        [gain[0] * (a * spectra[0] + b * spectra[1]), gain[1] * (a * spectra[0] - b * spectra[1])]
    )

    weights = band_weights(freqs)
    t = start_s + np.arange(n) / fs
    tau = room.rt60 / (6.0 * math.log(10.0))  # energy decay constant, s
    level = np.sqrt(16.0 * math.pi * reference_distance**2 / (room.room_constant * fs * tau))
    out = np.zeros((2, n))
    for k, centre in enumerate(BANDS_HZ):
        if not np.any(weights[k]):
            continue  # a band wholly above Nyquist
        band = _flatten_envelope(np.fft.irfft(ears * weights[k], n=nfft, axis=-1), centre, fs)
        band = band[:, :n]
        out += band * (level[k] * np.exp(-t / (2.0 * tau[k])))
    fade_in = min(int(round(crossfade_s * fs)), n)
    if fade_in > 0:
        out[:, :fade_in] *= np.sin(0.5 * np.pi * (np.arange(fade_in) + 0.5) / fade_in)
    fade_out = min(int(round(TAIL_FADE_OUT_S * fs)), n - fade_in)
    if fade_out > 0:
        out[:, n - fade_out :] *= np.cos(0.5 * np.pi * (np.arange(fade_out) + 0.5) / fade_out)
    return out
