"""The synthetic room: a shoebox, where the listener sits, what its surfaces absorb.

A :class:`Room` describes a rectangular room well enough for the image-source early part
(:mod:`earfold.renderer.room.image_source`) and the statistical late tail (:mod:`earfold.renderer.room.late_tail`):

* **Frame.** Room coordinates are metres from one corner: ``x`` runs from the *back* wall
  (``x = 0``) to the *front* wall (``x = length``), ``y`` from the *right* wall (``y = 0``)
  to the *left* wall (``y = width``), ``z`` from the *floor* (``z = 0``) to the *ceiling*
  (``z = height``). The listener faces the front wall, so these axes are those of the
  listener frame of :mod:`earfold.renderer.geometry` (x front, y left, z up) translated to the
  listener's position: no rotation anywhere. A loudspeaker at direction ``v`` and distance
  ``d`` stands at ``listener + d * v``.
* **Bands.** Absorption and reverberation time are given per octave band,
  :data:`BANDS_HZ` = 125 Hz to 8 kHz.
* **Surfaces.** :data:`SURFACES` = front, back, left, right, floor, ceiling; each has an
  energy absorption coefficient per band in [0, 1]. A single surface may reflect
  everything (0) or nothing (1), but the area-weighted mean in each band must lie above
  0 (at 0 Eyring's and Sabine's times are infinite: the sound never dies away) and at
  most :data:`MAX_MEAN_ABSORPTION`, and the resulting time within
  :data:`MIN_RT60`..:data:`MAX_RT60`.
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
* **Critical distance** of an omnidirectional source, ``0.057 sqrt(V / T)`` (Schroeder,
  JASA 1996), reported per band with the Eyring time.

Presets (:data:`ROOMS`; names as the CLI spells them, figures computed by this module):

========  ====================================================================  ==========
name      room                                                                   RT60 (s)
========  ====================================================================  ==========
small     "compact control room": 4.6 x 3.9 x 2.9 m, 52.0 m3, treated front     0.35 / 0.27
          and rear walls, absorbing ceiling cloud, carpet; listener 1.9 m from   / 0.25 at
          the front wall on the centre line, ears at 1.2 m; speakers at 1.4 m;   125 / 500
          mean alpha 0.24-0.35; mixing time 7.2 ms                               / 1k Hz
medium    "mixing room": 7.4 x 5.8 x 3.4 m, 145.9 m3, partly treated;            0.66 / 0.49
          listener 2.8 m from the front wall, ears at 1.2 m; speakers at 2.0 m;  / 0.44
          mean alpha 0.18-0.28; mixing time 12.1 ms
large     "hall": 32 x 22 x 13 m, 9152 m3, given by target RT60s                 2.3 / 1.95
          2.3, 2.1, 1.95, 1.9, 1.75, 1.5, 1.1 s (125 Hz ... 8 kHz) with air      / 1.9
          absorption; listener 12 m from the front wall, ears at 1.2 m;
          speakers at 2.2 m (so that a 22.2 bottom layer at -30 degrees stays
          above the floor); mixing time 95.7 ms
========  ====================================================================  ==========

The presets' speaker radii let every built-in layout fit (22.2's zenith and bottom layer
included). Room files are JSON, read by :func:`load_room_file` (schema:
:func:`room_from_dict`).
"""

from __future__ import annotations

import math
import os
import types
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import RoomError
from ..files import read_json_file

__all__ = [
    "BANDS_HZ",
    "DEFAULT_ORDER",
    "MAX_ORDER",
    "ROOMS",
    "SABINE_CONSTANT",
    "SURFACES",
    "Room",
    "RoomError",
    "absorption_for_rt60",
    "air_attenuation_db_per_km",
    "eyring_rt60",
    "get_room",
    "load_room_file",
    "polack_mixing_time",
    "room_from_dict",
    "sabine_rt60",
]


BANDS_HZ: tuple[float, ...] = (125.0, 250.0, 500.0, 1000.0, 2000.0, 4000.0, 8000.0)
"""Octave band centres (Hz) of every per-band figure: absorption, RT60, air absorption."""

