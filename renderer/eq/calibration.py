"""Level calibration: a render's level does not jump when only the layout or HRTF set changes.

The reference is a *diffuse pink-noise stem*: uncorrelated pink noise (power falling 3 dB per
octave) from 20 Hz to 20 kHz (or 0.95 x Nyquist at low rates) in every loudspeaker channel
at the same level, LFE silent. The calibration gain is chosen so that the binaural render
of that stem has the same BS.1770 integrated loudness as the stem itself read with every
channel weight 1.0 (LFE excluded). Then a stem of a given loudness renders at that
loudness, whatever the layout and the set; a mix's balance between channels is untouched.

The gain is computed from the render's filters, not from a trial render: for uncorrelated
inputs the output power spectrum at each ear is the sum over channels of the input power
spectrum times ``|H(f)|^2``, and BS.1770 loudness is the K-weighted power summed over
channels (ITU-R BS.1770-4, eq. 2), so

    gain^2 = integral(K^2 S) / ((1/N) sum_c sum_ear integral(K^2 |H_c,ear|^2 S))

with S the pink spectrum, K the K-weighting response and N the number of loudspeakers.
The gain scales every filter (the LFE path and the room tail too), so it costs nothing
per block; it is applied before the delivery stage and reported.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import cast

import numpy as np
from numpy.typing import NDArray

from ..loudness import k_weighting_sos
from ..signals import sos_response

#: Band of the reference pink noise (Hz): the audio band.
PINK_BAND_HZ = (20.0, 20000.0)

#: What the report says the reference is.
REFERENCE = (
    "diffuse pink noise, equal level in every loudspeaker, LFE silent: the render "
    "reads the stem's own BS.1770 loudness (channel weights 1.0)"
)


def pink_band(samplerate: float) -> tuple[float, float]:
    """The reference noise's band at a rate."""
    return PINK_BAND_HZ[0], min(PINK_BAND_HZ[1], 0.95 * samplerate / 2)


def reference_weighting(freqs: NDArray[np.float64], samplerate: float) -> NDArray[np.float64]:
    """``K(f)^2 S(f)``: the K-weighted pink reference spectrum on ``freqs`` (per bin)."""
    lo, hi = pink_band(samplerate)
    pink = np.zeros_like(freqs, dtype=float)
    band = (freqs >= lo) & (freqs <= hi)
    pink[band] = 1.0 / freqs[band]
    k = sos_response(k_weighting_sos(samplerate), freqs, samplerate)
    return cast(NDArray[np.float64], pink * np.abs(k) ** 2)


def calibration_gain(
    responses: Iterable[NDArray[np.float64]], speakers: int, samplerate: float
) -> float:
    """Linear gain that brings the diffuse reference to the stem's loudness.

    Parameters
    ----------
    responses : iterable of ndarray, shape (2, L)
        The whole response (direct, room, tail) of each loudspeaker channel to both ears;
        LFE channels left out (the reference has no LFE content).
    speakers : int
        How many loudspeaker channels ``responses`` yields.
    samplerate : float
    """
    filters = list(responses)
    if not filters or speakers <= 0:
        return 1.0
    length = max(r.shape[-1] for r in filters)
    n = max(8192, 1 << int(np.ceil(np.log2(length))))
    freqs = cast(NDArray[np.float64], np.fft.rfftfreq(n, 1.0 / samplerate))
    weight = reference_weighting(freqs, samplerate)
    out = 0.0
    for r in filters:
        spec = np.fft.rfft(r, n=n, axis=-1)
        out += float(np.sum(weight * np.abs(spec) ** 2))
    out /= speakers
    ref = float(np.sum(weight))
    if out <= 0:
        return 1.0
    return float(np.sqrt(ref / out))
