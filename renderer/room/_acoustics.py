"""Room acoustics of a shoebox by formula: reverberation times, air absorption, mixing time.

* **Bands.** Absorption and reverberation time are given per octave band,
  :data:`BANDS_HZ` = 125 Hz to 8 kHz.
* **Reverberation.** Sabine, ``T = 0.161 V / A`` with ``A = S mean(alpha) + 4 m V``, and
  Eyring, ``T = 0.161 V / (-S ln(1 - mean(alpha)) + 4 m V)`` (``mean(alpha)`` weighted by
  area, ``m`` the intensity attenuation of air per metre; Kuttruff, *Room Acoustics*,
  ch. 5). The late tail decays at the **Eyring** time: the presets and most studio rooms
  are absorptive (mean alpha 0.2-0.35), where Sabine's formula overestimates the decay
  (it gives a finite time even for alpha = 1), and Eyring's is exact for a uniformly
  absorbing room in the diffuse-field model. A room given by target RT60s gets the
  uniform absorption that Eyring's formula turns into exactly those times
  (:func:`absorption_for_rt60`), so the tail decays at the times asked for.
* **Air absorption** (optional, meant for the hall): ``m`` per band from the ISO 9613-1
  formula for pure tones at the band centres, 20 degrees C, 50 % relative humidity,
  101.325 kPa (:func:`air_attenuation_db_per_km`; the formula's constants as recalled
  from the standard -- its output agrees with the standard's table as we remember it:
  0.44, 1.31, 2.73, 4.66, 9.86, 29.7, 105 dB/km at 125 Hz ... 8 kHz).
* **Mixing time** after which the tail takes over, measured from the direct sound:
  by default ``sqrt(V)`` milliseconds (Polack's estimate; recalled).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import numpy.typing as npt

from ..errors import RoomError

__all__ = [
    "AIR_M_PER_METRE",
    "BANDS_HZ",
    "MAX_MEAN_ABSORPTION",
    "MAX_RT60",
    "MIN_RT60",
    "SABINE_CONSTANT",
    "absorption_for_rt60",
    "air_attenuation_db_per_km",
    "box_measures",
    "eyring_rt60",
    "polack_mixing_time",
    "sabine_rt60",
]

FloatArray = npt.NDArray[np.float64]

BANDS_HZ: tuple[float, ...] = (125.0, 250.0, 500.0, 1000.0, 2000.0, 4000.0, 8000.0)
"""Octave band centres (Hz) of every per-band figure: absorption, RT60, air absorption."""


SABINE_CONSTANT = 0.161
"""``24 ln(10) / c`` in s/m, rounded as Sabine's formula is usually written (REFERENCES)."""


MAX_MEAN_ABSORPTION = 0.99
"""Largest area-weighted mean absorption in a band. At 1 the room has no reverberation
at all (Eyring's time is 0): use no room instead."""

MIN_RT60 = 0.05
"""Shortest reverberation time (s) accepted in any band."""

MAX_RT60 = 10.0
"""Longest reverberation time (s) accepted in any band; bounds the tail's length."""


def air_attenuation_db_per_km(
    freqs: Sequence[float] | npt.NDArray[np.floating] = BANDS_HZ,
    *,
    temperature_c: float = 20.0,
    humidity_percent: float = 50.0,
    pressure_kpa: float = 101.325,
) -> FloatArray:
    """Pure-tone attenuation of sound in air, dB per km (ISO 9613-1:1993, eqs. 3-5).

    ``alpha = 8.686 f^2 [1.84e-11 (pa/pr)^-1 (T/T0)^(1/2) + (T/T0)^(-5/2)
    (0.01275 exp(-2239.1/T) / (frO + f^2/frO) + 0.1068 exp(-3352/T) / (frN + f^2/frN))]``
    dB/m, with the relaxation frequencies of oxygen and nitrogen ``frO``, ``frN`` from the
    molar concentration of water vapour. Constants as recalled from the standard.
    """
    f = np.asarray(freqs, dtype=float)
    t = temperature_c + 273.15
    t0, t01 = 293.15, 273.16
    pa = pressure_kpa / 101.325
    c_sat = -6.8346 * (t01 / t) ** 1.261 + 4.6151
    h = humidity_percent * 10.0**c_sat / pa
    fr_o = pa * (24.0 + 4.04e4 * h * (0.02 + h) / (0.391 + h))
    fr_n = pa * (t / t0) ** -0.5 * (9.0 + 280.0 * h * np.exp(-4.170 * ((t / t0) ** (-1 / 3) - 1)))
    alpha = (
        8.686
        * f**2
        * (
            1.84e-11 / pa * (t / t0) ** 0.5
            + (t / t0) ** -2.5
            * (
                0.01275 * np.exp(-2239.1 / t) / (fr_o + f**2 / fr_o)
                + 0.1068 * np.exp(-3352.0 / t) / (fr_n + f**2 / fr_n)
            )
        )
    )
    result: FloatArray = alpha * 1000.0
    return result