SURFACES: tuple[str, ...] = ("front", "back", "left", "right", "floor", "ceiling")
"""Surface names in the order of :attr:`Room.absorption`'s rows."""


SABINE_CONSTANT = 0.161
"""``24 ln(10) / c`` in s/m, rounded as Sabine's formula is usually written (REFERENCES)."""

DEFAULT_ORDER = 3
"""Image-source order by default: every path with up to three reflections."""

MAX_ORDER = 6
"""Highest image-source order accepted (377 images per loudspeaker)."""

DEFAULT_SPEAKER_RADIUS = 1.5
"""Loudspeaker distance (m) of a room file that gives none."""

MIN_DIMENSION = 1.0
"""Smallest room edge (m): a smaller 'room' is a box around the head."""

MAX_DIMENSION = 100.0
"""Largest room edge (m)."""

LISTENER_CLEARANCE = 0.1
"""The listener's ears keep this far (m) from every surface: about a head's radius."""

SPEAKER_CLEARANCE = 0.05
"""Each loudspeaker keeps this far (m) from every surface (the acoustic centre of a box
against a wall)."""

MAX_MEAN_ABSORPTION = 0.99
"""Largest area-weighted mean absorption in a band. At 1 the room has no reverberation
at all (Eyring's time is 0): use no room instead."""

MIN_RT60 = 0.05
"""Shortest reverberation time (s) accepted in any band."""

MAX_RT60 = 10.0
"""Longest reverberation time (s) accepted in any band; bounds the tail's length."""

MIN_MIXING_TIME_MS = 1.0
MAX_MIXING_TIME_MS = 500.0

MAX_ROOM_FILE_BYTES = 1 << 16
"""Largest room JSON file read (64 KiB; a room needs about one)."""

_ROOM_KEYS = (
    "name",
    "description",
    "dimensions",
    "listener",
    "speaker_radius",
    "absorption",
    "rt60",
    "air_absorption",
    "order",
    "mixing_time_ms",
    "seed",
)
_LISTENER_KEYS = ("to_front_wall", "to_left_wall", "ear_height")


# -- formulas ----------------------------------------------------------------------------


def air_attenuation_db_per_km(
    freqs: Sequence[float] | np.ndarray = BANDS_HZ,
    *,
    temperature_c: float = 20.0,
    humidity_percent: float = 50.0,
    pressure_kpa: float = 101.325,
) -> np.ndarray:
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
    return alpha * 1000.0


#: Intensity attenuation of air ``m`` (1/m) at :data:`BANDS_HZ`, 20 C / 50 % RH:
#: ``alpha_dB / (10 log10 e)``, the ``m`` of Sabine's ``4 m V``.
AIR_M_PER_METRE: tuple[float, ...] = tuple(
    float(x) for x in air_attenuation_db_per_km() / 1000.0 / (10.0 * math.log10(math.e))
)


def sabine_rt60(
    volume: float,
    surface: float,
    mean_absorption: np.ndarray | float,
    air_m: np.ndarray | float = 0.0,
) -> np.ndarray:
    """Sabine's reverberation time ``0.161 V / (S alpha + 4 m V)`` in seconds."""
    a = np.asarray(mean_absorption, dtype=float)
    return SABINE_CONSTANT * volume / (surface * a + 4.0 * np.asarray(air_m) * volume)


def eyring_rt60(
    volume: float,
    surface: float,
    mean_absorption: np.ndarray | float,
    air_m: np.ndarray | float = 0.0,
) -> np.ndarray:
    """Eyring's reverberation time ``0.161 V / (-S ln(1 - alpha) + 4 m V)`` in seconds."""
    a = np.asarray(mean_absorption, dtype=float)
    with np.errstate(divide="ignore"):
        absorbed = -surface * np.log1p(-a) + 4.0 * np.asarray(air_m) * volume
        return SABINE_CONSTANT * volume / absorbed


def polack_mixing_time(volume: float) -> float:
    """Mixing time in seconds after the direct sound: ``sqrt(V)`` ms (Polack; recalled)."""
    return math.sqrt(volume) * 1e-3


