"""The room's energy decay per octave band, for the report's plot.

Kept apart from :mod:`.plot_data` so that the plan, which computes the decay once with the
filters it prepares (and the filter cache keeps), does not import the report's module.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..room import BANDS_HZ
from ..signals import scipy_signal

__all__ = ["DECAY_FLOOR_DB", "DECAY_POINTS", "energy_decay", "schroeder_db"]

DECAY_POINTS = 160
"""Points per band of the energy decay curves (enough for a smooth line on screen)."""

DECAY_FLOOR_DB = -90.0
"""Energy decay curves stop at this level (60 dB of decay plus a margin for the plot)."""


def schroeder_db(energy: NDArray[np.floating[Any]]) -> NDArray[np.float64]:
    """Schroeder's backward integral of ``energy`` (squared samples), in dB re its start.

    ``EDC(n) = sum_{m >= n} e(m)``, normalised so that ``EDC(0)`` is 0 dB (Schroeder 1965).
    """
    e = np.asarray(energy, dtype=np.float64)
    edc = np.cumsum(e[::-1])[::-1]
    if edc.size == 0 or edc[0] <= 0:
        return np.full(e.shape, -np.inf)
    with np.errstate(divide="ignore"):
        levels: NDArray[np.float64] = 10.0 * np.log10(edc / edc[0])
    return levels


def energy_decay(
    ir: NDArray[np.floating[Any]],
    samplerate: float,
    bands: tuple[float, ...] = BANDS_HZ,
    points: int = DECAY_POINTS,
    floor_db: float = DECAY_FLOOR_DB,
) -> dict[str, Any]:
    """Energy decay curves of an impulse response per octave band.

    Each band is filtered as for ISO 3382-1 measurements (a 6th-order Butterworth
    band-pass from ``fc / sqrt(2)`` to ``fc sqrt(2)``, as
    :func:`earfold.renderer.room.filters.measure_rt60` does), squared, summed over rows (ears) and
    integrated backwards (:func:`schroeder_db`).

    Parameters
    ----------
    ir : ndarray, shape (N,) or (rows, N)
    samplerate : float
    bands : tuple of float
        Octave band centres in Hz; bands whose upper edge is above 0.95 x Nyquist are left
        out.
    points : int
        Points per curve, evenly spaced in time from 0 to where the slowest band reaches
        ``floor_db`` (or the response ends).
    floor_db : float
        Lowest level kept; values below it read ``floor_db``.

    Returns
    -------
    dict
        ``{"bands_hz": [...], "time_s": [...], "levels_db": [[...] per band]}``.
    """
    signal = scipy_signal()

    x = np.asarray(ir, dtype=np.float64)
    x = x.reshape(-1, x.shape[-1])
    fs = float(samplerate)
    curves, kept = [], []
    for fc in bands:
        lo, hi = fc / math.sqrt(2.0), fc * math.sqrt(2.0)
        if hi >= 0.95 * fs / 2:
            continue
        sos = signal.butter(3, [lo, hi], btype="bandpass", fs=fs, output="sos")
        energy = np.sum(signal.sosfilt(sos, x, axis=-1) ** 2, axis=0)
        curves.append(schroeder_db(energy))
        kept.append(float(fc))
    n = x.shape[-1]
    end = 1
    for c in curves:
        below = np.flatnonzero(c <= floor_db)
        end = max(end, int(below[0]) if below.size else n - 1)
    idx = np.unique(np.linspace(0, min(end, n - 1), max(2, int(points))).round().astype(int))
    return {
        "bands_hz": kept,
        "time_s": [round(float(i) / fs, 5) for i in idx],
        "levels_db": [[round(float(max(v, floor_db)), 2) for v in c[idx]] for c in curves],
    }
