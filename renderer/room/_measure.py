"""Reverberation times measured back from an impulse response (ISO 3382-1).

The room's report measures its own filters with this, so that the times asked for and
the times the filters give can be compared.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import numpy.typing as npt

from ..errors import RoomError, shown
from ..signals import scipy_signal
from ._acoustics import BANDS_HZ

__all__ = ["measure_rt60"]

FloatArray = npt.NDArray[np.float64]


def _fit_decay(t: FloatArray, edc_db: FloatArray, top: float, bottom: float) -> float | None:
    """Seconds for 60 dB from a least-squares line through the EDC between two levels."""
    below_top = np.flatnonzero(edc_db <= top)
    below_bottom = np.flatnonzero(edc_db <= bottom)
    if below_top.size == 0 or below_bottom.size == 0:
        return None  # the decay does not reach the range: not measurable
    i0, i1 = int(below_top[0]), int(below_bottom[0])
    if i1 - i0 < 3:
        return None
    slope = np.polyfit(t[i0 : i1 + 1], edc_db[i0 : i1 + 1], 1)[0]
    return float(-60.0 / slope) if slope < 0 else None


def measure_rt60(
    ir: npt.ArrayLike, samplerate: float, bands: tuple[float, ...] = BANDS_HZ
) -> dict[str, Any]:
    """Reverberation times of an impulse response per octave band (ISO 3382-1).

    Each band is filtered with a 6th-order Butterworth band-pass from ``fc / sqrt(2)`` to
    ``fc sqrt(2)`` (:func:`scipy.signal.butter`, run forwards as a measuring filter runs),
    the energy decay curve is Schroeder's backward integral of ``h^2`` (summed over ears
    when ``ir`` has several rows), and a least-squares line is fitted between two levels:
    EDT 0 to -10 dB (x 6), T20 -5 to -25 dB (x 3), T30 -5 to -35 dB (x 2). Synthetic
    responses have no noise floor, so no noise compensation is applied.

    Parameters
    ----------
    ir : ndarray, shape (N,) or (..., N)
        Impulse response(s) along the last axis.
    samplerate : float
        Hz.
    bands : tuple of float
        Band centres (Hz); a band whose upper edge is above 0.95 x Nyquist is not measured.

    Returns
    -------
    dict
        ``{"bands_hz": [...], "edt_s": [...], "t20_s": [...], "t30_s": [...]}``, None where
        a band cannot be measured (too short a decay, or above Nyquist).
    """
    signal = scipy_signal()

    x = np.asarray(ir, dtype=float)
    if x.ndim < 1 or x.shape[-1] < 8:
        raise RoomError(f"an impulse response needs at least 8 samples, got shape {shown(x.shape)}")
    x = x.reshape(-1, x.shape[-1])
    fs = float(samplerate)
    t = np.arange(x.shape[-1]) / fs
    result: dict[str, Any] = {
        "bands_hz": [float(b) for b in bands],
        "edt_s": [],
        "t20_s": [],
        "t30_s": [],
    }
    for fc in bands:
        lo, hi = fc / math.sqrt(2.0), fc * math.sqrt(2.0)
        if hi >= 0.95 * fs / 2:
            for key in ("edt_s", "t20_s", "t30_s"):
                result[key].append(None)
            continue
        sos = signal.butter(3, [lo, hi], btype="bandpass", fs=fs, output="sos")
        energy = np.sum(signal.sosfilt(sos, x, axis=-1) ** 2, axis=0)
        edc = np.cumsum(energy[::-1])[::-1]
        if edc[0] <= 0:
            for key in ("edt_s", "t20_s", "t30_s"):
                result[key].append(None)
            continue
        edc_db = 10.0 * np.log10(np.maximum(edc / edc[0], 1e-300))
        result["edt_s"].append(_fit_decay(t, edc_db, 0.0, -10.0))
        result["t20_s"].append(_fit_decay(t, edc_db, -5.0, -25.0))
        result["t30_s"].append(_fit_decay(t, edc_db, -5.0, -35.0))
    return result