def _box(dimensions: Sequence[float]) -> tuple[float, float, np.ndarray]:
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
    dimensions: Sequence[float], rt60: Sequence[float] | np.ndarray, *, air_absorption: bool = False
) -> np.ndarray:
    """Uniform absorption per band that gives ``rt60`` by Eyring's formula.

    ``alpha = 1 - exp(-(0.161 V / T - 4 m V) / S)``, the inverse of :func:`eyring_rt60`.

    Raises
    ------
    RoomError
        If a time is out of range, shorter than the room can give (alpha above
        :data:`MAX_MEAN_ABSORPTION`) or longer than its air allows.
    """
    volume, surface, _ = _box(dimensions)
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
    return -np.expm1(-needed / surface)


# -- the room ----------------------------------------------------------------------------


@dataclass(frozen=True)
class Room:
    """A shoebox room with a listener in it (see the module docstring for the frame).

    Attributes
    ----------
    name : str
        Name shown in reports.
    dimensions : tuple of 3 float
        Length (x, back to front), width (y, right to left), height (z), metres.
    listener : tuple of 3 float
        Position of the centre of the head in room coordinates, metres.
    absorption : tuple of 6 tuples of 7 float
        Energy absorption coefficient per surface (:data:`SURFACES`) and band
        (:data:`BANDS_HZ`), each in [0, 1].
    speaker_radius : float
        Distance (m) of loudspeakers whose layout gives none.
    air_absorption : bool
        Whether air absorbs (ISO 9613-1, 20 C / 50 % RH) in the images and the tail.
    order : int
        Image-source order, 0 to :data:`MAX_ORDER`.
    mixing_time_ms : float or None
        When the tail takes over, after the direct sound; None for Polack's ``sqrt(V)`` ms.
    seed : int
        Seed of the tail's noise (combined with the render's seed).
    description : str
        One line for people.
    rt60_target : tuple of 7 float or None
        The RT60s the absorption was solved for, when the room was given that way.
    """

    name: str
    dimensions: tuple[float, float, float]
    listener: tuple[float, float, float]
    absorption: tuple[tuple[float, ...], ...]
    speaker_radius: float = DEFAULT_SPEAKER_RADIUS
    air_absorption: bool = False
    order: int = DEFAULT_ORDER
    mixing_time_ms: float | None = None
    seed: int = 0
    description: str = ""
    rt60_target: tuple[float, ...] | None = None

    def __post_init__(self) -> None:
        where = f"room {self.name!r}: "
        dims = tuple(float(d) for d in self.dimensions)
        if len(dims) != 3 or not all(MIN_DIMENSION <= d <= MAX_DIMENSION for d in dims):
            raise RoomError(
                f"{where}dimensions {self.dimensions!r} must be three lengths (length, width, "
                f"height) from {MIN_DIMENSION:g} to {MAX_DIMENSION:g} m"
            )
        pos = tuple(float(p) for p in self.listener)
        if len(pos) != 3 or not _inside(np.array(pos), dims, LISTENER_CLEARANCE):
            raise RoomError(
                f"{where}the listener at {_fmt(pos)} (x from the back wall, y from the right "
                f"wall, z from the floor) is not inside the {_fmt(dims)} m room with "
                f"{LISTENER_CLEARANCE:g} m to spare on every side"
            )
        alpha = np.asarray(self.absorption, dtype=float)
        if alpha.shape != (len(SURFACES), len(BANDS_HZ)):
            raise RoomError(
                f"{where}absorption must have one row per surface ({', '.join(SURFACES)}) and "
                f"one value per band ({_bands()}), got shape {alpha.shape!r}"
            )
        bad = np.argwhere(~((alpha >= 0.0) & (alpha <= 1.0)))
        if bad.size:
            s, b = bad[0]
            raise RoomError(
                f"{where}absorption {float(alpha[s, b])!r} of the {SURFACES[s]} at "
                f"{BANDS_HZ[b]:g} Hz is outside 0..1"
            )
        if not (
            isinstance(self.order, (int, np.integer))
            and not isinstance(self.order, bool)
            and 0 <= self.order <= MAX_ORDER
        ):
            raise RoomError(f"{where}order {self.order!r} must be an integer from 0 to {MAX_ORDER}")
        if not (_is_number(self.speaker_radius) and 0 < self.speaker_radius <= max(dims)):
            raise RoomError(
                f"{where}speaker_radius {self.speaker_radius!r} must be a positive distance in "
                f"metres, no longer than the room ({max(dims):g} m)"
            )
        if self.mixing_time_ms is not None and not (
            _is_number(self.mixing_time_ms)
            and MIN_MIXING_TIME_MS <= self.mixing_time_ms <= MAX_MIXING_TIME_MS
        ):
            raise RoomError(
                f"{where}mixing_time_ms {self.mixing_time_ms!r} must be {MIN_MIXING_TIME_MS:g} "
                f"to {MAX_MIXING_TIME_MS:g} ms, or left out for sqrt(V) ms"
            )
        if not (
            isinstance(self.seed, (int, np.integer))
            and not isinstance(self.seed, bool)
            and self.seed >= 0
        ):
            raise RoomError(f"{where}seed {self.seed!r} must be a non-negative integer")
        object.__setattr__(self, "dimensions", dims)
        object.__setattr__(self, "listener", pos)
        object.__setattr__(self, "absorption", tuple(tuple(float(v) for v in row) for row in alpha))
        object.__setattr__(self, "speaker_radius", float(self.speaker_radius))
        object.__setattr__(self, "order", int(self.order))
        object.__setattr__(self, "seed", int(self.seed))
        if self.rt60_target is not None:
            object.__setattr__(self, "rt60_target", tuple(float(t) for t in self.rt60_target))
        mean = self.mean_absorption
        for band, a in zip(BANDS_HZ, mean):
            if a <= 0.0:
                raise RoomError(
                    f"{where}nothing absorbs at {band:g} Hz (mean absorption 0), so the sound "
                    "would never die away; give some surface an absorption above 0"
                )
            if a > MAX_MEAN_ABSORPTION:
                raise RoomError(
                    f"{where}mean absorption {a:.3g} at {band:g} Hz leaves almost no "
                    f"reverberation (at most {MAX_MEAN_ABSORPTION:g}); use room 'none' for a dry "
                    "render"
                )
        for band, t in zip(BANDS_HZ, self.rt60):
            if not MIN_RT60 <= t <= MAX_RT60:
                raise RoomError(
                    f"{where}the absorption gives an RT60 of {t:.3g} s at {band:g} Hz (Eyring); "
                    f"rooms from {MIN_RT60:g} to {MAX_RT60:g} s are supported"
                )

    # -- geometry --------------------------------------------------------------------

    @property
    def volume(self) -> float:
        """Volume in m3."""
        return _box(self.dimensions)[0]

    @property
    def surface_area(self) -> float:
        """Total surface in m2."""
        return _box(self.dimensions)[1]

    @property
    def surface_areas(self) -> np.ndarray:
        """Area (m2) of each surface, in :data:`SURFACES` order."""
        return _box(self.dimensions)[2]

    def speaker_position(
        self, direction: np.ndarray, distance: float | None = None, *, label: str = "loudspeaker"
    ) -> np.ndarray:
        """Room coordinates of a loudspeaker at ``direction`` (listener frame).

        Parameters
        ----------
        direction : ndarray, shape (3,)
            Unit vector, x front, y left, z up.
        distance : float, optional
            Metres from the listener; :attr:`speaker_radius` when None.
        label : str
            Named in the error message.

        Raises
        ------
        RoomError
            If the loudspeaker would stand outside the room (or within
            :data:`SPEAKER_CLEARANCE` of a surface).
        """
        r = self.speaker_radius if distance is None else float(distance)
        v = np.asarray(direction, dtype=float).reshape(3)
        pos = np.asarray(self.listener) + r * v / np.linalg.norm(v)
        if not _inside(pos, self.dimensions, SPEAKER_CLEARANCE):
            raise RoomError(
                f"loudspeaker {label!r} at {r:g} m from the listener would stand at "
                f"{_fmt(pos)}, outside room {self.name!r} ({_fmt(self.dimensions)} m, listener "
                f"at {_fmt(self.listener)}); give the layout shorter distances or use a room "
                "with a smaller speaker_radius"
            )
        return pos

    # -- acoustics -------------------------------------------------------------------

    @property
    def alpha(self) -> np.ndarray:
        """Absorption coefficients, shape (6 surfaces, 7 bands)."""
        return np.array(self.absorption)

    @property
    def reflection(self) -> np.ndarray:
        """Pressure reflection coefficients ``beta = sqrt(1 - alpha)``, shape (6, 7)."""
        return np.sqrt(1.0 - self.alpha)

    @property
    def mean_absorption(self) -> np.ndarray:
        """Area-weighted mean absorption per band, shape (7,)."""
        return self.surface_areas @ self.alpha / self.surface_area

    @property
    def air_m(self) -> np.ndarray:
        """Intensity attenuation of air per metre per band (zeros without air absorption)."""
        return np.asarray(AIR_M_PER_METRE) if self.air_absorption else np.zeros(len(BANDS_HZ))

    @property
    def rt60_sabine(self) -> np.ndarray:
        """Sabine reverberation time per band, seconds."""
        return sabine_rt60(self.volume, self.surface_area, self.mean_absorption, self.air_m)

    @property
    def rt60_eyring(self) -> np.ndarray:
        """Eyring reverberation time per band, seconds."""
        return eyring_rt60(self.volume, self.surface_area, self.mean_absorption, self.air_m)

    @property
    def rt60(self) -> np.ndarray:
        """The reverberation time the tail decays at: Eyring's, per band."""
        return self.rt60_eyring

    @property
    def room_constant(self) -> np.ndarray:
        """``R = A / (1 - mean alpha)`` in m2 per band, ``A = S mean(alpha) + 4 m V``."""
        mean = self.mean_absorption
        return (self.surface_area * mean + 4.0 * self.air_m * self.volume) / (1.0 - mean)

    @property
    def mixing_time(self) -> float:
        """Seconds after the direct sound at which the tail takes over."""
        if self.mixing_time_ms is None:
            return polack_mixing_time(self.volume)
        return self.mixing_time_ms * 1e-3

    @property
    def critical_distance(self) -> np.ndarray:
        """``0.057 sqrt(V / T)`` per band in metres (Schroeder 1996), T = Eyring."""
        return 0.057 * np.sqrt(self.volume / self.rt60)

    def to_dict(self) -> dict:
        """JSON-ready description and derived figures (for reports and listings)."""
        length, width, height = self.dimensions
        x, y, z = self.listener

        def r(values: np.ndarray, n: int = 4) -> list[float]:
            return [round(float(v), n) for v in values]

        return {
            "name": self.name,
            "description": self.description,
            "dimensions_m": {"length": length, "width": width, "height": height},
            "volume_m3": round(self.volume, 3),
            "surface_m2": round(self.surface_area, 3),
            "listener": {
                "to_front_wall": round(length - x, 4),
                "to_left_wall": round(width - y, 4),
                "ear_height": round(z, 4),
            },
            "speaker_radius_m": self.speaker_radius,
            "bands_hz": list(BANDS_HZ),
            "absorption": {s: list(row) for s, row in zip(SURFACES, self.absorption)},
            "mean_absorption": r(self.mean_absorption),
            "rt60_target_s": None if self.rt60_target is None else list(self.rt60_target),
            "rt60_sabine_s": r(self.rt60_sabine),
            "rt60_eyring_s": r(self.rt60_eyring),
            "rt60_used": "eyring",
            "air_absorption": self.air_absorption,
            "air_attenuation_db_per_km": r(air_attenuation_db_per_km(), 3)
            if self.air_absorption
            else None,
            "order": self.order,
            "mixing_time_ms": round(self.mixing_time * 1e3, 3),
            "mixing_time_from": "given" if self.mixing_time_ms is not None else "Polack sqrt(V) ms",
            "critical_distance_m": r(self.critical_distance, 3),
            "seed": self.seed,
        }


