"""The diffuse late tail: decaying binaural noise with a diffuse field's ear coherence.

From the mixing time on, a room's response is modelled as two ears of Gaussian noise
(``numpy.random.Generator`` with PCG64, so one seed gives bit-identical output) whose
level in each octave band decays exponentially, -60 dB in that band's RT60:

1. **Ears.** Two independent noises ``n1``, ``n2`` are mixed per frequency bin as
   ``L = a n1 + b n2``, ``R = a n1 - b n2`` with ``a = sqrt((1 + g) / 2)``,
   ``b = sqrt((1 - g) / 2)``, which gives the ears the coherence ``a^2 - b^2 = g``: the
   usual construction for a prescribed interaural coherence (common practice). ``g(f)`` is
   the diffuse-field coherence of the HRIR set (:func:`~._diffuse.diffuse_coherence`), and
   each ear is coloured by the set's diffuse-field power response, so that the tail sounds
   through the same ears as the early part. The mixing is done per bin rather than per octave band
   because a head's coherence falls from 1 to about 0 within the 250 Hz and 500 Hz bands.
2. **Bands.** The noise is split into the octave bands of :data:`earfold.renderer.room.BANDS_HZ`
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

import numpy as np
import numpy.typing as npt
import scipy.fft

from ..errors import RoomError, shown
from ._acoustics import BANDS_HZ
from ._diffuse import DiffuseField
from ._model import Room

__all__ = [
    "BAND_TRANSITION_OCTAVES",
    "DEFAULT_CROSSFADE_S",
    "MAX_TAIL_SECONDS",
    "TAIL_FADE_OUT_S",
    "TAIL_RANGE_DB",
    "band_weights",
    "late_tail",
    "tail_length",
]

FloatArray = npt.NDArray[np.float64]

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

#: Length of the envelope smoother in periods of the band's bandwidth (see
#: :func:`_flatten_envelope`): four correlation times of the band noise.
ENVELOPE_CYCLES = 4.0


def band_weights(freqs: npt.ArrayLike, bands: tuple[float, ...] = BANDS_HZ) -> FloatArray:
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


def _flatten_envelope(band: FloatArray, centre: float, fs: float) -> FloatArray:
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
    flat: FloatArray = band * np.sqrt(mean / power)
    return flat


def tail_length(room: Room, samplerate: float, max_seconds: float | None = None) -> int:
    """Samples of tail: :data:`TAIL_RANGE_DB` of decay in the slowest band, capped."""
    seconds = float(np.max(room.rt60)) * TAIL_RANGE_DB / 60.0
    cap = MAX_TAIL_SECONDS if max_seconds is None else float(max_seconds)
    if not (np.isfinite(cap) and cap > 0):
        raise RoomError(
            f"max_seconds must be a positive number of seconds, got {shown(max_seconds)}"
        )
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
) -> FloatArray:
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