#: Intensity attenuation of air ``m`` (1/m) at :data:`BANDS_HZ`, 20 C / 50 % RH:
#: ``alpha_dB / (10 log10 e)``, the ``m`` of Sabine's ``4 m V``.
AIR_M_PER_METRE: tuple[float, ...] = tuple(
    float(x) for x in air_attenuation_db_per_km() / 1000.0 / (10.0 * math.log10(math.e))
)


def sabine_rt60(
    volume: float,
    surface: float,
    mean_absorption: npt.ArrayLike,
    air_m: npt.ArrayLike = 0.0,
) -> FloatArray:
    """Sabine's reverberation time ``0.161 V / (S alpha + 4 m V)`` in seconds."""
    a = np.asarray(mean_absorption, dtype=float)
    rt60: FloatArray = SABINE_CONSTANT * volume / (surface * a + 4.0 * np.asarray(air_m) * volume)
    return rt60


def eyring_rt60(
    volume: float,
    surface: float,
    mean_absorption: npt.ArrayLike,
    air_m: npt.ArrayLike = 0.0,
) -> FloatArray:
    """Eyring's reverberation time ``0.161 V / (-S ln(1 - alpha) + 4 m V)`` in seconds."""
    a = np.asarray(mean_absorption, dtype=float)
    with np.errstate(divide="ignore"):
        absorbed = -surface * np.log1p(-a) + 4.0 * np.asarray(air_m) * volume
        rt60: FloatArray = SABINE_CONSTANT * volume / absorbed
        return rt60


def polack_mixing_time(volume: float) -> float:
    """Mixing time in seconds after the direct sound: ``sqrt(V)`` ms (Polack; recalled)."""
    return math.sqrt(volume) * 1e-3


def box_measures(dimensions: Sequence[float]) -> tuple[float, float, FloatArray]:
    """Volume (m3), total surface (m2) and the area of each surface (m2, in the order
    front, back, left, right, floor, ceiling) of a ``(length, width, height)`` box."""
    length, width, height = dimensions
    areas = np.array(
        [
            width * height,
            width * height,
            length * height,
            length * height,
            length * width,
            length * width,
        ]
    )
    return length * width * height, float(areas.sum()), areas


def absorption_for_rt60(
    dimensions: Sequence[float], rt60: npt.ArrayLike, *, air_absorption: bool = False
) -> FloatArray:
    """Uniform absorption per band that gives ``rt60`` by Eyring's formula.

    ``alpha = 1 - exp(-(0.161 V / T - 4 m V) / S)``, the inverse of :func:`eyring_rt60`.

    Raises
    ------
    RoomError
        If a time is out of range, shorter than the room can give (alpha above
        :data:`MAX_MEAN_ABSORPTION`) or longer than its air allows.
    """
    volume, surface, _ = box_measures(dimensions)
    t = np.asarray(rt60, dtype=float)
    m = np.asarray(AIR_M_PER_METRE) if air_absorption else np.zeros(len(BANDS_HZ))
    shortest = eyring_rt60(volume, surface, MAX_MEAN_ABSORPTION, m)
    longest = np.where(m > 0, SABINE_CONSTANT / (4.0 * np.where(m > 0, m, 1.0)), np.inf)
    for band, value, lo, hi in zip(BANDS_HZ, t.tolist(), shortest, longest):
        if not MIN_RT60 <= value <= MAX_RT60:
            raise RoomError(
                f"RT60 {value!r} s at {band:g} Hz is out of range; give {MIN_RT60:g} to "
                f"{MAX_RT60:g} s"
            )
        if value < lo:
            raise RoomError(
                f"RT60 {value!r} s at {band:g} Hz is shorter than a {volume:.4g} m3 room can "
                f"give (at most {MAX_MEAN_ABSORPTION:g} absorption everywhere gives "
                f"{lo:.3g} s); ask for a longer time or a larger room"
            )
        if value >= hi:
            raise RoomError(
                f"RT60 {value!r} s at {band:g} Hz is longer than the air allows (its "
                f"absorption alone limits the time to {hi:.3g} s at 20 C / 50 % RH); ask for "
                "a shorter time or turn air_absorption off"
            )
    needed = SABINE_CONSTANT * volume / t - 4.0 * m * volume
    alpha: FloatArray = -np.expm1(-needed / surface)
    return alpha