def _is_number(value: object) -> bool:
    return (
        isinstance(value, (int, float, np.integer, np.floating))
        and not isinstance(value, bool)
        and math.isfinite(value)
    )


def _inside(pos: np.ndarray, dims: Sequence[float], clearance: float) -> bool:
    return bool(
        np.all(np.isfinite(pos))
        and np.all(pos >= clearance)
        and np.all(pos <= np.asarray(dims) - clearance)
    )


def _fmt(values: Sequence[float]) -> str:
    return "(" + ", ".join(f"{float(v):.3g}" for v in values) + ")"


def _bands() -> str:
    return ", ".join(f"{b:g}" for b in BANDS_HZ) + " Hz"


# -- JSON --------------------------------------------------------------------------------


def _where(origin: str | None) -> str:
    return f"{origin!r}: " if origin else ""


def _number(value: object, what: str, origin: str | None) -> float:
    if not _is_number(value):
        raise RoomError(f"{_where(origin)}{what} must be a number, got {value!r}")
    return float(value)


def _check_keys(data: Mapping, allowed: Sequence[str], what: str, origin: str | None) -> None:
    unknown = [k for k in data if k not in allowed]
    if unknown:
        raise RoomError(
            f"{_where(origin)}{what} has unknown key(s) {', '.join(map(repr, unknown))}; "
            f"valid keys: {', '.join(allowed)}"
        )


def _per_band(value: object, what: str, origin: str | None) -> list[float]:
    """A number (the same in every band) or a list of one number per band."""
    if _is_number(value):
        return [float(value)] * len(BANDS_HZ)
    if not isinstance(value, (list, tuple)) or len(value) != len(BANDS_HZ):
        raise RoomError(
            f"{_where(origin)}{what} must be a number or a list of {len(BANDS_HZ)} numbers "
            f"(one per band: {_bands()}), got {value!r}"
        )
    return [_number(v, f"{what} at {b:g} Hz", origin) for v, b in zip(value, BANDS_HZ)]


def room_from_dict(data: Mapping, *, name: str = "custom", origin: str | None = None) -> Room:
    """Build and validate a room from its JSON form.

    Schema (``rt60`` OR ``absorption``, not both)::

        {"name": "...", "description": "...",
         "dimensions": [length, width, height],          # metres; length is front-back
         "listener": {"to_front_wall": 1.9, "to_left_wall": 1.95, "ear_height": 1.2},
         "speaker_radius": 1.5,                           # metres (default 1.5)
         "absorption": {"front": [7 numbers] or one number, "back": ..., "left": ...,
                        "right": ..., "floor": ..., "ceiling": ...},
         "rt60": [7 numbers] or one number,               # seconds, 125 Hz ... 8 kHz
         "air_absorption": false, "order": 3, "mixing_time_ms": 12.0, "seed": 0}

    ``listener`` may be left out (centre of the floor plan, ears at 1.2 m). With ``rt60``
    the absorption is uniform, solved by Eyring's formula (:func:`absorption_for_rt60`).

    Raises
    ------
    RoomError
        For unknown keys, non-numbers, and values the room cannot have.
    """
    if not isinstance(data, Mapping):
        raise RoomError(
            f"{_where(origin)}a room must be a JSON object with 'dimensions' and 'absorption' "
            f"or 'rt60', got {type(data).__name__}"
        )
    _check_keys(data, _ROOM_KEYS, "the room", origin)
    texts = {}
    for key, default in (("name", name), ("description", "")):
        value = data.get(key, default)
        if not isinstance(value, str):
            raise RoomError(f"{_where(origin)}room {key} must be a string, got {value!r}")
        texts[key] = value
    if "dimensions" not in data:
        raise RoomError(f"{_where(origin)}the room is missing 'dimensions' [length, width, height]")
    dims = data["dimensions"]
    if not isinstance(dims, (list, tuple)) or len(dims) != 3:
        raise RoomError(
            f"{_where(origin)}'dimensions' must be [length, width, height] in metres, got {dims!r}"
        )
    length, width, height = (
        _number(v, f"dimension {k}", origin) for v, k in zip(dims, ("length", "width", "height"))
    )
    for value, what in ((length, "length"), (width, "width"), (height, "height")):
        if not MIN_DIMENSION <= value <= MAX_DIMENSION:
            raise RoomError(
                f"{_where(origin)}room {what} {value!r} m is out of range; give "
                f"{MIN_DIMENSION:g} to {MAX_DIMENSION:g} m"
            )
    listener = data.get(
        "listener", {"to_front_wall": length / 2, "to_left_wall": width / 2, "ear_height": 1.2}
    )
    if not isinstance(listener, Mapping):
        raise RoomError(
            f"{_where(origin)}'listener' must be an object with {', '.join(_LISTENER_KEYS)}, "
            f"got {listener!r}"
        )
    _check_keys(listener, _LISTENER_KEYS, "the listener", origin)
    missing = [k for k in _LISTENER_KEYS if k not in listener]
    if missing:
        raise RoomError(f"{_where(origin)}the listener is missing {', '.join(missing)}")
    to_front = _number(listener["to_front_wall"], "listener to_front_wall", origin)
    to_left = _number(listener["to_left_wall"], "listener to_left_wall", origin)
    ear = _number(listener["ear_height"], "listener ear_height", origin)
    position = (length - to_front, width - to_left, ear)

    has_alpha, has_rt60 = "absorption" in data, "rt60" in data
    if has_alpha == has_rt60:
        raise RoomError(
            f"{_where(origin)}give either 'absorption' (per surface: {', '.join(SURFACES)}) or "
            f"'rt60' (seconds per band: {_bands()}), {'not both' if has_alpha else 'one of them'}"
        )
    air = data.get("air_absorption", False)
    if not isinstance(air, bool):
        raise RoomError(f"{_where(origin)}air_absorption must be true or false, got {air!r}")
    rt60_target = None
    if has_rt60:
        rt60_target = tuple(_per_band(data["rt60"], "rt60", origin))
        try:
            alpha = absorption_for_rt60((length, width, height), rt60_target, air_absorption=air)
        except RoomError as exc:
            raise RoomError(f"{_where(origin)}{exc}") from None
        absorption = tuple(tuple(float(a) for a in alpha) for _ in SURFACES)
    else:
        raw = data["absorption"]
        if not isinstance(raw, Mapping):
            raise RoomError(
                f"{_where(origin)}'absorption' must be an object with a value per surface "
                f"({', '.join(SURFACES)}), got {raw!r}"
            )
        _check_keys(raw, SURFACES, "absorption", origin)
        missing = [s for s in SURFACES if s not in raw]
        if missing:
            raise RoomError(
                f"{_where(origin)}absorption is missing {', '.join(missing)}; every surface "
                f"({', '.join(SURFACES)}) needs a value"
            )
        absorption = tuple(
            tuple(_per_band(raw[s], f"absorption of the {s}", origin)) for s in SURFACES
        )

    options: dict = {}
    if "speaker_radius" in data:
        options["speaker_radius"] = _number(data["speaker_radius"], "speaker_radius", origin)
    if "mixing_time_ms" in data and data["mixing_time_ms"] is not None:
        options["mixing_time_ms"] = _number(data["mixing_time_ms"], "mixing_time_ms", origin)
    for key in ("order", "seed"):
        if key in data:
            value = data[key]
            if isinstance(value, bool) or not isinstance(value, int):
                raise RoomError(f"{_where(origin)}{key} must be an integer, got {value!r}")
            options[key] = value
    try:
        return Room(
            name=texts["name"],
            dimensions=(length, width, height),
            listener=position,
            absorption=absorption,
            air_absorption=air,
            description=texts["description"],
            rt60_target=rt60_target,
            **options,
        )
    except RoomError as exc:
        raise RoomError(f"{_where(origin)}{exc}") from None


def load_room_file(path: str | os.PathLike) -> Room:
    """Read a room from a JSON file (schema: :func:`room_from_dict`).

    The room's name defaults to the file name without its extension.

    Raises
    ------
    RoomError
        If the file cannot be read, is not valid JSON (the message gives the line and
        column) or does not describe a valid room.
    """
    data = read_json_file(path, kind="room", max_bytes=MAX_ROOM_FILE_BYTES, error=RoomError)
    return room_from_dict(data, name=Path(path).stem, origin=str(path))


# -- presets -----------------------------------------------------------------------------


def _preset(
    name: str,
    description: str,
    dims: tuple[float, float, float],
    to_front: float,
    radius: float,
    *,
    absorption: Mapping[str, Sequence[float]] | None = None,
    rt60: Sequence[float] | None = None,
    air: bool = False,
) -> Room:
    data: dict = {
        "name": name,
        "description": description,
        "dimensions": list(dims),
        "listener": {"to_front_wall": to_front, "to_left_wall": dims[1] / 2, "ear_height": 1.2},
        "speaker_radius": radius,
        "air_absorption": air,
    }
    if absorption is not None:
        data["absorption"] = {k: list(v) for k, v in absorption.items()}
    else:
        data["rt60"] = list(rt60)
    return room_from_dict(data)


# Absorption of the treated surfaces: typical values for the kind of treatment named
# (panel absorbers, bass traps, carpet on concrete, plasterboard), common practice, tuned
# so that Eyring's formula gives the room the time in the docstring.
ROOMS: Mapping[str, Room] = types.MappingProxyType(
    {
        "small": _preset(
            "small",
            "compact control room, treated front and rear walls, absorbing ceiling cloud",
            (4.6, 3.9, 2.9),
            1.9,
            1.4,
            absorption={
                "front": (0.40, 0.45, 0.40, 0.35, 0.30, 0.30, 0.28),
                "back": (0.45, 0.50, 0.50, 0.45, 0.40, 0.38, 0.35),
                "left": (0.12, 0.12, 0.15, 0.17, 0.18, 0.18, 0.18),
                "right": (0.12, 0.12, 0.15, 0.17, 0.18, 0.18, 0.18),
                "floor": (0.04, 0.07, 0.18, 0.32, 0.45, 0.50, 0.50),
                "ceiling": (0.40, 0.45, 0.48, 0.48, 0.48, 0.48, 0.48),
            },
        ),
        "medium": _preset(
            "medium",
            "mixing room, partly treated plasterboard walls and carpet",
            (7.4, 5.8, 3.4),
            2.8,
            2.0,
            absorption={
                "front": (0.30, 0.38, 0.42, 0.40, 0.36, 0.34, 0.30),
                "back": (0.32, 0.40, 0.45, 0.42, 0.38, 0.35, 0.30),
                "left": (0.14, 0.13, 0.13, 0.15, 0.16, 0.16, 0.15),
                "right": (0.14, 0.13, 0.13, 0.15, 0.16, 0.16, 0.15),
                "floor": (0.05, 0.06, 0.10, 0.20, 0.30, 0.35, 0.35),
                "ceiling": (0.25, 0.30, 0.32, 0.32, 0.32, 0.30, 0.28),
            },
        ),
        "large": _preset(
            "large",
            "hall with a long, warm decay; air absorption on",
            (32.0, 22.0, 13.0),
            12.0,
            2.2,
            rt60=(2.3, 2.1, 1.95, 1.9, 1.75, 1.5, 1.1),
            air=True,
        ),
    }
)
"""The preset rooms by CLI name (see the module docstring for their figures)."""


def get_room(name_or_path: str | os.PathLike | Room | None) -> Room | None:
    """A preset by name (case-insensitive), a room JSON file, or None for ``"none"``.

    Raises
    ------
    RoomError
        If the name is unknown and no ``.json`` file; the message lists the choices.
    """
    if name_or_path is None or isinstance(name_or_path, Room):
        return name_or_path
    if isinstance(name_or_path, str):
        key = name_or_path.strip().lower()
        if key == "none":
            return None
        if key in ROOMS:
            return ROOMS[key]
        if not (key.endswith(".json") or os.path.isfile(name_or_path)):
            raise RoomError(
                f"unknown room {name_or_path!r}; choose one of none, {', '.join(ROOMS)} or give "
                "a .json room file"
            )
    elif not isinstance(name_or_path, os.PathLike):
        raise RoomError(f"a room is a name or a file path, got {name_or_path!r}")
    return load_room_file(name_or_path)
